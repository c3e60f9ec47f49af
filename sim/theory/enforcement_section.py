"""The enforcement part of the thresholds analysis: one record with everything the report shows.

:func:`enforcement_section` gathers, for one market and one enforcement regime (see
:mod:`sim.theory.enforcement` for the conventions), the critical discount factor of every firm under
enforcement beside plain grim trigger, the expected fines, and at each discount factor asked for the
deterrence fine, the discounted fines and the most profitable profile enforcement leaves sustainable;
optionally the deterrence frontier over a grid of detection rates and fines at the first discount
factor (Motta and Polo, 2003, "Leniency programs and cartel prosecution", IJIO 21(3) -- from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.records import Record

from .deterrence import (
    DeterrenceFrontier,
    EnforcedCollusion,
    EnforcementAnalysis,
    deterrence_frontier,
    enforced_partial_collusion,
    enforcement_analysis,
)
from .enforcement import Enforcement, _k, enforcement_terms
from .equilibrium import stage_game
from .stage_profits import stage_profits

__all__ = ["EnforcementQuestion", "EnforcementSection", "enforcement_section", "incentive_slack"]


@dataclass(frozen=True)
class EnforcementQuestion:
    """A validated enforcement question (built by the ``thresholds`` kind from ``[enforcement]``).

    Attributes
    ----------
    enforcement : Enforcement
    frontier_detection : tuple of float
        Detection rates of the deterrence frontier (empty: no frontier).
    frontier_fines : tuple of float
        Fines of the deterrence frontier, in the units of ``enforcement.fine``.
    """

    enforcement: Enforcement
    frontier_detection: tuple = ()
    frontier_fines: tuple = ()


@dataclass(frozen=True)
class EnforcementSection(Record):
    """Collusion under enforcement in one market.

    Attributes
    ----------
    overall : EnforcementAnalysis
        Per-firm thresholds under enforcement and without, expected fines and the cartel's expected life.
    at_delta : list of EnforcementAnalysis
        The same at each discount factor asked for, with the deterrence fines and discounted fines.
    partial : list of EnforcedCollusion
        At each discount factor, the most profitable profile on the path from static Nash to the
        agreement that enforcement leaves sustainable.
    frontier : DeterrenceFrontier or None
        Sustainability over the grid of detection rates and fines at the first discount factor.
    slack : list of ndarray of shape (n_firms,)
        At each discount factor, each firm's incentive slack (:func:`incentive_slack`).
    """

    overall: EnforcementAnalysis
    at_delta: list[EnforcementAnalysis]
    partial: list[EnforcedCollusion]
    frontier: DeterrenceFrontier | None = None
    slack: list[np.ndarray] | None = None


def incentive_slack(profits, enforcement: Enforcement, delta: float) -> np.ndarray:
    """Each firm's value of keeping the agreement minus its value of cheating, at ``delta``.

    Both are counted in excess of static Nash forever: ``W = (c - e) / k(delta)`` for collusion under
    enforcement and ``D = d - phi`` for the best deviation (see :mod:`sim.theory.enforcement`). The firm
    keeps the agreement where the slack is at least zero; unlike the critical discount factor it is
    finite everywhere and linear in the fine, so the sustainability boundary of a sweep over fines and
    detection rates is its zero contour.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
    enforcement : Enforcement
    delta : float in (0, 1)

    Returns
    -------
    ndarray of shape (n_firms,)
        In money (the profits' unit).
    """
    sp = stage_profits(profits)
    t = enforcement_terms(sp, enforcement)
    k = _k(float(delta), t.conviction_rate, t.after_detection)
    return (sp.collusive - sp.nash - t.expected_fine) / k - (sp.deviation - sp.nash - t.deviator_fine)


def enforcement_section(market, question: EnforcementQuestion, deltas, agreement: str = "joint",
                        actions=None) -> EnforcementSection:
    """Everything the thresholds report shows about enforcement.

    Parameters
    ----------
    market : Market
    question : EnforcementQuestion
    deltas : sequence of float in (0, 1), length n_deltas
    agreement : str
    actions : sequence of float of length n_products, optional
        The agreed actions with ``agreement="given"``.

    Returns
    -------
    EnforcementSection
    """
    st = stage_game(market, agreement, actions)
    enf = question.enforcement
    overall = enforcement_analysis(st, enf)
    at = [enforcement_analysis(st, enf, float(d)) for d in deltas]
    partial = [enforced_partial_collusion(market, enf, float(d), agreement, stage=st) for d in deltas]
    frontier = None
    if question.frontier_detection and question.frontier_fines and len(deltas):
        frontier = deterrence_frontier(st, enf, float(deltas[0]), question.frontier_detection,
                                       question.frontier_fines)
    slack = [incentive_slack(st, enf, float(d)) for d in deltas]
    return EnforcementSection(overall, at, partial, frontier, slack)
