"""How a simulate result is shown: the terminal report, the JSON document and the figures (see
:mod:`sim.evidence.render`).

The figures are the price path of the first recorded replication (with its price wars shaded and the
static-Nash and collusive prices as reference lines), the share of replications colluding in each period beside
the analytic prediction, and the Kaplan-Meier survival of collusive spells with its confidence band beside the
geometric law of the trigger-price model (Green and Porter, 1984). ``supergame simulate --plot`` saves them and
the bundle of a ``simulate`` run without a sweep shows them, drawn from the same stored result.
"""

from __future__ import annotations

import numpy as np

from sim.core.stats import wilson_band
from sim.core.text import CAUTION, fmt_num, table
from sim.evidence.answers import simulate_headline
from sim.evidence.figure_sizes import SHARE_BAND_WORDS, share_trials
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, Renderer, pyplot
from sim.evidence.simulate_enforced import enforced_figure, enforced_json, enforced_text, state_play_text
from sim.evidence.simulate_states import contingent_figure
from sim.evidence.thresholds import AGREEMENT_NAMES, describe_market
from sim.simulation.analysis import SimulateResult

__all__ = ["RENDERER", "as_json", "console", "figures"]

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


def _simulation_text(res, market: dict) -> list[str]:
    s = res.settings
    run = s["run"]
    mon = s["monitoring"]
    lines = [f"Market: {describe_market(market, s['n_firms'])}",
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
    return lines


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


def _deviation_text(dev) -> list[str]:
    who = "the deviator given in the file" if dev.custom else "its strategy after one deviation in the first period"
    g = dev.gain
    verdict = ("the deviation pays: the line-up is not an equilibrium of the simulated game" if dev.pays
               else "the deviation does not pay (necessary, not sufficient, for equilibrium)")
    lines = ["", f"Deviation check: firm {dev.firm} plays {who} (paired replications, same streams)",
             f"  gain from deviating (discounted profit): {fmt_num(g.value)} {_ci(g)}; {verdict}",
             f"  discounted profit conforming {fmt_num(dev.conform_value)}, deviating {fmt_num(dev.deviate_value)}"]
    if dev.analytic_gain == dev.analytic_gain:
        lines.append(f"  closed-form gain without noise (Friedman, 1971): {fmt_num(dev.analytic_gain)}")
    return lines


def console(result: SimulateResult) -> str:
    """The terminal report of a simulate result.

    Parameters
    ----------
    result : SimulateResult

    Returns
    -------
    str
    """
    lines = [simulate_headline(result), "", *_simulation_text(result.simulation, result.market)]
    if result.deviation is not None:
        lines.extend(_deviation_text(result.deviation))
    if result.enforcement is not None:
        lines.extend(enforced_text(result.enforcement))
    if result.states is not None:
        lines.extend(state_play_text(result.states))
    lines.extend(["", CAUTION])
    return "\n".join(lines)


def as_json(result: SimulateResult) -> dict:
    """The ``--json`` document: the simulation's document with the market's table and the deviation check.

    Parameters
    ----------
    result : SimulateResult

    Returns
    -------
    dict
    """
    out = result.simulation.to_dict()
    out["market"] = result.market
    if result.deviation is not None:
        out["deviation"] = result.deviation.to_dict()
    if result.enforcement is not None:
        out["enforcement"] = enforced_json(result.enforcement)
    if result.states is not None:
        out["demand_states"] = result.states.to_dict()
    return out


def _price_path(res):
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 2.8), layout="constrained")
    P = res.paths
    H = int(P["length"][0])
    t = np.arange(1, H + 1)
    war = np.asarray(P["collusive"][0][:H]) == 0
    ax.plot(t, np.asarray(P["market_price"][0][:H], dtype=float), lw=0.9, color=color(0), label="market price")
    if war.any():
        edges = np.flatnonzero(np.diff(np.concatenate([[0], war.astype(int), [0]])))
        for a, b in zip(edges[::2], edges[1::2]):
            ax.axvspan(a + 0.5, b + 0.5, color=color(1), alpha=0.2, lw=0)
        ax.plot([], [], color=color(1), alpha=0.35, lw=6, label="price war")
    ax.axhline(res.reference["nash_price"], color="0.35", ls="--", lw=0.9, label="static-Nash price")
    ax.axhline(res.reference["collusive_price"], color="0.35", ls=":", lw=0.9, label="collusive price")
    ax.set_xlabel("period", fontsize=FONT)
    ax.set_ylabel("market price", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    fig.legend(loc="outside lower center", ncol=4, fontsize=SMALL, frameon=False)
    fig.suptitle("Market price in the first recorded replication", fontsize=FONT + 1)
    return Drawn("price-path", fig, "The market price period by period in the first recorded replication; shaded "
                                    "periods are price wars (not every firm colludes).")


def _collusion_over_time(res):
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 2.8), layout="constrained")
    share = np.asarray(res.collusive_by_period, dtype=float)
    t = np.arange(1, share.shape[0] + 1)
    ax.plot(t, share, lw=0.9, color=color(0), label="simulated")
    n = share_trials(res.settings["run"])
    if n:
        lo, hi = wilson_band(share, n)
        ax.fill_between(t, lo, hi, color=color(0), alpha=0.2, lw=0, label="simulated: 95 % band")
    curve = res.baseline.get("collusive_by_period") if res.baseline else None
    if curve is not None:
        ax.plot(t, np.asarray(curve, dtype=float)[: share.shape[0]], lw=1.2, color=color(1), ls="--",
                label="analytic")
    elif res.baseline and res.baseline.get("collusive_share") is not None:
        ax.axhline(res.baseline["collusive_share"], color=color(1), ls="--", label="analytic (mean over the horizon)")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("period", fontsize=FONT)
    ax.set_ylabel("share of replications\ncolluding [0 to 1]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    fig.legend(loc="outside lower center", ncol=3, fontsize=SMALL, frameon=False,
               title="share of replications colluding", title_fontsize=SMALL)
    fig.suptitle("Collusion over time", fontsize=FONT + 1)
    band = (f"; band: {SHARE_BAND_WORDS.format(n=n)}" if n else
            "; no band: the horizon is random, so the replications behind each period vary")
    return Drawn("collusion-over-time", fig, "The share of replications in which every firm colludes, period by "
                                             f"period, beside the analytic prediction where one exists{band}.")


def _spell_survival(res):
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.0), layout="constrained")
    sv = res.spells
    conf = f"{100 * res.settings['confidence']:g} %"
    if sv.lengths.size:
        ax.step(sv.lengths, sv.survival, where="post", color=color(0), label="Kaplan-Meier estimate")
        ax.fill_between(sv.lengths, sv.low, sv.high, step="post", color=color(0), alpha=0.2,
                        label=f"{conf} confidence band")
        tp = res.baseline.get("trigger_price") if res.baseline else None
        if tp is not None and tp["war_probability"] > 0:
            ax.step(sv.lengths, (1.0 - tp["war_probability"]) ** sv.lengths, where="post", color=color(1), ls="--",
                    label="geometric law (Green and Porter, 1984)")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("spell length [periods]", fontsize=FONT)
    ax.set_ylabel("share of spells lasting longer\n[0 to 1]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    if ax.get_legend_handles_labels()[0]:
        fig.legend(loc="outside lower center", ncol=3, fontsize=SMALL, frameon=False)
    fig.suptitle("Survival of collusive spells", fontsize=FONT + 1)
    return Drawn("spell-survival", fig, "The share of collusive spells lasting longer than each length "
                                        "(Kaplan-Meier, spells cut off by the horizon censored).")


def figures(result: SimulateResult) -> list:
    """The figures of a simulate result (the price path only when a replication's path was recorded).

    Parameters
    ----------
    result : SimulateResult

    Returns
    -------
    list of Drawn
    """
    res = result.simulation
    out = []
    if res.paths is not None and len(res.paths["length"]):
        out.append(_price_path(res))
    out.append(_collusion_over_time(res))
    out.append(_spell_survival(res))
    if result.enforcement is not None:
        out.append(enforced_figure(result.enforcement, res.collusive_by_period))
    if result.states is not None and result.states.contingent is not None:
        out.append(contingent_figure(result.states))
    return out


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, headline=simulate_headline)
