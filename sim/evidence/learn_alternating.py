"""The account of alternating sessions in the learn report (Klein, 2021): where the sessions end -- a fixed price
pair, above the static-Nash price, off the grid's static equilibria or at the joint-profit one, or a cycle -- with
the cycle lengths and the profit gain of each group, in the terminal report and as a figure.
"""

from __future__ import annotations

from sim.core.text import fmt_num, table
from sim.evidence.figures import PAGE_WIDTH, color, fit_legend
from sim.evidence.render import Drawn, pyplot
from sim.learning.analysis import LearnResult

__all__ = ["alternating_figure", "alternating_lines"]


def _share(d: dict) -> str:
    s = d["share"]
    if s is None:
        return "-"
    return f"{100 * s:.1f} % ({100 * d['low']:.1f} to {100 * d['high']:.1f} %)"


def alternating_lines(res: LearnResult) -> list[str]:
    """Where the alternating sessions ended, for the terminal report (empty for simultaneous moves).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
    """
    alt = res.summary.get("alternating")
    if not alt:
        return []
    lvl = f"{100 * res.confidence:g} %"
    pf, pc, cl = alt["profit_gain_fixed"], alt["profit_gain_cycle"], alt["cycle_length"]
    rows = [["fixed price pair", _share(alt["fixed_price"]), fmt_num(pf["mean"])],
            ["  above the static-Nash price", _share(alt["fixed_above_nash"]), ""],
            ["  at or near the joint-profit price", _share(alt["fixed_collusive"]), ""],
            ["cycle", _share(alt["cycle"]), fmt_num(pc["mean"])]]
    if "fixed_not_stage_nash" in alt:  # not in a result stored before this share was kept
        rows.insert(2, ["  not a static equilibrium of the grid", _share(alt["fixed_not_stage_nash"]), ""])
    lengths = ", ".join(f"{k} periods: {v}" for k, v in sorted(alt["cycle_lengths"].items(), key=lambda x: int(x[0])))
    return [f"Alternating moves: where the sessions end ({res.summary['over']}; {lvl} intervals across sessions)",
            table(["", "share of sessions", "mean profit gain"], rows, "lll"),
            f"  cycles: mean length {fmt_num(cl['mean'], 3)} periods; " + (lengths or "none"),
            f"  {alt['what']}.",
            "  No impulse response is computed under alternating moves.", ""]


def alternating_figure(res: LearnResult) -> Drawn | None:
    """Sessions by the length of the price cycle they end in (1: a fixed price pair), or None for simultaneous moves.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    Drawn or None
    """
    alt = res.summary.get("alternating")
    if not alt:
        return None
    plt = pyplot()
    counts = {1: alt["fixed_price"]["count"]}
    counts.update({int(k): v for k, v in alt["cycle_lengths"].items()})
    keys = sorted(counts)
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.6), layout="constrained")
    handles = []
    for fixed, label in ((True, "a fixed price pair"), (False, "a price cycle")):
        ks = [k for k in keys if (k == 1) == fixed]
        if ks:
            handles.append(ax.bar([str(k) for k in ks], [counts[k] for k in ks], color=color(0 if fixed else 1),
                                  label=label))
    ax.set_xlabel("periods until the price pair repeats (1: a fixed price pair)")
    ax.set_ylabel("sessions")
    ax.yaxis.get_major_locator().set_params(integer=True)  # counts of sessions: whole numbers
    ax.set_title("Where alternating sessions end")
    fit_legend(fig, handles, [h.get_label() for h in handles], ncol=2, title="greedy play ends at")
    return Drawn("alternating_outcomes", fig,
                 f"Sessions ({res.summary['over']}) by the length of the price cycle of greedy play after learning: "
                 "1 is a fixed price pair (a focal price), longer ones are cycles of undercutting and jumps back up "
                 "(Klein, 2021; Maskin and Tirole, 1988).")
