"""How two critical discount factors are compared, and what a discount factor sustains.

A threshold that is not finite (``nan``, or None in JSON) means "not sustainable at any discount factor below one"
and ranks above every number. Two thresholds within :data:`TOL` of each other are the same.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

__all__ = ["CATEGORY_TEXT", "TOL", "category", "compare", "finite_or_none", "flips", "rank", "sustains"]

#: thresholds closer than this are reported as unchanged
TOL = 1e-9

CATEGORY_TEXT = {
    "both": "sustainable before and after the merger",
    "neither": "sustainable neither before nor after the merger",
    "after only": "sustainable only after the merger",
    "before only": "sustainable only before the merger",
}


def rank(x) -> float:
    """A threshold for comparison: not sustainable ranks above every number.

    Parameters
    ----------
    x : float or None

    Returns
    -------
    float
        ``x``, or ``inf`` when it is None or not finite.
    """
    return math.inf if x is None or not math.isfinite(x) else float(x)


def compare(before, after) -> str:
    """The merger's effect on a threshold.

    Parameters
    ----------
    before, after : float or None
        The thresholds before and after the merger.

    Returns
    -------
    {"easier", "harder", "unchanged"}
        ``easier``: the threshold falls (less patience needed).
    """
    a, b = rank(before), rank(after)
    if a == b or (math.isfinite(a) and math.isfinite(b) and abs(a - b) <= TOL):
        return "unchanged"
    return "easier" if b < a else "harder"


def sustains(th, delta: float) -> bool:
    """Whether the discount factor ``delta`` reaches the threshold ``th``.

    Parameters
    ----------
    th : float or None
    delta : float

    Returns
    -------
    bool
    """
    return bool(math.isfinite(rank(th)) and delta >= th - 1e-15)


def category(pre: bool, post: bool) -> str:
    """Where an agreement is sustainable, in one word.

    Parameters
    ----------
    pre, post : bool
        Sustainable before, after the merger.

    Returns
    -------
    {"both", "neither", "after only", "before only"}
    """
    return {(True, True): "both", (False, False): "neither", (False, True): "after only",
            (True, False): "before only"}[(pre, post)]


def finite_or_none(x):
    """A number as a float, None when it is None or not finite.

    Parameters
    ----------
    x : float or None

    Returns
    -------
    float or None
    """
    return None if x is None or not math.isfinite(x) else float(x)


def flips(x: np.ndarray, y: np.ndarray) -> list:
    """Where ``y`` changes sign: between consecutive finite non-zero values of opposite signs (linear
    interpolation); zeros carry no sign and are skipped.

    Parameters
    ----------
    x, y : ndarray of shape (n,)

    Returns
    -------
    list of float
    """
    pts = [(float(a), float(b)) for a, b in zip(x, y) if math.isfinite(b) and b != 0]
    out = []
    for (x0, y0), (x1, y1) in itertools.pairwise(pts):
        if y0 * y1 < 0:
            out.append(x0 + (x1 - x0) * y0 / (y0 - y1))
    return out
