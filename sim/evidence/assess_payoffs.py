"""How an assessment's payoff-set comparison is shown: its console lines, its table, its figure, its summary
blocks and its paragraph of the methods appendix (see :mod:`sim.antitrust.merger_sets`). Everything is read from
the assessment's plain data; the payoff-set panels reuse the thresholds report's drawing
(:func:`sim.evidence.any_punishment.draw_payoff_set`).
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.any_punishment import bracket, draw_payoff_set
from sim.evidence.catalogue import money
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.theory.any_punishment import AnyPunishmentResult

__all__ = ["payoff_blocks", "payoff_figure", "payoff_lines", "payoff_methods", "payoff_table"]

SIDES = ("before", "after")
_DIRECTION = {"easier": "lowers", "harder": "raises",
              "undetermined": "does not move beyond the width of the intervals"}


def _sets(d: dict, side: str) -> AnyPunishmentResult:
    return AnyPunishmentResult.from_dict(d["payoff_sets"][side]["sets"])


def _clean(x, scale: float) -> float:
    # a payoff within a millionth of the payoff scale of zero is zero up to the solvers' rounding
    return 0.0 if x is not None and abs(x) <= 1e-6 * scale else x


def _pair(lo, hi, scale: float = 1.0) -> str:
    return f"[{fmt_num(_clean(lo, scale))}, {fmt_num(_clean(hi, scale))}]"


def payoff_table(d: dict) -> tuple:
    """The table of the payoff-set comparison: one column per side.

    Parameters
    ----------
    d : dict
        The assessment's data (with ``payoff_sets``).

    Returns
    -------
    tuple
        ``(headers, rows)``.
    """
    flow = money(d.get("currency"), d.get("period"))
    cols = {}
    for side in SIDES:
        x = d["payoff_sets"][side]
        ap = _sets(d, side)
        scale = max(1.0, float(np.nanmax(np.abs(ap.profits))))
        worst = "; ".join(f"{nm} {_pair(ap.worst_low[i], ap.worst_high[i], scale)}"
                          for i, nm in enumerate(x["names"]))
        sym = [np.nan if v is None else v for v in x["symmetric"]]
        joint = [np.nan if v is None else v for v in x["joint"]]
        cols[side] = [" x ".join(str(k) for k in ap.grid), bracket(ap), fmt_num(ap.stick_carrot), fmt_num(ap.grim),
                      worst, _pair(*joint), f"from {_pair(sym[0], sym[1])} to {_pair(sym[2], sym[3])}",
                      fmt_num(ap.accuracy)]
    labels = ["actions per firm on the grid", "critical discount factor under any punishment (low, high]",
              "stick and carrot on the grid", "grim trigger on the grid",
              f"worst equilibrium payoff per firm ({flow})", f"best joint profit of an equilibrium ({flow})",
              f"equal profit per firm of an equilibrium ({flow})", f"accuracy of the sets ({flow})"]
    return (["", "before", "after"], [[lab, cols["before"][k], cols["after"][k]] for k, lab in enumerate(labels)])


def _answer(d: dict) -> str:
    ps = d["payoff_sets"]
    b, a = _sets(d, "before"), _sets(d, "after")
    return (f"Under any punishment the merger {_DIRECTION[ps['direction']]} the lowest critical discount factor: "
            f"{bracket(b)} before, {bracket(a)} after (grim trigger on the same grid {fmt_num(b.grim)} and "
            f"{fmt_num(a.grim)}; stick and carrot {fmt_num(b.stick_carrot)} and {fmt_num(a.stick_carrot)}).")


def payoff_lines(d: dict) -> list[str]:
    """The console lines of the payoff-set comparison (empty without one).

    Parameters
    ----------
    d : dict

    Returns
    -------
    list of str
    """
    if d.get("payoff_sets") is None:
        return []
    headers, rows = payoff_table(d)
    return [f"Equilibrium payoff sets at delta {fmt_num(d['payoff_sets']['delta'])} (any punishment, "
            "Abreu 1988; sets bracketed inner/outer)", table(headers, rows, "lll"), "  " + _answer(d), ""]


def _slice_panel(ax, d: dict, flow: str) -> None:
    # one horizontal interval per side: outer (wide, light) around inner (narrow, dark)
    for k, side in enumerate(SIDES):
        s = [np.nan if v is None else float(v) for v in d["payoff_sets"][side]["symmetric"]]
        if np.all(np.isfinite(s)):
            ax.plot([s[0], s[3]], [k, k], color=color(0), lw=10, alpha=0.35, solid_capstyle="butt",
                    label="symmetric slice, outer set" if k == 0 else None)
            ax.plot([s[1], s[2]], [k, k], color=color(0), lw=4, solid_capstyle="butt",
                    label="symmetric slice, inner set" if k == 0 else None)
    n = [len(d["payoff_sets"][s]["names"]) for s in SIDES]
    ax.set_yticks([0, 1], [f"before ({n[0]} firms)", f"after ({n[1]} firms)"], fontsize=SMALL)
    ax.set_ylim(-0.6, 1.6)
    ax.invert_yaxis()
    ax.set_xlabel(f"profit every firm earns alike in an equilibrium [{flow}]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    ax.grid(True, axis="x", color="#dddddd", lw=0.5)
    ax.set_title("symmetric slice: the equilibrium payoffs at which all firms earn the same", fontsize=FONT)


def _penal_labels(ax, names: dict) -> None:
    # the same marker marks firm k's optimal penal code in both panels: name the firm on each side
    for line in ax.get_lines():
        lab = line.get_label()
        if lab.startswith("optimal penal code of firm "):
            k = int(lab.rsplit(" ", 1)[1]) - 1
            who = [names[s][k] if k < len(names[s]) else "-" for s in SIDES]
            line.set_label(f"penal code, firm {k + 1} (before {who[0]}, after {who[1]})")


def payoff_figure(d: dict) -> Drawn | None:
    """The payoff sets before and after in two panels, and below them the symmetric slice of each side when a side
    has more than two firms.

    Parameters
    ----------
    d : dict

    Returns
    -------
    Drawn or None
        None without a payoff-set comparison or when no set was computed.
    """
    ps = d.get("payoff_sets")
    if ps is None:
        return None
    aps = {side: _sets(d, side) for side in SIDES}
    if not all(math.isfinite(ap.delta) and np.asarray(ap.outer).size for ap in aps.values()):
        return None
    many = any(ap.n_firms > 2 for ap in aps.values())
    plt = pyplot()
    fig = plt.figure(figsize=(PAGE_WIDTH, PAGE_WIDTH * (1.08 if many else 0.82)), layout="constrained")
    grid = fig.add_gridspec(2 if many else 1, 2, height_ratios=[1, 0.3] if many else [1])
    axes = [fig.add_subplot(grid[0, 0]), fig.add_subplot(grid[0, 1])]
    cur, per = d.get("currency"), d.get("period")
    unit = money(cur, per)
    names = {side: ps[side]["names"] for side in SIDES}
    for ax, side in zip(axes, SIDES):
        ap = aps[side]
        draw_payoff_set(ax, ap, cur, per)
        _penal_labels(ax, names)
        ax.set_xlabel(f"profit of {names[side][0]}\n[{unit}]", fontsize=SMALL)
        ax.set_ylabel(f"profit of {names[side][1]} [{unit}]", fontsize=SMALL)
        proj = "" if ap.n_firms == 2 else f", projection ({ap.n_firms} firms)"
        ax.set_title(f"{side} the merger{proj}\nany punishment: {bracket(ap)}", fontsize=FONT)
    if many:
        slice_ax = fig.add_subplot(grid[1, :])
        _slice_panel(slice_ax, d, unit)
        axes.append(slice_ax)
    seen: dict = {}
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(lab, h)
    fig.legend(list(seen.values()), list(seen.keys()), loc="outside lower center", ncol=2, fontsize=SMALL,
               frameon=False)
    caption = (f"Subgame-perfect equilibrium payoffs (discounted average profit per period) at the assessment's "
               f"discount factor {fmt_num(ps['delta'])}, before and after the merger, on action grids: every "
               "equilibrium payoff lies in the outer set, the inner set holds constructed equilibria. "
               + ("With more than two firms a panel shows the projection on the first two firms' profits, and the "
                  "lower panel the symmetric slice: the profits every firm can earn alike in an equilibrium (a "
                  "segment, outer and inner). " if many else "") + _answer(d))
    return Drawn("payoff_sets", fig, caption)


def payoff_blocks(d: dict, fig) -> list:
    """The summary blocks of the payoff-set comparison (empty without one).

    Parameters
    ----------
    d : dict
    fig : callable
        ``fig(name)`` -> the figure blocks of a drawn figure.

    Returns
    -------
    list of tuple
    """
    if d.get("payoff_sets") is None:
        return []
    return [("heading", "Any punishment: the equilibrium payoff sets"),
            ("paragraph", _answer(d)),
            ("table", "payoff_sets", "Equilibrium payoff sets before and after the merger at the assessment's "
                                     "discount factor (intervals: inner and outer sets)"),
            *fig("payoff_sets")]


def payoff_methods(d: dict) -> list:
    """The methods appendix's paragraph on the payoff sets (empty without them).

    Parameters
    ----------
    d : dict

    Returns
    -------
    list of tuple
    """
    if d.get("payoff_sets") is None:
        return []
    return [("paragraph", "Any punishment: on a grid of actions per firm (the static Nash, agreed, deviation and "
                          "punishment levels on the grid), the set of subgame-perfect equilibrium payoffs with public "
                          "randomisation is bracketed between an inner set of constructed equilibria and an outer set "
                          "holding every equilibrium payoff (Abreu, Pearce and Stacchetti, 1990; two firms: exact "
                          "sets after Abreu and Sannikov, 2014; more firms: supporting hyperplanes in fixed "
                          "directions after Judd, Yeltekin and Conklin, 2003). The agreement is sustained at delta "
                          "when `(1 - delta) (D_i - C_i) <= delta (C_i - v_i(delta))` for every firm, v_i the worst "
                          "equilibrium payoff, the value of the optimal penal code (Abreu, 1988); the lowest such "
                          "delta is found by bisection and reported as an interval certified at both ends. The best "
                          "joint profit and the symmetric slice (the smallest and largest t with (t, ..., t) in the "
                          "set, linear programmes) are read from both sets.")]
