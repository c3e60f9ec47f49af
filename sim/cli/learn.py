"""``supergame learn``: sessions of Q-learning firms, their limit play and the punishment they learn."""

from __future__ import annotations

import argparse
import os

import numpy as np

import sim.core.text as _text
from sim.cli._common import MARKET_FLAGS, add_market_flags, emit, market_table_from_args, parse_number, parse_numbers
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION, fmt_num, table
from sim.core.tomlfile import read_toml
from sim.evidence.thresholds import describe_market
from sim.learning.session import RUN_CONSTRAINTS, learn, learning_from_dict

HELP = "let Q-learning firms learn to price; limit outcomes, profit gain and impulse response"
DESCRIPTION = (
    "Run independent sessions of Q-learning firms (Calvano, Calzolari, Denicolo and Pastorello, 2020) on a "
    "market until their greedy strategies stop changing, then report what they converged to: limit prices "
    "and cycles, the profit gain (profit - Nash) / (collusive - Nash), and the impulse response to a "
    "one-period deviation. Settings come from the [market], [learning], [impulse] and [run] tables of FILE, "
    "from flags, or both (flags win). A [[strategies]] list seats learners (strategy = 'qlearning') against "
    "automata of `supergame simulate` (grim_trigger, tit_for_tat, forgiving_tit_for_tat, opportunist, ...). "
    "With automata that act at random the limit outcomes and the impulse response are seeded simulation "
    "estimates, labelled as such, not an exact cycle. The same file gives the same numbers as `supergame run` "
    "(random streams of cell 0)."
)

# table -> key -> (flag, parser kind); kinds: num, int, nums, str. The tables themselves are read by
# sim.learning.session.learning_from_dict; a flag overrides its key.
_FLAGS = {
    "learning": {
        "alpha": ("alpha", "num"),
        "beta": ("beta", "num"),
        "delta": ("delta", "num"),
        "m": ("m", "int"),
        "xi": ("xi", "num"),
        "grid": ("grid", "nums"),
        "k": ("k", "int"),
        "init": ("init", "str"),
        "convergence": ("convergence", "int"),
        "max_periods": ("max-periods", "int"),
        "near": ("near", "num"),
        "limit_periods": ("limit-periods", "int"),
    },
    "impulse": {
        "firm": ("impulse-firm", "int"),
        "action": ("impulse-action", "str"),
        "periods": ("impulse-periods", "int"),
    },
    "run": {
        "sessions": ("sessions", "int"),
        "seed": ("seed", "int"),
        "workers": ("workers", "int"),
    },
}


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file ([market], [learning], [impulse], [run])")
    add_market_flags(p)
    g = p.add_argument_group("learners (override [learning])")
    g.add_argument("--alpha", metavar="A", help="learning rate in (0, 1] (default 0.15)")
    g.add_argument("--beta", metavar="B", help="exploration decay > 0: explore with probability exp(-beta t) "
                                               "(default 4e-6)")
    g.add_argument("--delta", metavar="D", help="the learners' discount factor in [0, 1) (default 0.95)")
    g.add_argument("--m", metavar="M", help="number of actions on the grid (default 15)")
    g.add_argument("--xi", metavar="XI", help="widening of the grid beyond the Nash and collusive actions "
                                              "(default 0.1)")
    g.add_argument("--grid", metavar="A1,A2,...", help="the actions themselves instead of the published grid")
    g.add_argument("--k", metavar="K", help="memory: periods of past actions in the state (default 1)")
    g.add_argument("--init", metavar="INIT", help="initial Q-values: uniform (default) or zeros")
    g.add_argument("--convergence", metavar="C", help="converged after C periods without a change of any greedy "
                                                      "strategy (default 100000)")
    g.add_argument("--max-periods", metavar="N", help="cap on a session's periods (default 1e9)")
    g.add_argument("--near", metavar="TOL", help="'near' an outcome: within TOL of the Nash-to-collusive distance "
                                                 "(default 0.1)")
    g.add_argument("--limit-periods", metavar="N", help="with automata that act at random: periods of simulated "
                                                        "greedy play averaged by the limit estimate (default 10000)")
    g = p.add_argument_group("impulse response (override [impulse])")
    g.add_argument("--impulse-firm", metavar="F", help="firm forced to deviate, 1 to n (default 1)")
    g.add_argument("--impulse-action", metavar="A", help="its action: best_response (default) or a number "
                                                         "(nearest grid point)")
    g.add_argument("--impulse-periods", metavar="T", help="periods recorded after the deviation (default 15)")
    g = p.add_argument_group("run (override [run])")
    g.add_argument("--sessions", metavar="N", help="independent sessions (default 100)")
    g.add_argument("--seed", metavar="S", help="random seed (default 0)")
    g.add_argument("--workers", metavar="W", help="sessions run at once (default: the usable cores); results do "
                                                  "not depend on it")
    g.add_argument("--confidence", metavar="L", help="confidence level of the intervals (default 0.95)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write figures (impulse response, profit-gain histogram, heatmap "
                                                 "of limit prices) into DIR")


def _overrides(args) -> dict:
    """The flags given, as overrides of :func:`sim.learning.session.learning_from_dict` (``table.key`` ->
    (value, flag))."""
    out = {}
    for section, keys in _FLAGS.items():
        for key, (flag, kind) in keys.items():
            text = getattr(args, flag.replace("-", "_"), None)
            if text is None:
                continue
            if kind == "num":
                value = parse_number(flag, text)
            elif kind == "int":
                value = parse_number(flag, text, integer=True)
            elif kind == "nums":
                v = parse_numbers(flag, text)
                value = v if isinstance(v, list) else [v]
            else:
                value = text
            out[f"{section}.{key}"] = (value, f"--{flag}")
    return out


def build(args, doc: dict) -> dict:
    """Everything ``learn`` needs, validated, from FILE and flags: market, learner, run settings."""

    if args.file and "market" not in doc:
        raise InputError("market", f"{args.file} has no [market] table")
    base = doc.get("market", {})
    if not isinstance(base, dict):
        raise InputError("market", f"must be a table, got {base!r}")
    table, from_flags = market_table_from_args(args, dict(base))
    flag_of = {key: flag for flag, key in MARKET_FLAGS.items()}
    overrides = {f"market.{key}": (table[key], f"--{flag_of[key]}") for key in from_flags}
    overrides.update(_overrides(args))
    cfg = learning_from_dict(doc, overrides)
    confidence = getattr(args, "confidence", None)
    cfg["settings"]["confidence"] = (RUN_CONSTRAINTS["confidence"].check("--confidence", parse_number(
        "confidence", confidence)) if confidence is not None else 0.95)
    return cfg


def run(args) -> int:

    doc = read_toml(args.file) if args.file else {}
    cfg = build(args, doc)  # validates everything, the line-up's memory included
    s = cfg["settings"]
    if args.plot:
        _check_plot_dir(args.plot)
    result = learn(cfg["market"], cfg["learner"], **s)
    if args.plot:
        written = write_plots(result, args.plot)
    else:
        written = []
    if args.json:
        out = result.to_dict()
        out["market"] = cfg["market"].to_dict()
        out["figures"] = written
        out["caution"] = _text.CAUTION
        emit(dumps(out, indent=2))
        return 0
    emit(render(result, cfg["market"], written))
    return 0


def _check_plot_dir(path: str) -> None:
    if os.path.exists(path) and not os.path.isdir(path):
        raise InputError("--plot", f"{path} exists and is not a directory")


# ------------------------------------------------------------------------------------------------
# Text output
# ------------------------------------------------------------------------------------------------


def _pct(x) -> str:
    if x is None or x != x:
        return "-"
    return f"{100 * x:.1f} %"


def _ci(d: dict, digits: int = 4) -> str:

    if d.get("n", 0) < 2:
        return "-"
    return f"[{fmt_num(d['low'], digits)}, {fmt_num(d['high'], digits)}]"


def _same_learner(a, b) -> bool:

    da, db = a.to_dict(), b.to_dict()
    ga, gb = np.array(da.pop("grid")), np.array(db.pop("grid"))
    return da == db and ga.shape == gb.shape and bool(np.allclose(ga, gb, rtol=1e-9, atol=0))


def render(result, market, written=()) -> str:

    lu = result.lineup
    sm = result.summary()
    st = result.settings
    lvl = f"{100 * result.confidence:g} %"
    n = lu.n_seats
    ms = lu.market
    act = "quantity" if ms.quantity_setting else "price"
    firms = [f"firm {i + 1}" for i in range(n)]
    lines = [f"Market: {describe_market(market.to_dict(), market.spec().n_firms)}"]
    seated = [c for c in lu.learners if c is not None]
    same = len(seated) == n and all(_same_learner(x, seated[0]) for x in seated)
    for i, c in enumerate(lu.learners):
        if c is None:
            levels = ", ".join(fmt_num(v) for v in lu.grids[i])
            rnd = "; acts at random" if i in lu.random_seats else ""
            lines.append(f"Firm {i + 1}: {lu.names[i]} (automaton; {act}s {levels}{rnd})")
            continue
        if i > 0 and same:
            continue
        who = "Learners" if same else f"Firm {i + 1}"
        init = c.init if isinstance(c.init, str) else "given array"
        lines.append(f"{who}: Q-learning, alpha {fmt_num(c.alpha)}, beta {c.beta:g}, delta {fmt_num(c.delta)}, "
                     f"{c.m} {act} levels from {fmt_num(c.grid[0])} to {fmt_num(c.grid[-1])}, memory {c.k}, "
                     f"Q initialised {init}")
    lines.append(f"Sessions: {sm['sessions']} (seed {st['seed']}), converged after {st['convergence']} periods "
                 f"without a change of any greedy strategy, cap {st['max_periods']:g} periods; "
                 f"{st['workers']} worker(s), {result.elapsed:.1f} s")
    lines.append("")
    c = sm["converged"]
    per = sm["periods"]
    lines.append(f"Converged: {c['count']} of {c['n']} sessions ({_pct(c['share'])}, {lvl} CI "
                 f"{_pct(c['low'])} to {_pct(c['high'])})")
    if per["n"]:
        ci = f"[{per['low']:.4g}, {per['high']:.4g}]" if per["n"] > 1 else "-"
        lines.append(f"Periods to convergence: mean {per['mean']:.4g} {ci}, median {per['q50']:.4g}, "
                     f"5-95 % {per['q05']:.4g} to {per['q95']:.4g}")
    lines.append("")
    bm = sm["benchmarks"]
    rows = [[f"static Nash {act}", *bm["nash_actions"]], [f"joint-profit {act}", *bm["collusive_actions"]],
            ["static Nash profit", *bm["nash_profits"]], ["joint-profit profit", *bm["collusive_profits"]]]
    lines.append("Benchmarks (continuous actions)")
    lines.append(table(["", *firms], rows))
    lines.append("")
    exact = result.limit_exact
    lim = sm["limit"]
    if exact:
        lines.append(f"Limit outcomes: greedy play from the final state, means over the limit cycle ({sm['over']}); "
                     f"{lvl} confidence intervals across sessions")
    else:
        lines.append(f"Limit outcomes: ESTIMATED, not an exact cycle (firm {', '.join(map(str, lim['random_firms']))} "
                     f"acts at random): means of {lim['periods']} simulated periods of greedy play per session after "
                     f"{lim['burn_in']} discarded ({sm['over']}); {lvl} confidence intervals across sessions")
    rows = []
    for i in range(n):
        d = sm["limit_prices"][i]
        rows.append([f"price, firm {i + 1}", d["mean"], _ci(d)])
    for i in range(n):
        d = sm["limit_profits"][i]
        rows.append([f"profit, firm {i + 1}", d["mean"], _ci(d)])
    pg = sm["profit_gain"]
    rows.append(["profit gain", pg["mean"], _ci(pg)])
    if n > 1 and not ms.symmetric:
        for i in range(n):
            d = sm["firm_profit_gain"][i]
            rows.append([f"profit gain, firm {i + 1}", d["mean"], _ci(d)])
    lines.append(table(["", "mean", f"{lvl} CI"], rows, "lrl"))
    if pg["n"]:
        lines.append(f"  profit gain across sessions: 5 % {fmt_num(pg['q05'])}, quartiles {fmt_num(pg['q25'])} / "
                     f"{fmt_num(pg['q50'])} / {fmt_num(pg['q75'])}, 95 % {fmt_num(pg['q95'])}")
    nc, nn = sm["near_collusive"], sm["near_nash"]
    lines.append(f"  at or near the joint-profit outcome (every firm within {fmt_num(st['near'], 2)} of its Nash-to-"
                 f"collusive distance): {_pct(nc['share'])} ({_pct(nc['low'])} to {_pct(nc['high'])})")
    lines.append(f"  at or near static Nash: {_pct(nn['share'])} ({_pct(nn['low'])} to {_pct(nn['high'])})")
    if exact:
        total = sum(sm["cycle_lengths"].values())
        cyc = ", ".join(f"{k}: {_pct(v / total)}"
                        for k, v in sorted(sm["cycle_lengths"].items(), key=lambda x: int(x[0])))
        lines.append(f"  length of the limit cycle: {cyc}")
    else:
        lines.append("  length of the limit cycle: not defined (play after learning is random)")
    lines.append("")
    dev = st["deviator"]
    what = "its static best response (on its grid)" if isinstance(st["deviation"], str) else \
        f"{act} {fmt_num(float(lu.grids[dev][int(result.deviation_action[0])]))} (nearest grid point)"
    over = ("mean over sessions and the points of each limit cycle" if exact else
            f"ESTIMATED: mean over sessions and {lim['deviations']} simulated deviations per session")
    lines.append(f"Impulse response: firm {dev + 1} forced to {what} for one period, then everyone follows the "
                 f"learned strategies ({over})")
    ir = sm["impulse_response"]
    if ir["prices"]["mean"]:
        rows = []
        for tau, (pr, pi) in enumerate(zip(ir["prices"]["mean"], ir["profits"]["mean"])):
            label = "before" if tau == 0 else ("deviation" if tau == 1 else f"+{tau - 1}")
            rows.append([label, *pr, *pi])
        lines.append(table(["period", *[f"{act} {f}" for f in firms], *[f"profit {f}" for f in firms]], rows))
        rc = sm["rival_price_cut"]
        if rc:
            lines.append(f"  rivals' {act} in the period after the deviation: "
                         f"{'lower' if rc['mean'] > 0 else 'not lower'} than before by {fmt_num(rc['mean'])} "
                         f"{_ci(rc)}")
        g = sm["deviation_gain"]
        pays = sm["deviation_pays"]
        if exact:
            lines.append(f"  discounted value of deviating minus not deviating (exact, under the learned strategies): "
                         f"{fmt_num(g['mean'])} {_ci(g)}; the deviation pays at {_pct(pays['mean'])} of cycle points")
            r, rp = sm["returned"], sm["return_periods"]
            lines.append(f"  play returns to the pre-deviation cycle after {_pct(r['mean'])} of deviations, "
                         f"{fmt_num(rp['mean'], 2)} periods after the deviation on average")
        else:
            lines.append(f"  discounted value of deviating minus not deviating (ESTIMATED over {lim['value_periods']} "
                         f"periods, truncation error below {lim['value_truncation_bound']:.2g}): {fmt_num(g['mean'])} "
                         f"{_ci(g)}; the realised gain is positive in {_pct(pays['mean'])} of the simulated deviations")
            lines.append("  return to the pre-deviation cycle: not defined (play after learning is random)")
    if written:
        lines.append("")
        lines.extend(f"wrote {p}" for p in written)
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


# ------------------------------------------------------------------------------------------------
# Figures
# ------------------------------------------------------------------------------------------------


def write_plots(result, directory: str) -> list[str]:
    """Impulse response, histogram of profit gains, heatmap of limit prices (firms 1 and 2)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    os.makedirs(directory, exist_ok=True)
    lu = result.lineup
    sm = result.summary()
    n = lu.n_seats
    act = "quantity" if lu.market.quantity_setting else "price"
    written = []

    ir = sm["impulse_response"]["prices"]
    if ir["mean"]:
        mean = np.array(ir["mean"])
        lo = np.array(ir["low"])
        hi = np.array(ir["high"])
        tau = np.arange(mean.shape[0])
        fig, ax = plt.subplots(figsize=(7, 4.2))
        for i in range(n):
            label = f"firm {i + 1}" + (" (deviates)" if i == result.settings["deviator"] else "")
            ax.plot(tau, mean[:, i], marker="o", ms=3, label=label)
            if np.all(np.isfinite(lo[:, i])):
                ax.fill_between(tau, lo[:, i], hi[:, i], alpha=0.2)
        ax.axhline(float(np.mean(lu.nash_actions if act == "quantity" else lu.nash_prices)), color="grey", ls=":",
                   label=f"static Nash {act}")
        ax.axhline(float(np.mean(lu.collusive_actions if act == "quantity" else lu.collusive_prices)), color="grey",
                   ls="--", label=f"joint-profit {act}")
        ax.axvline(1, color="black", lw=0.5)
        ax.set_xlabel("period (0: before the deviation, 1: deviation)")
        ax.set_ylabel(act)
        ax.set_title(f"Impulse response, mean over {sm['converged']['count'] or sm['sessions']} sessions")
        ax.legend(fontsize=8)
        fig.tight_layout()
        path = os.path.join(directory, "impulse_response.png")
        fig.savefig(path, dpi=120)
        plt.close(fig)
        written.append(path)

    sel = result.converged if result.converged.any() else np.ones_like(result.converged)
    fig, ax = plt.subplots(figsize=(7, 4.2))
    h = sm["profit_gain_histogram"]
    edges = np.array(h["edges"])
    ax.bar(edges[:-1], h["counts"], width=np.diff(edges), align="edge", edgecolor="white")
    ax.axvline(0, color="grey", ls=":", label="static Nash")
    ax.axvline(1, color="grey", ls="--", label="joint profit")
    ax.axvline(sm["profit_gain"]["mean"], color="C3", label="mean")
    ax.set_xlabel("profit gain (profit - Nash) / (collusive - Nash)")
    ax.set_ylabel("sessions")
    ax.set_title("Profit gain across sessions")
    ax.legend(fontsize=8)
    fig.tight_layout()
    path = os.path.join(directory, "profit_gain_histogram.png")
    fig.savefig(path, dpi=120)
    plt.close(fig)
    written.append(path)

    fig, ax = plt.subplots(figsize=(5.6, 4.8))
    x = result.limit_actions[sel, 0]
    y = result.limit_actions[sel, 1]
    g0, g1 = lu.grids[0], lu.grids[1]

    def edges_of(g):
        mid = (g[1:] + g[:-1]) / 2
        return np.concatenate([[g[0] - (mid[0] - g[0])], mid, [g[-1] + (g[-1] - mid[-1])]])

    H, xe, ye = np.histogram2d(x, y, bins=[edges_of(g0), edges_of(g1)])
    im = ax.pcolormesh(xe, ye, H.T, cmap="viridis")
    fig.colorbar(im, ax=ax, label="sessions")
    ax.plot([lu.nash_actions[0]], [lu.nash_actions[1]], "w^", label="static Nash")
    ax.plot([lu.collusive_actions[0]], [lu.collusive_actions[1]], "w*", ms=10, label="joint profit")
    ax.set_xlabel(f"firm 1 mean limit {act}")
    ax.set_ylabel(f"firm 2 mean limit {act}")
    ax.set_title(f"Limit {act}s across sessions")
    ax.legend(fontsize=8, loc="lower right")
    fig.tight_layout()
    path = os.path.join(directory, "limit_prices_heatmap.png")
    fig.savefig(path, dpi=120)
    plt.close(fig)
    written.append(path)
    return written
