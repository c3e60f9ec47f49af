"""``supergame simulate``: play a line-up of strategies many times and report how long collusion lasts."""

from __future__ import annotations

import argparse

from sim.cli._common import (
    MARKET_FLAGS,
    add_market_flags,
    emit,
    flag_error,
    market_table_from_args,
    parse_number,
    parse_numbers,
)
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION, fmt_num, table
from sim.core.tomlfile import read_toml
from sim.evidence.simplots import simulation_figures
from sim.evidence.thresholds import AGREEMENT_NAMES, describe_market
from sim.models.market import market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.simulation.engine import simulate, simulation_from_dict

HELP = "simulate a line-up of strategies: persistence of collusion against the analytic baseline"
DESCRIPTION = (
    "Play a line-up of automaton strategies in a market for many periods and replications, with perfect or "
    "price-only monitoring, demand shocks, perception and implementation errors. Prints the share of collusive "
    "periods, price wars, collusive spells, time to first breakdown, profits, prices and consumer surplus, each "
    "with a confidence interval, beside the analytic prediction where one exists. Settings come from the tables "
    "of FILE ([market], [collusion], [monitoring], [[strategies]], [run]), from flags, or both (flags win)."
)

# flag -> key of [run] / [monitoring]
_RUN_FLAGS = {"periods": ("periods", True), "replications": ("replications", True), "delta": ("delta", False),
              "seed": ("seed", True), "continuation": ("continuation", False), "paths": ("paths", True)}
_MON_FLAGS = {"sigma": "sigma", "perception_error": "perception_error",
              "implementation_error": "implementation_error"}


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file (kind = 'simulate')")
    add_market_flags(p)
    g = p.add_argument_group("agreement and line-up")
    g.add_argument("--agreement", choices=["joint", "symmetric", "proportional"],
                   help="collusive outcome the level 'collusive' stands for (default: joint)")
    g.add_argument("--actions", metavar="A", help="agreed collusive actions per product (a1,a2,...)")
    g.add_argument("--strategy", action="append", metavar="NAME[:KEY=VALUE,...]",
                   help="a seat's strategy, e.g. grim_trigger or finite_punishment:length=3 (repeat once per "
                        "firm in seat order; a single --strategy is played by every firm; add seats=N to repeat "
                        "one; list values with ';', e.g. collude=20;22;24)")
    g = p.add_argument_group("monitoring")
    g.add_argument("--signal", choices=["perfect", "price"], help="what firms observe (default: perfect)")
    g.add_argument("--noise", choices=["lognormal", "normal"], help="distribution of the demand shock")
    g.add_argument("--sigma", metavar="S", help="standard deviation of the demand shock (default 0: none)")
    g.add_argument("--perception-error", dest="perception_error", metavar="E",
                   help="probability of misreading each rival's conduct")
    g.add_argument("--implementation-error", dest="implementation_error", metavar="E",
                   help="probability that a firm's action is replaced by cheating")
    g = p.add_argument_group("run")
    g.add_argument("--periods", metavar="N", help="periods per replication (default 1000)")
    g.add_argument("--replications", metavar="N", help="replications (default 1000)")
    g.add_argument("--horizon", choices=["fixed", "random"], help="fixed number of periods or random end")
    g.add_argument("--continuation", metavar="C", help="random horizon: probability the game goes on (default 0.99)")
    g.add_argument("--delta", metavar="D", help="discount factor of payoffs (default 0.95)")
    g.add_argument("--seed", metavar="N", help="random seed (default 0)")
    g.add_argument("--threads", metavar="N", help="threads (results do not depend on it)")
    g.add_argument("--confidence", metavar="L", help="confidence level of the intervals (default 0.95)")
    p.add_argument("--paths", metavar="N", help="record the full paths of the first N replications")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write figures (price path, collusive share, spell survival) to DIR")


def _value(text: str):
    t = text.strip()
    if t.lower() in ("true", "false"):
        return t.lower() == "true"
    if ";" in t:
        return [_value(x) for x in t.split(";")]
    try:
        v = float(t)
    except ValueError:
        return t
    return int(v) if v.is_integer() and not any(ch in t for ch in ".eE") else v


def parse_strategy_flag(text: str, k: int) -> dict:
    """``name[:key=value,...]`` -> an experiment-file entry."""
    name, _, rest = text.partition(":")
    entry = {"strategy": name.strip()}
    if rest.strip():
        for part in rest.split(","):
            key, eq, val = part.partition("=")
            if not eq or not key.strip():
                raise InputError(f"--strategy[{k}]", f"expected NAME:KEY=VALUE,..., got {text!r}")
            entry[key.strip()] = _value(val)
    return entry


def settings(args) -> dict:
    """Everything :func:`sim.simulation.engine.simulate` needs, from FILE and flags (flags win)."""

    doc = read_toml(args.file) if args.file else {}
    base = doc.get("market", {}) if doc else {}
    if not isinstance(base, dict):
        raise InputError("market", "must be a table")
    table, from_flags = market_table_from_args(args, base)
    if not table:
        raise InputError("market", "describe the market in FILE's [market] table or with flags (--cost, ...)")
    try:
        market = market_from_dict(table)
    except InputError as exc:
        # without FILE every market setting (a missing one too) is a flag's
        raise flag_error(exc, from_flags if args.file else set(MARKET_FLAGS.values())) from None
    doc = dict(doc)
    doc["market"] = table
    if args.strategy:
        doc["strategies"] = [parse_strategy_flag(s, k + 1) for k, s in enumerate(args.strategy)]
    if "strategies" not in doc:
        raise InputError("--strategy", "give the line-up: [[strategies]] entries in FILE or --strategy flags")
    mon_flags = {}
    if args.signal:
        mon_flags["signal"] = args.signal
    if args.noise:
        mon_flags["noise"] = args.noise
    for flag, key in _MON_FLAGS.items():
        if getattr(args, flag) is not None:
            mon_flags[key] = parse_number(flag.replace("_", "-"), getattr(args, flag))
    mon_table = dict(doc.get("monitoring", {})) if isinstance(doc.get("monitoring", {}), dict) else doc["monitoring"]
    if isinstance(mon_table, dict):
        mon_table.update(mon_flags)
        doc["monitoring"] = mon_table
    try:
        cfg = simulation_from_dict(doc)
    except InputError as exc:
        if exc.key.startswith("monitoring."):
            k = exc.key.split(".", 1)[1]
            if k in mon_flags:
                raise InputError(f"--{k.replace('_', '-')}", exc.message) from None
        raise
    # flags on top of [run]
    run_flags = set()
    for flag, (key, integer) in _RUN_FLAGS.items():
        val = getattr(args, flag)
        if val is not None:
            cfg["run"][key] = parse_number(flag, val, integer=integer)
            run_flags.add(key)
    if args.horizon:
        cfg["run"]["horizon"] = args.horizon
        run_flags.add("horizon")
    if args.agreement:
        cfg["agreement"] = args.agreement
    if args.actions:
        a = parse_numbers("actions", args.actions)
        cfg["actions"] = a if isinstance(a, list) else [a]
    if cfg["actions"] is not None:
        cfg["agreement"] = "given"
    if args.plot and cfg["run"]["paths"] == 0:
        cfg["run"]["paths"] = 1  # the price-path figure needs one recorded replication
    n = market.spec().n_firms
    if args.strategy and len(cfg["strategies"]) == 1 and "seats" not in cfg["strategies"][0]:
        cfg["strategies"][0]["seats"] = n
    cfg["threads"] = parse_number("threads", args.threads, integer=True) if args.threads else None
    cfg["confidence"] = parse_number("confidence", args.confidence) if args.confidence else 0.95
    cfg["flags"] = {"run": run_flags, "strategies": bool(args.strategy), "monitoring": set(mon_flags)}
    _ = monitoring_from_dict  # imported for its validation side effects in simulation_from_dict
    return cfg


def _rename(exc: InputError, cfg: dict) -> InputError:
    """Name the flag rather than the table key when a flag gave the value."""
    key = exc.key
    if key.startswith("run.") and key[4:] in cfg["flags"]["run"]:
        return InputError(f"--{key[4:]}", exc.message)
    if key.startswith("monitoring.") and key[11:] in cfg["flags"]["monitoring"]:
        return InputError(f"--{key[11:].replace('_', '-')}", exc.message)
    if cfg["flags"]["strategies"] and key.startswith("strategies"):
        return InputError("--strategy" + key[len("strategies"):], exc.message)
    if key == "threads":
        return InputError("--threads", exc.message)
    if key == "confidence":
        return InputError("--confidence", exc.message)
    return exc


def run(args) -> int:

    cfg = settings(args)
    r = cfg["run"]
    try:
        res = simulate(cfg["market"], cfg["strategies"], cfg["monitoring"], periods=r["periods"],
                       replications=r["replications"], delta=r["delta"], seed=r["seed"], horizon=r["horizon"],
                       continuation=r["continuation"], paths=r["paths"], agreement=cfg["agreement"],
                       actions=cfg["actions"], threads=cfg["threads"], confidence=cfg["confidence"],
                       key=(0,))  # the key of cell 1 of `supergame run FILE` (sim.runner.kinds: stream keys)
    except InputError as exc:
        raise _rename(exc, cfg) from None
    if args.plot:

        simulation_figures(res, args.plot)
    if args.json:
        out = res.to_dict()
        out["market"] = cfg["market"].to_dict()
        emit(dumps(out, indent=2))
        return 0
    emit(render(res, cfg))
    return 0


# --------------------------------------------------------------------------------------------------
# Text output
# --------------------------------------------------------------------------------------------------

_METRIC_ROWS = (
    ("collusive_share", "share of periods in which all firms collude"),
    ("war_share", "share of price-war periods"),
    ("wars_per_replication", "price wars per replication"),
    ("war_frequency", "price wars started per period"),
    ("war_length", "mean length of a price war (periods, its deviation period included)"),
    ("punishment_length", "mean length of a punishment phase (periods)"),
    ("spell_length", "mean length of a collusive spell (periods)"),
    ("first_breakdown", "time to first breakdown (period)"),
    ("broken_down", "share of replications that broke down"),
    ("price", "mean market price"),
    ("overcharge", "overcharge over the static-Nash price"),
    ("consumer_surplus", "mean consumer surplus"),
    ("joint_profit", "mean joint profit per period"),
    ("profit_gain", "profit gain (profit - Nash) / (collusive - Nash)"),
)


def _analytic(res) -> dict:
    """metric -> (analytic value, source) from the baseline."""
    b = res.baseline
    out = {}
    tp = b.get("trigger_price")
    fb = b.get("first_breakdown")
    if tp is not None:
        src = "Green and Porter (1984)"
        out["collusive_share"] = (tp["collusive_share"], src + ", this horizon")
        out["war_share"] = (tp["war_share"], src + f", this horizon; long run {tp['war_share_long_run']:.4f}")
        out["spell_length"] = (tp["expected_collusive_spell"], src + ": 1 / war probability")
        if tp["war_length"] is not None:
            out["war_length"] = (float(tp["war_length"]), src + ": T")
        if fb is None:
            out["first_breakdown"] = (tp["expected_first_breakdown"], src + ": 1 + 1 / war probability")
    pl = b.get("punishment_length")
    if pl is not None:
        out["punishment_length"] = (pl["value"], pl["source"])
    if fb is not None:
        rate = 1.0 - (1.0 - fb["tremble_rate"]) * (1.0 - fb["misreading_rate"])
        src = ("geometric" if fb["geometric"] else "shifted geometric") + f", rate {rate:.4g}"
        val = fb["expected_within_horizon"] if fb["expected_within_horizon"] is not None else fb["expected"]
        out["first_breakdown"] = (val, src + (", within the horizon" if fb["expected_within_horizon"] is not None
                                              else ""))
        if fb.get("collusive_share") is not None and "collusive_share" not in out:
            out["collusive_share"] = (fb["collusive_share"], "no recovery after a breakdown")
            out["war_share"] = (1.0 - fb["collusive_share"], "no recovery after a breakdown")
    return out


def _ci(e) -> str:

    if e.low != e.low:
        return "-"
    return f"[{fmt_num(e.low)}, {fmt_num(e.high)}]"


def render(res, cfg) -> str:

    s = res.settings
    run = s["run"]
    mon = s["monitoring"]
    lines = [f"Market: {describe_market(cfg['market'].to_dict(), cfg['market'].spec().n_firms)}",
             f"Agreement: {AGREEMENT_NAMES.get(s['agreement'], s['agreement'])}"]
    seats = []
    for i, st in enumerate(s["lineup"]):
        params = ", ".join(f"{k} {v}" for k, v in st.items() if k != "strategy" and k != "states")
        seats.append(f"firm {i + 1} {st['strategy']}" + (f" ({params})" if params else ""))
    lines.append("Line-up: " + "; ".join(seats))
    shock = "no demand shock" if mon["sigma"] == 0 else f"{mon['noise']} demand shock, sigma {fmt_num(mon['sigma'])}"
    lines.append(f"Monitoring: {mon['signal']}; {shock}; perception error {fmt_num(mon['perception_error'])}; "
                 f"implementation error {fmt_num(mon['implementation_error'])}")
    hz = ("fixed horizon" if run["horizon"] == "fixed"
          else f"random horizon, continuation {fmt_num(run['continuation'])}")
    lines.append(f"Run: {run['periods']} periods ({hz}), {run['replications']} replications, delta "
                 f"{fmt_num(run['delta'])}, seed {run['seed']}")
    lines.append("")
    pct = f"{100 * s['confidence']:g}%"
    lines.append(f"Persistence of collusion (simulated, {pct} confidence intervals across replications; analytic "
                 "prediction where one exists)")
    ana = _analytic(res)
    rows = []
    for key, label in _METRIC_ROWS:
        e = res.punishment_length if key == "punishment_length" else res.metrics[key]
        a = ana.get(key)
        note = " (at least)" if e.note.startswith("at least") else ""
        rows.append([label, fmt_num(e.value) + note, _ci(e), fmt_num(a[0]) if a else "-", a[1] if a else ""])
    lines.append(table(["metric", "simulated", f"{pct} CI", "analytic", "source"], rows, "lrlrl"))
    lines.append("")
    ref = res.reference
    frows = []
    for i in range(s["n_firms"]):
        fm = res.firm_metrics
        frows.append([f"firm {i + 1}", s["lineup"][i]["strategy"], fm["profit"][i].value, _ci(fm["profit"][i]),
                      fm["discounted_profit"][i].value, _ci(fm["discounted_profit"][i]), fm["profit_gain"][i].value,
                      _ci(fm["profit_gain"][i]), ref["nash_profit"][i], ref["collusive_profit"][i]])
    lines.append(table(["", "strategy", "mean profit", "CI", "discounted profit", "CI", "profit gain", "CI",
                        "Nash profit", "collusive profit"], frows, "llrlrlrlrr"))
    tp = res.baseline.get("trigger_price")
    if tp is not None:
        lines.append(f"  trigger-price model: expected discounted profit over this horizon "
                     f"{fmt_num(tp['discounted_profit'])} (infinite-horizon value {fmt_num(tp['value'])}); the "
                     f"scheme is {'an' if tp['equilibrium'] else 'not an'} equilibrium at this discount factor")
    th = res.baseline.get("thresholds") or []
    if th:
        lines.append("")
        lines.append("Critical discount factors of the schemes in the line-up, at the levels they play (analytic, "
                     "infinite-horizon benchmark; '-': not sustainable below one)")
        trows = [[t["scheme"], ", ".join(f"firm {k}" for k in t["seats"]), t["market"], t["effective_delta"],
                  "yes" if t["clears"] else "no", t["source"]] for t in th]
        clears = "clears (infinite horizon)" if run["horizon"] == "fixed" else "clears"
        lines.append(table(["scheme", "played by", "threshold", "discount factor", clears, "source"], trows,
                           "llrrll"))
        if run["horizon"] == "random":
            lines.append("  with a random horizon the discount factor that matters is delta x continuation")
    notes = res.baseline.get("notes") or []
    if notes:
        if not th:
            lines.append("")
        lines.extend(f"  note: {x}" for x in notes)
    if res.paths is not None:
        lines.extend(["", *_render_paths(res)])
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


def _render_paths(res, max_periods: int = 20) -> list:

    P = res.paths
    out = []
    for r in range(len(P["length"])):
        H = int(P["length"][r])
        out.append(f"Path of replication {r + 1} (first {min(H, max_periods)} of {H} periods)")
        rows = []
        for t in range(min(H, max_periods)):
            states = ", ".join(P["state_names"][i][int(P["states"][r, t, i])] for i in range(len(P["state_names"])))
            acts = ", ".join(fmt_num(x) for x in P["actions"][r, t])
            rows.append([t + 1, states, acts, P["market_price"][r, t], "yes" if P["collusive"][r, t] else "no"])
        out.append(table(["period", "states", "actions", "market price", "collusive"], rows, "rllrl"))
    return out
