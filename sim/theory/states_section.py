"""The demand-state part of the thresholds analysis: one record with everything the report shows.

:func:`states_section` builds one market per demand state (the market with one parameter set per
state, :func:`sim.theory.demand_states.markets_by_state`), the critical discount factor of full
collusion in every state (Rotemberg and Saloner, 1986, "A supergame-theoretic model of price wars
during booms", AER 76(3); Haltiwanger and Harrington, 1991, RAND 22(1), for cycles) and, at each
discount factor asked for, the best state-contingent collusive path with its prices.
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.core.records import Record

from .demand_states import DemandStates, StateThresholds, markets_by_state, state_thresholds
from .state_path import StatePath, best_state_path

__all__ = ["DemandStatesSection", "StatesQuestion", "states_section"]


@dataclass(frozen=True)
class StatesQuestion:
    """A validated demand-state question (built by the ``thresholds`` kind from ``[demand_states]``).

    Attributes
    ----------
    states : DemandStates
    parameter : str
        The market or demand parameter that moves with the state (``intercept``, ``size``, ``cost``, ...).
    values : tuple of float
        Its value in each state (length n_states).
    """

    states: DemandStates
    parameter: str
    values: tuple


@dataclass(frozen=True)
class DemandStatesSection(Record):
    """Collusion when demand moves between observed states.

    Attributes
    ----------
    states : DemandStates
    parameter : str
    values : list of float
        The parameter's value in each state (length n_states).
    thresholds : StateThresholds
        Critical discount factors of full collusion in every state, per firm.
    paths : list of StatePath
        The best state-contingent path at each discount factor asked for (where ``delta (1 + growth)``
        stays below one).
    """

    states: DemandStates
    parameter: str
    values: list
    thresholds: StateThresholds
    paths: list[StatePath]


def states_section(market, question: StatesQuestion, deltas, agreement: str = "joint") -> DemandStatesSection:
    """Per-state thresholds and the best state-contingent path at each discount factor.

    Parameters
    ----------
    market : Market
        The market of every state but for ``question.parameter``.
    question : StatesQuestion
    deltas : sequence of float in (0, 1), length n_deltas
    agreement : str
        The agreement rule in each state (``"joint"``, ``"symmetric"`` or ``"proportional"``).

    Returns
    -------
    DemandStatesSection
    """
    states = question.states
    markets = markets_by_state(market, question.parameter, list(question.values))
    th = state_thresholds(states, markets, agreement)
    paths = [best_state_path(states, markets, float(d), agreement) for d in deltas
             if states.effective_discount(float(d)) < 1.0]
    return DemandStatesSection(states, question.parameter, [float(v) for v in question.values], th, paths)
