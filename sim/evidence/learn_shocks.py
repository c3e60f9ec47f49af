"""The words of a learn result about its demand shock (``learning.demand_sigma > 0``, :mod:`sim.learning.shocks`)."""

from __future__ import annotations

from sim.core.text import fmt_num
from sim.learning.analysis import LearnResult

__all__ = ["shock_lines"]

_SHAPES = {"lognormal": "exp(sigma Z - sigma^2/2)", "normal": "1 + sigma Z, floored at 0"}


def shock_lines(res: LearnResult) -> list[str]:
    """The demand shock of a run in words, and what it does and does not change (no lines without one).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
    """
    st = res.settings
    if not st.get("demand_sigma"):
        return []
    noise = st["demand_noise"]
    return [f"Demand shock: each period every firm's profit is scaled by one {noise} shock of mean one "
            f"({_SHAPES[noise]}, sigma {fmt_num(st['demand_sigma'])}), the same for every firm; the learners learn "
            "from these realised profits but condition on past prices only, so the limit outcomes (greedy play "
            "after learning) do not react to a draw and their profits are expected profits (Calvano, Calzolari, "
            "Denicolo and Pastorello, 2021, after Green and Porter, 1984)"]
