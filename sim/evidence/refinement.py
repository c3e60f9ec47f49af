"""How the "any punishment" answers move as the action grid is refined: the table of the terminal report and its
figure (see :func:`sim.theory.refinement.grid_refinement`, asked for with ``[any_punishment] refine``).

A grid is a modelling device: firms may choose any quantity or price. The table recomputes, on each grid, the
lowest critical discount factor under any punishment (an interval), the named schemes on the same grid, the best
joint profit at the reported discount factor and the accuracy of the sets, so that a reader sees which answers
are settled and which still move with the discretisation.
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color, fit_legend
from sim.evidence.render import Drawn, pyplot
from sim.theory.any_punishment import AnyPunishmentResult

__all__ = ["refinement_figure", "refinement_lines"]


def _interval(low: float, high: float) -> str:
    if not math.isfinite(high):
        return "not sustainable below one"
    return f"({fmt_num(low)}, {fmt_num(high)}]"


def _grid(n_actions) -> str:
    return " x ".join(str(int(k)) for k in n_actions)


def refinement_lines(ap: AnyPunishmentResult) -> list[str]:
    """The terminal report's table of the answers on each grid of the refinement (none without one).

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    list of str
    """
    ref = ap.refinement
    if ref is None or not ref.rows:
        return []
    rows = [[_grid(r.n_actions), _interval(*r.threshold), fmt_num(r.grim), fmt_num(r.stick_carrot),
             f"{fmt_num(r.joint[0])} to {fmt_num(r.joint[1])}", fmt_num(r.accuracy)] for r in ref.rows]
    return ["", f"How the answers move with the action grid (payoff sets at delta {fmt_num(ref.delta)}):",
            table(["actions per firm", "any punishment", "grim trigger", "stick and carrot",
                   "best joint profit", "accuracy"], rows)]


def refinement_figure(ap: AnyPunishmentResult) -> Drawn | None:
    """The lowest critical discount factor under any punishment and the named schemes against the grid size.

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    Drawn or None
        None without a refinement table.
    """
    ref = ap.refinement
    if ref is None or len(ref.rows) < 2:
        return None
    plt = pyplot()
    k = np.array([max(r.n_actions) for r in ref.rows], float)
    low = np.array([r.threshold[0] for r in ref.rows], float)
    high = np.array([r.threshold[1] for r in ref.rows], float)
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.6), layout="constrained")
    ok = np.isfinite(low) & np.isfinite(high)
    if ok.any():
        ax.fill_between(k[ok], low[ok], high[ok], color=color(0), alpha=0.3, lw=0)
        ax.plot(k[ok], high[ok], color=color(0), marker="o", ms=4, lw=1.6,
                label="any punishment (upper end of its interval; band: the interval)")
    for j, (name, attr) in enumerate((("grim trigger", "grim"), ("best stick and carrot", "stick_carrot"))):
        ax.plot(k, [getattr(r, attr) for r in ref.rows], color=color(j + 1), marker="s", ms=3.5, lw=1.2, ls="--",
                label=f"{name} on the same grid")
    ax.set_xscale("log", base=2)
    ax.set_xticks(k, [_grid(r.n_actions) for r in ref.rows])
    ax.minorticks_off()
    ax.set_ylim(0, 1)
    ax.set_xlabel("actions per firm on the grid (log scale)", fontsize=FONT)
    ax.set_ylabel("critical discount factor", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    ax.grid(alpha=0.3)
    ax.set_title("Lowest critical discount factor as the action grid is refined", fontsize=FONT + 1)
    handles, labels = ax.get_legend_handles_labels()
    fit_legend(fig, handles, labels, ncol=1, title="threshold", width=70)
    caption = (f"The lowest critical discount factor of the agreement under any punishment (an interval, from the "
               f"bracketed payoff sets) and under the named schemes, recomputed on action grids of "
               f"{', '.join(_grid(r.n_actions) for r in ref.rows)} per firm. An answer that still moves between the "
               f"finest grids is a property of the discretisation, not of the market; the report's main answer uses "
               f"a {' x '.join(str(g) for g in ap.grid)} grid.")
    return Drawn("grid-refinement", fig, caption)
