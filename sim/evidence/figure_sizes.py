"""Sizes and bands shared by figures of several analyses: the height of a figure of bars, and the replications
behind a share drawn period by period (with the words its band's caption uses)."""

from __future__ import annotations

from sim.evidence.figures import PAGE_WIDTH

__all__ = ["MAX_BARS_HEIGHT", "SHARE_BAND_WORDS", "bars_height", "share_trials"]

#: the tallest figure of bars: four fifths of the page's width, so that it fits a screen and half a printed page
MAX_BARS_HEIGHT = 0.8 * PAGE_WIDTH


def bars_height(n_bars: int, per_bar: float = 0.16, extra: float = 1.4) -> float:
    """The height of a figure of ``n_bars`` horizontal bars at :data:`PAGE_WIDTH`: room for each bar and the axes'
    text, no taller than :data:`MAX_BARS_HEIGHT` (bars get thinner instead).

    Parameters
    ----------
    n_bars : int
        Bars drawn (groups times bars per group).
    per_bar : float
        Inches per bar below the cap.
    extra : float
        Inches for the title, the axis and the legend.

    Returns
    -------
    float
        Inches.
    """
    return float(min(max(2.4, per_bar * n_bars + extra), MAX_BARS_HEIGHT))


#: how the band around a share of replications period by period is computed (a caption's words; ``{n}``: the
#: replications)
SHARE_BAND_WORDS = ("pointwise 95 % Wilson score interval of the share among the {n} replications in each period "
                    "(Wilson, 1927, JASA 22)")


def share_trials(run: dict) -> int | None:
    """The replications behind each period's share of a simulation with these ``run`` settings: all of them under a
    fixed horizon; None under a random one (the replications still running differ from period to period).

    Parameters
    ----------
    run : dict
        The simulation's ``run`` settings (``horizon``, ``replications``).

    Returns
    -------
    int or None
    """
    if run.get("horizon", "fixed") != "fixed":
        return None
    return int(run["replications"])
