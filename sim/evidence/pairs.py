"""Every two-firm merger and the maverick, as a reader sees them (:func:`sim.antitrust.screens.pair_thresholds`,
:func:`sim.antitrust.screens.maverick`): the lines and table rows of a report and the heatmap of the changes, shared by
the capacity and the assessment renderers."""

from __future__ import annotations

import numpy as np

from sim.antitrust.screens import Maverick, PairTable
from sim.core.text import fmt_num
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, number_format, text_color
from sim.evidence.render import Drawn, pyplot

__all__ = ["PAIR_HEADERS", "assessment_pairs", "pair_lines", "pair_rows", "pairs_figure"]

#: the columns of the table of :func:`pair_rows`
PAIR_HEADERS = ["merging firms", "threshold after", "change", "binding after"]


def pair_lines(pt: PairTable, mv: Maverick | None, accuracy_note: bool = False,
               what: str = "Nash reversion") -> list[str]:
    """What the pair table says, in sentences: the threshold before and how to read the changes, then the maverick.

    Parameters
    ----------
    pt : PairTable
    mv : Maverick or None
    accuracy_note : bool
        Say that mixed static equilibria solved on a price grid make changes below 0.005 no finding (capacity
        markets).
    what : str
        The scheme of the threshold, in words.

    Returns
    -------
    list of str
    """
    text = (f"Critical discount factor under {what} before any merger: {fmt_num(pt.before)}; the change "
            "after each two-firm merger (negative: coordination becomes easier).")
    if accuracy_note:
        text += (" The static equilibrium of each merged market is computed again; when it is mixed among three or "
                 "more unequal firms it is solved on a price grid, and changes below 0.005 are within that accuracy, "
                 "not a finding.")
    lines = [text]
    if mv is not None:
        lines.append(f"Maverick: {mv.reason}." if mv.firm >= 0 else f"Maverick: none ({mv.reason}).")
    return lines


def pair_rows(pt: PairTable) -> list[list]:
    """One table row per pair of firms (columns :data:`PAIR_HEADERS`).

    Parameters
    ----------
    pt : PairTable

    Returns
    -------
    list of list
    """
    return [[" + ".join(r["firms"]), r["after"], r["change"], r["binding_after"]] for r in pt.rows()]


def pairs_figure(pt: PairTable, what: str = "Nash reversion") -> Drawn:
    """The change of the threshold after each two-firm merger, as a heatmap centred on no change.

    Parameters
    ----------
    pt : PairTable
    what : str
        The scheme of the threshold, in words.

    Returns
    -------
    Drawn
    """
    from matplotlib.colors import TwoSlopeNorm  # heavy: only when a figure is drawn

    plt = pyplot()
    n = len(pt.names)
    V = np.array(pt.change, dtype=float)
    finite = V[np.isfinite(V)]
    span = max(float(np.abs(finite).max()) if finite.size else 0.0, 1e-9)
    side = min(PAGE_WIDTH - 1.4, max(2.8, 0.5 * n + 1.4))
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, side + 0.6), layout="constrained")
    cmap = plt.get_cmap("PuOr_r").with_extremes(bad=(1.0, 1.0, 1.0, 0.0))
    norm = TwoSlopeNorm(0.0, -span, span)
    im = ax.imshow(np.ma.masked_invalid(V), cmap=cmap, norm=norm)
    fmt = number_format(finite if finite.size else [0.0])
    for i in range(n):
        for j in range(n):
            if i != j and np.isfinite(V[i, j]):
                text = fmt(V[i, j])
                text = text.lstrip("-") if not text.strip("-0.,") else text  # no "-0.000" for a rounded zero
                ax.text(j, i, text, ha="center", va="center", fontsize=SMALL, color=text_color(cmap(norm(V[i, j]))))
    ax.set_xticks(range(n), pt.names, rotation=45, ha="right", rotation_mode="anchor", fontsize=SMALL)
    ax.set_yticks(range(n), pt.names, fontsize=SMALL)
    ax.set_xlabel("merges with", fontsize=FONT)
    ax.set_ylabel("firm", fontsize=FONT)
    ax.set_frame_on(False)
    bar = fig.colorbar(im, ax=ax, shrink=0.85)
    bar.set_label(f"change of the critical discount\nfactor ({what})", fontsize=SMALL)
    bar.ax.tick_params(labelsize=SMALL)
    return Drawn("pair-mergers", fig,
                 f"Change of the market's critical discount factor under {what} if the two firms of the cell merged: "
                 "orange cells, coordination becomes harder; purple, easier.")


def assessment_pairs(d: dict) -> tuple:
    """The pair table and the maverick stored in an assessment's document (``pair_mergers``), or ``(None, None)``.

    Parameters
    ----------
    d : dict
        The assessment as plain data.

    Returns
    -------
    tuple of (PairTable or None, Maverick or None)
    """
    pm = d.get("pair_mergers")
    if pm is None:
        return None, None
    return PairTable.from_dict(pm["pairs"]), Maverick.from_dict(pm["maverick"])
