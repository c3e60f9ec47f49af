"""How the "any punishment" part of a thresholds result is shown: its row beside the named schemes, its lines of
the terminal report, its JSON document and the figure of the equilibrium payoff set (see
:mod:`sim.theory.any_punishment` and :mod:`sim.evidence.thresholds`)."""

from __future__ import annotations

import math

import numpy as np

from sim.core.text import fmt_num
from sim.evidence.catalogue import money
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.theory.any_punishment import AnyPunishmentResult

__all__ = ["bracket", "console_lines", "draw_payoff_set", "figure", "frontier_line", "scheme_row", "slice_line",
           "to_json"]

_VERDICTS = {
    "sustained": "the agreement is an equilibrium outcome (certified by constructed equilibria)",
    "refuted": "the agreement is not an equilibrium outcome under any punishment (refuted by the outer set)",
    "undetermined": "the bracket of the payoff sets is too wide to decide",
}


def bracket(ap: AnyPunishmentResult) -> str:
    """The lowest discount factor under any punishment as an interval, ``"(low, high]"``.

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    str
        ``"-"`` when no discount factor below one sustains the agreement on the grid.
    """
    if not math.isfinite(ap.high):
        return "-" if ap.low >= 0.99 else f"above {fmt_num(ap.low)}"
    if ap.high == 0:
        return "0"
    return f"({fmt_num(ap.low)}, {fmt_num(ap.high)}]"


def _grid(ap: AnyPunishmentResult) -> str:
    return " x ".join(str(k) for k in ap.grid)


def scheme_row(ap: AnyPunishmentResult, n_firms: int) -> list:
    """The row of the critical discount factors table beside the named schemes.

    Parameters
    ----------
    ap : AnyPunishmentResult
    n_firms : int

    Returns
    -------
    list
        Scheme, market threshold (an interval), binding firm and one cell per firm (the threshold is the
        market's: no per-firm value).
    """
    return [f"any punishment ({_grid(ap)} grid)", bracket(ap), "-", *(["-"] * n_firms)]


def _accuracy(ap: AnyPunishmentResult) -> str:
    sets = "exact sets (two firms)" if ap.method == "exact" else f"{ap.directions} directions"
    if not math.isfinite(ap.delta):
        return f"  grid {_grid(ap)} actions, {sets}; no payoff set computed (not sustainable below one)"
    return (f"  grid {_grid(ap)} actions, {sets}; accuracy: the inner and outer payoff sets at delta "
            f"{fmt_num(ap.delta)} are {fmt_num(ap.accuracy)} apart (Hausdorff distance, profit per period); "
            f"bisection width {fmt_num(ap.tolerance)}")


def _has_slice(ap: AnyPunishmentResult) -> bool:
    return ap.n_firms >= 3 and bool(np.any(np.isfinite(np.asarray(ap.symmetric, float))))


def slice_line(ap: AnyPunishmentResult) -> str | None:
    """The console line of the symmetric slice (three firms or more): the equal profits of every firm that
    equilibria sustain at the reported discount factor.

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    str or None
        None with two firms, or when no set was computed.
    """
    if not _has_slice(ap):
        return None
    lo_out, lo_in, hi_in, hi_out = (float(x) for x in ap.symmetric)
    if math.isfinite(lo_in) and math.isfinite(hi_in):
        inner = f"constructed equilibria give every firm any equal profit from {fmt_num(lo_in)} to {fmt_num(hi_in)}"
    else:
        inner = "no constructed equilibrium gives every firm the same profit"
    return (f"  symmetric slice (every firm earning the same profit per period): {inner}; no equilibrium does "
            f"below {fmt_num(lo_out)} or above {fmt_num(hi_out)} (outer set)")


def frontier_line(ap: AnyPunishmentResult) -> str | None:
    """The console line of the frontier of sustainable profits at the reported discount factor: the best joint
    profit and each firm's best equilibrium payoff, each between a constructed equilibrium (inner set) and the
    outer set's bound.

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    str or None
        None when no set was computed (or the result was stored before the frontier was kept).
    """
    joint = np.asarray(ap.best_joint, float).reshape(-1)
    best = np.asarray(ap.best_profits, float).reshape(-1, 2)
    if joint.size != 2 or not np.any(np.isfinite(joint)) or best.shape[0] != ap.n_firms:
        return None

    def span(lo, hi):
        return f"{fmt_num(lo)} to {fmt_num(hi)}" if math.isfinite(lo) else f"at most {fmt_num(hi)}"

    per_firm = "; ".join(f"firm {i + 1} {span(*best[i])}" for i in range(ap.n_firms))
    equal = np.asarray(ap.best_equal, float).reshape(-1)
    # three firms or more: the symmetric slice's line gives the best equal profit
    both = (f"; best equal profit of both firms {span(*equal)}"
            if ap.n_firms == 2 and equal.size == 2 and math.isfinite(equal[1]) else "")
    return (f"  best sustainable profits per period (constructed equilibrium to outer bound): joint "
            f"{span(*joint)}; best for one firm: {per_firm}{both}")


def console_lines(ap: AnyPunishmentResult, quantity_setting: bool) -> list[str]:
    """The terminal report's lines of the any-punishment part.

    Parameters
    ----------
    ap : AnyPunishmentResult
    quantity_setting : bool
        Whether the actions are quantities (else prices).

    Returns
    -------
    list of str
    """
    what = "quantities" if quantity_setting else "prices"
    lines = ["", "Any punishment: lowest critical discount factor when a deviation meets the deviator's worst "
                 "equilibrium payoff (optimal penal codes, Abreu 1988)",
             _accuracy(ap),
             f"  on the same grid: any punishment {bracket(ap)}, grim trigger {fmt_num(ap.grim)}, stick and carrot "
             f"{fmt_num(ap.stick_carrot)}, one-period punishment at any profile {fmt_num(ap.two_phase)}",
             f"  agreed {what} on the grid: {', '.join(fmt_num(x) for x in ap.actions)}"]
    if math.isfinite(ap.delta):
        where = "the given discount factor" if ap.delta_given else "the upper end of the bracket"
        lines.append(f"  at delta {fmt_num(ap.delta)} ({where}): {_VERDICTS.get(ap.verdict, ap.verdict)}")
        worst = "; ".join(f"firm {i + 1} {fmt_num(ap.worst_low[i])} to {fmt_num(ap.worst_high[i])}"
                          for i in range(ap.n_firms))
        lines.append(f"  worst equilibrium payoff per period: {worst} (minmax "
                     f"{', '.join(fmt_num(x) for x in ap.minmax)})")
        if slice_line(ap) is not None:
            lines.append(slice_line(ap))
        if frontier_line(ap) is not None:
            lines.append(frontier_line(ap))
        for pc in ap.penal_codes:
            path = ", then ".join("(" + ", ".join(fmt_num(x) for x in row) + ")" for row in pc.actions)
            lines.append(f"  optimal penal code of firm {pc.firm + 1}, first periods' {what}: {path}")
    named = [x for x in (ap.grim, ap.stick_carrot) if math.isfinite(x)]
    if math.isfinite(ap.high) and named and ap.high < min(named):
        lines.append(f"  the named schemes overstate the patience needed: the best punishment sustains the agreement "
                     f"from {fmt_num(ap.high)} at the latest, the best named scheme on this grid from "
                     f"{fmt_num(min(named))}")
    return lines


def to_json(ap: AnyPunishmentResult) -> dict:
    """The any-punishment part of the ``--json`` document: the stored result with the interval spelled out.

    Parameters
    ----------
    ap : AnyPunishmentResult

    Returns
    -------
    dict
    """
    out = ap.to_dict()
    out["threshold"] = {"low": out["low"], "high": out["high"],
                        "meaning": "the lowest discount factor under any punishment lies in (low, high]"}
    return out


def _closed(V: np.ndarray) -> np.ndarray:
    V = np.asarray(V, dtype=float).reshape(-1, 2)
    return np.vstack([V, V[:1]]) if V.shape[0] else V


def _polygon(ax, V, **kw) -> None:
    V = np.asarray(V, dtype=float).reshape(-1, 2)
    if V.shape[0] >= 3:
        ax.fill(*_closed(V).T, **kw)
    elif V.shape[0]:
        ax.plot(*_closed(V).T, color=kw.get("edgecolor", kw.get("facecolor")), lw=1.5, label=kw.get("label"))


_POINTS = (  # name, label, marker, colour index
    ("collusive", "agreement (collusive profits)", "*", 1),
    ("nash", "static Nash = grim trigger's punishment", "o", 6),
    ("stick_carrot", "stick-and-carrot punishment value", "s", 2),
    ("minmax", "minmax", "v", 3),
)


#: markers of the optimal penal codes' values, one per punished firm
_PENAL_MARKERS = ("^", ">", "<", "D", "p", "h")


def _zoom(ax, ap: AnyPunishmentResult) -> None:
    """Frame the equilibrium sets and the marked payoffs; the stage payoffs far below every minmax (a flooded
    market) are cut off, since no equilibrium reaches them."""
    pts = [np.asarray(ap.outer, float).reshape(-1, 2), np.asarray(ap.feasible, float).reshape(-1, 2)]
    pts += [ap.point(name)[None, :2] for name, *_ in _POINTS]
    P = np.vstack(pts)
    P = P[np.all(np.isfinite(P), axis=1)]
    low = np.minimum(np.asarray(ap.minmax, float)[:2], np.asarray(ap.outer, float).reshape(-1, 2).min(axis=0))
    high = P.max(axis=0)
    pad = 0.06 * (high - low).max()
    ax.set_xlim(low[0] - pad, high[0] + pad)
    ax.set_ylim(low[1] - pad, high[1] + pad)


def _draw_slice(ax, ap: AnyPunishmentResult) -> None:
    """The symmetric slice on the diagonal of the projection: ``(t, ..., t)`` projects on ``(t, t)``."""
    if not _has_slice(ap):
        return
    lo_out, lo_in, hi_in, hi_out = (float(x) for x in ap.symmetric)
    if math.isfinite(lo_out) and math.isfinite(hi_out):
        # ticks across the diagonal (two spokes turned by 45 degrees), long enough to show past the point markers
        # that often sit at the slice's ends (the agreement, the stick-and-carrot value)
        ax.plot([lo_out, hi_out], [lo_out, hi_out], color=color(1), lw=1.0, ls=":", marker=(2, 2, 45), ms=16,
                mew=2.0, zorder=4.5, label="symmetric slice, outer bounds (all firms equal)")
    if math.isfinite(lo_in) and math.isfinite(hi_in):
        ax.plot([lo_in, hi_in], [lo_in, hi_in], color=color(1), lw=3.0, solid_capstyle="butt", zorder=4,
                label="symmetric slice, constructed equilibria")


def figure(ap: AnyPunishmentResult, currency: str | None = None, period: str | None = None) -> Drawn | None:
    """The equilibrium payoff set at the reported discount factor, with the marked payoffs.

    Two firms: the inner and outer sets and the feasible payoffs. More firms: their projection on the profits of
    firms 1 and 2, with the symmetric slice of the full set (equal profits of every firm) on its diagonal.

    Parameters
    ----------
    ap : AnyPunishmentResult
    currency, period : str, optional
        Units of money.

    Returns
    -------
    Drawn or None
        None when no set was computed.
    """
    if not math.isfinite(ap.delta) or np.asarray(ap.outer).size == 0:
        return None
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, PAGE_WIDTH * 0.95), layout="constrained")
    draw_payoff_set(ax, ap, currency, period)
    # here rather than in draw_payoff_set: the assessment draws its slices in a panel of their own
    _draw_slice(ax, ap)
    proj = "" if ap.n_firms == 2 else f" (projection on firms 1 and 2 of {ap.n_firms})"
    ax.set_title(f"Equilibrium payoffs at delta {fmt_num(ap.delta)}, {_grid(ap)} action grid"
                 + (f"\n{proj.strip()}" if proj else ""), fontsize=FONT + 1)
    fig.legend(loc="outside lower center", ncol=2, fontsize=SMALL, frameon=False)
    caption = (f"Subgame-perfect equilibrium payoffs (discounted average profit per period) at discount factor "
               f"{fmt_num(ap.delta)} on a {_grid(ap)} action grid{proj}: every equilibrium payoff lies in the outer "
               f"set; the inner set holds payoffs of equilibria that were constructed (Hausdorff gap "
               f"{fmt_num(ap.accuracy)}). The agreement's lowest critical discount factor under any punishment is "
               f"{bracket(ap)}; grim trigger needs {fmt_num(ap.grim)} and the best stick and carrot "
               f"{fmt_num(ap.stick_carrot)} on the same grid. The optimal penal codes (Abreu, 1988) start at each "
               f"firm's worst equilibrium payoff.")
    if _has_slice(ap):
        lo_out, lo_in, hi_in, hi_out = (fmt_num(float(x)) for x in ap.symmetric)
        caption += (f" On the diagonal, the symmetric slice of the full {ap.n_firms}-firm set (every firm earning the "
                    f"same profit): constructed equilibria from {lo_in} to {hi_in}, none outside {lo_out} to "
                    f"{hi_out}.")
    return Drawn("payoff-set", fig, caption)


def draw_payoff_set(ax, ap: AnyPunishmentResult, currency: str | None = None, period: str | None = None,
                    names=None) -> None:
    """Draw the payoff set of ``ap`` (projected on firms 1 and 2) with its marked payoffs on ``ax``.

    Parameters
    ----------
    ax : matplotlib Axes
    ap : AnyPunishmentResult
    currency, period : str, optional
        Units of money.
    names : sequence of str, optional
        Firm names (default "firm 1", "firm 2", ...): the axes are the first two firms' profits.

    Returns
    -------
    None
    """
    names = list(names) if names is not None else [f"firm {i + 1}" for i in range(ap.n_firms)]
    _polygon(ax, ap.feasible, facecolor="#eeeeee", edgecolor="#bbbbbb", lw=0.8, label="feasible stage payoffs")
    _polygon(ax, ap.outer, facecolor="none", edgecolor=color(0), lw=1.4, ls="--", label="outer set")
    _polygon(ax, ap.inner, facecolor=color(5), edgecolor=color(0), alpha=0.55, lw=1.0,
             label="inner set (constructed equilibria)")
    for name, label, marker, c in _POINTS:
        p = ap.point(name)
        if np.all(np.isfinite(p[:2])):
            ax.plot(p[0], p[1], marker=marker, ms=9 if marker == "*" else 7, ls="none", color=color(c),
                    markeredgecolor="black", markeredgewidth=0.5, label=label, zorder=5)
    for pc in ap.penal_codes:
        v = np.asarray(pc.values, float)
        if v.size and np.all(np.isfinite(v[0, :2])):
            ax.plot(v[0, 0], v[0, 1], marker=_PENAL_MARKERS[pc.firm % len(_PENAL_MARKERS)], ms=7, ls="none",
                    color=color(4 + pc.firm // len(_PENAL_MARKERS)),
                    markeredgecolor="black", markeredgewidth=0.5, zorder=5,
                    label=f"optimal penal code of {names[pc.firm] if pc.firm < len(names) else pc.firm + 1}")
    _zoom(ax, ap)
    unit = money(currency, period)
    ax.set_xlabel(f"profit of {names[0]} [{unit}]", fontsize=FONT)
    ax.set_ylabel(f"profit of {names[1]} [{unit}]", fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    ax.set_aspect("equal", adjustable="box")
    ax.grid(True, color="#dddddd", lw=0.5)
    ax.set_axisbelow(True)
