"""The figures of a tournament outcome, drawn for print: readable at the width of an A4 text column (6.3 inches,
text of 8 points or more), colour-blind-safe colours that show on white paper (the palette of
:data:`sim.evidence.figures.PALETTE` for lines; cividis for sequential and purple-orange for diverging colour maps),
legends outside the data and one number format per figure.

* :func:`rules_figure` -- each rule's profit gain with its interval, beside its population share after the
  replicator dynamics;
* :func:`pairs_figure` -- the share of the collusive profit each pair of rules keeps, and
  :func:`duration_figure` -- how long collusion lasts between them;
* :func:`replicator_figure` -- population shares over generations;
* :func:`invasion_figure` -- how likely one firm following a rule takes over a population following another.
"""

from __future__ import annotations

import math

import numpy as np

from sim.evidence.figures import PALETTE, text_color
from sim.evidence.render import pyplot
from sim.tournament.analysis import TournamentOutcome

__all__ = ["duration_figure", "invasion_figure", "pairs_figure", "percent", "replicator_figure",
           "rules_figure"]

_STYLES = ("-", "--", ":", "-.")
#: width of an A4 text column, inches
WIDTH = 6.3
#: most rules whose heatmap cells carry their numbers
_ANNOTATE = 14


def line_style(k: int) -> dict:
    """Colour and dash of line ``k``: the eight palette colours, then again with another dash.

    Parameters
    ----------
    k : int

    Returns
    -------
    dict
        ``color`` and ``linestyle``.
    """
    return {"color": PALETTE[k % len(PALETTE)], "linestyle": _STYLES[(k // len(PALETTE)) % len(_STYLES)]}


def three_significant(x: float) -> str:
    """A positive length with three significant digits and thousands separators (``17.5``, ``1,000``).

    Parameters
    ----------
    x : float

    Returns
    -------
    str
    """
    if not math.isfinite(x):
        return "n/a"
    digits = max(0, 2 - math.floor(math.log10(abs(x)))) if x != 0 else 0
    return f"{x:,.{digits}f}"


def percent(x) -> str:
    """A share as a percentage with one decimal, never rounded to 0 % or 100 % when it is not.

    Parameters
    ----------
    x : float or None

    Returns
    -------
    str
        ``n/a`` for None or nan.
    """
    if x is None:
        return "n/a"
    x = float(x)
    if not math.isfinite(x):
        return "n/a"
    if 0 < x < 0.0005:
        return "< 0.1 %"
    if 0.9995 <= x < 1:
        return "> 99.9 %"
    return f"{100 * x:.1f} %"


def _annotate(ax, im, V, fmt, mask=None, text=None) -> None:
    """Write each cell's number (``text``, default ``V``) in the colour that reads best on the cell's colour."""
    E = V.shape[0]
    if E > _ANNOTATE:
        return
    text = V if text is None else text
    for i in range(V.shape[0]):
        for j in range(V.shape[1]):
            if mask is not None and mask[i, j]:
                continue
            v, t = V[i, j], text[i, j]
            colour = text_color(im.cmap(im.norm(v))) if np.isfinite(v) else "black"
            ax.text(j, i, fmt(t) if np.isfinite(t) else "n/a", ha="center", va="center", fontsize=8, color=colour)


def _show(ax, plt, V, mask, cmap_name: str, **kw):
    """Draw ``V`` with the cells under ``mask`` left blank and undefined cells (nan) in light grey."""
    hidden = mask if mask is not None else np.zeros(V.shape, dtype=bool)
    cmap = plt.get_cmap(cmap_name).with_extremes(bad=(1.0, 1.0, 1.0, 0.0))
    im = ax.imshow(np.ma.masked_array(V, mask=hidden | ~np.isfinite(V)), cmap=cmap, **kw)
    for i, j in zip(*np.nonzero(~np.isfinite(V) & ~hidden), strict=True):
        ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, color="0.88", lw=0))
    return im


def _square_axes(plt, E: int, extra_height: float = 0.0):
    side = min(WIDTH - 1.6, max(3.0, 0.42 * E + 1.4))
    return plt.subplots(figsize=(WIDTH, side + 0.9 + extra_height), layout="constrained")


def _ticks(ax, labels, x_label: str, y_label: str) -> None:
    E = len(labels)
    ax.set_xticks(range(E), labels, rotation=45, ha="right", rotation_mode="anchor", fontsize=8)
    ax.set_yticks(range(E), labels, fontsize=8)
    ax.set_xlabel(x_label, fontsize=9)
    ax.set_ylabel(y_label, fontsize=9)


def _heatmap_frame(fig, ax, im, labels, x_label: str, y_label: str, bar_label: str):
    """The rules on both axes, no frame, and a labelled colour bar beside the heatmap (returned for its ticks)."""
    _ticks(ax, labels, x_label, y_label)
    ax.set_frame_on(False)
    bar = fig.colorbar(im, ax=ax, shrink=0.85)
    bar.set_label(bar_label, fontsize=9)
    bar.ax.tick_params(labelsize=8)
    return bar


def rules_figure(out: TournamentOutcome):
    """Each rule's profit gain (or the score it is placed by) with its interval (left), beside its share of the
    population after the replicator dynamics (right); rules from first to last place.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = pyplot()
    order = list(out.order)
    E = len(order)
    labels = out.labels
    est = np.asarray(out.estimates[out.score], dtype=float)[order]
    share = np.asarray(out.evolution.final, dtype=float)[order]
    fig, (ax, bx) = plt.subplots(1, 2, figsize=(WIDTH, 0.32 * E + 1.6), sharey=True, layout="constrained",
                                 gridspec_kw={"width_ratios": [3, 2]})
    y = np.arange(E)[::-1]
    err = [np.nan_to_num(est[:, 0] - est[:, 2]), np.nan_to_num(est[:, 3] - est[:, 0])]
    ax.errorbar(est[:, 0], y, xerr=err, fmt="o", ms=4, color=PALETTE[0], ecolor=PALETTE[0], capsize=2.5)
    if out.score == "profit_gain":
        for x, name, side, dx in ((0.0, "static Nash", "left", 2), (1.0, "agreement", "right", -2)):
            ax.axvline(x, color="0.45", lw=0.8, ls="--")
            ax.annotate(name, (x, 1.0), xycoords=("data", "axes fraction"), xytext=(dx, 2),
                        textcoords="offset points", fontsize=8, color="0.3", va="bottom", ha=side)
        ax.set_xlabel("profit gain (share of the collusive\nprofit above the static Nash profit)", fontsize=9)
    else:
        what = "discounted profit" if out.score == "discounted_profit" else f"profit per {out.units['period']}"
        ax.set_xlabel(f"{what}\n({out.units['currency']})", fontsize=9)
    ax.set_yticks(y, [f"{int(out.ranks[e])}. {labels[e]}" for e in order], fontsize=8)
    ax.grid(axis="x", alpha=0.3)
    gens = int(out.evolution.settings["generations"])
    colours = [PALETTE[2] if out.evolution.resists[e] else PALETTE[1] for e in order]
    bx.barh(y, share, color=colours, height=0.6)
    # the colour shows even where the share is too small for a bar
    bx.scatter(np.zeros(E), y, marker="s", s=36, color=colours, clip_on=False, zorder=3)
    for k, v in zip(y, share, strict=True):
        inside = v > 0.75
        bx.text(v - 0.02 if inside else max(v, 0.02) + 0.02, k, percent(v), va="center",
                ha="right" if inside else "left", fontsize=8, color="white" if inside else "black")
    bx.set_xlim(0, 1)
    bx.set_xlabel(f"share of the population after\n{gens:,} generations", fontsize=9)
    bx.grid(axis="x", alpha=0.3)
    handles = [plt.Rectangle((0, 0), 1, 1, color=PALETTE[2]), plt.Rectangle((0, 0), 1, 1, color=PALETTE[1])]
    fig.legend(handles, ["resists invasion by every other rule", "does not resist every other rule"],
               loc="outside lower center", ncol=2, fontsize=8, frameon=False)
    return fig


def _pair_matrix(out: TournamentOutcome, values: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
    """Group values arranged by rules: with two seats the symmetric pair matrix (upper triangle masked), with more
    the value of the group of one row rule among rivals who all follow the column rule."""
    E = len(out.entrants)
    n = out.n_seats
    V = np.full((E, E), np.nan)
    for i in range(E):
        for j in range(E):
            V[i, j] = values[out.group_of([i] + [j] * (n - 1))]
    mask = np.triu(np.ones((E, E), dtype=bool), 1) if n == 2 else None
    return V, mask


def _axes_names(out: TournamentOutcome) -> tuple[str, str]:
    if out.n_seats == 2:
        return "rule of the other firm", "rule of one firm"
    return "rule of every rival", "rule of one firm"


def pairs_figure(out: TournamentOutcome):
    """The share of the collusive profit each pair of rules keeps together (their joint profit gain).

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = pyplot()
    V, mask = _pair_matrix(out, np.asarray(out.groups.kept, dtype=float)[:, 0])
    fig, ax = _square_axes(plt, len(out.entrants))
    from matplotlib.colors import Normalize, TwoSlopeNorm  # heavy: only when a figure is drawn

    lo = float(np.nanmin(V)) if np.isfinite(V).any() else 0.0
    hi = max(1.0, float(np.nanmax(V))) if np.isfinite(V).any() else 1.0
    if lo < 0:
        # both signs: a diverging map centred on the static Nash profit (0)
        im = _show(ax, plt, V, mask, "PuOr", norm=TwoSlopeNorm(0.0, lo, hi))
    else:
        im = _show(ax, plt, V, mask, "cividis", norm=Normalize(0.0, hi))
    _annotate(ax, im, V, lambda v: f"{v:.2f}", mask)
    _heatmap_frame(fig, ax, im, out.labels, *_axes_names(out), "share of the collusive\nprofit kept")
    return fig


def duration_figure(out: TournamentOutcome):
    """How long collusion lasts between the rules of each pair: the mean number of periods until it first breaks
    down (logarithmic colour scale).

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.colors import LogNorm  # heavy: only when a figure is drawn

    plt = pyplot()
    V, mask = _pair_matrix(out, np.asarray(out.groups.first_breakdown, dtype=float)[:, 0])
    fig, ax = _square_axes(plt, len(out.entrants))
    im = _show(ax, plt, V, mask, "cividis", norm=LogNorm(vmin=1.0, vmax=max(2.0, float(out.horizon))))
    _annotate(ax, im, V, three_significant, mask)
    period = out.units["period"]
    _heatmap_frame(fig, ax, im, out.labels, *_axes_names(out), f"{period}s until collusion\nfirst breaks down")
    return fig


def replicator_figure(out: TournamentOutcome):
    """Population shares of the rules over generations of the replicator dynamics.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = pyplot()
    evo = out.evolution
    shares = np.asarray(evo.shares, dtype=float)
    gen = np.asarray(evo.generation, dtype=float)
    fig, ax = plt.subplots(figsize=(WIDTH, 3.4), layout="constrained")
    for e, lab in enumerate(out.labels):
        ax.plot(gen, shares[:, e], lw=1.4, label=lab, **line_style(e))
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("generation", fontsize=9)
    ax.set_ylabel("share of the population", fontsize=9)
    ax.tick_params(labelsize=8)
    ax.grid(alpha=0.3)
    ax.legend(title="rule", fontsize=8, title_fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0),
              frameon=False)
    return fig


def invasion_figure(out: TournamentOutcome):
    """``N`` times the probability that one firm following the row rule takes over a population of ``N`` following
    the column rule (Moran process), on a logarithmic scale centred on neutral drift (1).

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.colors import TwoSlopeNorm  # heavy: only when a figure is drawn
    from matplotlib.ticker import FixedFormatter, FixedLocator

    plt = pyplot()
    evo = out.evolution
    N = evo.population
    R = np.asarray(evo.fixation, dtype=float) * N
    with np.errstate(divide="ignore", invalid="ignore"):
        L = np.clip(np.log10(np.where(np.isfinite(R), np.maximum(R, 1e-300), np.nan)), -3, 3)
    fig, ax = _square_axes(plt, len(out.entrants))
    vmax = max(1.0, float(np.nanmax(np.abs(L)))) if np.isfinite(L).any() else 1.0
    im = _show(ax, plt, L, np.eye(len(out.entrants), dtype=bool), "PuOr_r", norm=TwoSlopeNorm(0.0, -vmax, vmax))
    _annotate(ax, im, L, lambda v: f"{v:.2g}", mask=np.eye(len(out.entrants), dtype=bool), text=R)
    bar = _heatmap_frame(fig, ax, im, out.labels, "rule of the population (resident)", "rule of the one invading firm",
                         f"{N} × probability\nof taking over")
    ticks = [t for t in range(-3, 4) if -vmax <= t <= vmax]
    bar.ax.yaxis.set_major_locator(FixedLocator(ticks))
    bar.ax.yaxis.set_major_formatter(FixedFormatter([f"{10.0 ** t:g}" for t in ticks]))
    return fig
