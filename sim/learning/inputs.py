"""What the learning kernels take: a few groups of arrays, each a named tuple that numba compiles as a record.

A line-up compiles (:func:`sim.learning.lineup.compile_lineup`) into four groups, and every kernel of
:mod:`sim.learning.kernel` and :mod:`sim.learning.limits` reads its inputs from them:

* :class:`SeatInputs` -- per seat: learner or automaton, its actions, where it sits in a profile number, the
  learner's memory and parameters;
* :class:`StageInputs` -- the stage game on the grid: every profile's profits, actions and prices, the size of
  the state space;
* :class:`AutomatonInputs` -- the automata's compiled arrays (:mod:`strategies.step`);
* :class:`SessionState` -- what one session changes as it runs: Q-values, greedy actions, automaton states, the
  random stream.

Greedy play after learning adds :class:`Play` (the line-up with the learned greedy tables), the deviation of the
impulse response is :class:`DeviationInputs`, and the analysis writes into :class:`LimitOutputs`.

A new learning protocol (move timing, update rule, learner family) adds its own group here, compiled by the line-up,
and the kernel steps that read it; see DEVELOPERS.md, "Adding a learner".
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "AUTOMATON",
    "FAMILY_CODES",
    "FIXED_FAMILY",
    "INFO_FIELDS",
    "LEARNER",
    "Q_FAMILY",
    "STATUS_CAP",
    "STATUS_CONVERGED",
    "THOMPSON_FAMILY",
    "TRIGGER_FIELDS",
    "UCB_FAMILY",
    "AutomatonInputs",
    "DeviationInputs",
    "LimitOutputs",
    "Play",
    "SeatInputs",
    "SessionState",
    "StageInputs",
    "limit_outputs",
    "new_triggers",
]

#: a session stopped because no greedy strategy changed for ``convergence`` periods
STATUS_CONVERGED = 0
#: a session stopped at ``max_periods``
STATUS_CAP = 1
#: seat kinds
LEARNER = 0
AUTOMATON = 1
#: the code of each learner family in ``SeatInputs.family`` (see :data:`strategies.qlearning.FAMILIES`)
Q_FAMILY = 0
UCB_FAMILY = 1
THOMPSON_FAMILY = 2
#: a fixed policy read from a file (sim.learning.fixed): plays its greedy action, never explores or updates
FIXED_FAMILY = 3
FAMILY_CODES = {"q": Q_FAMILY, "ucb": UCB_FAMILY, "thompson": THOMPSON_FAMILY, "fixed": FIXED_FAMILY}
#: the entries of ``LimitOutputs.info``
INFO_FIELDS = ("transient", "cycle_length", "points", "deviation_gain", "deviation_pays", "returned",
               "periods_to_return", "deviation_action")


class SeatInputs(NamedTuple):
    """The seats of a line-up (``n`` of them), as the kernels read them.

    Seat ``i`` has ``radix[i]`` actions; an action profile is the mixed-radix number
    ``prof = sum_i a_i * place[i]`` with ``place[i] = prod(radix[:i])``.

    Attributes
    ----------
    kind : ndarray of int64, shape (n,)
        :data:`LEARNER` or :data:`AUTOMATON`.
    lidx : ndarray of int64, shape (n,)
        The learner number of each learner seat (0 for automata): its row of the Q-values.
    radix : ndarray of int64, shape (n,)
        Actions of each seat.
    place : ndarray of int64, shape (n,)
        Place value of each seat in a profile number.
    mod : ndarray of int64, shape (n,)
        History states a learner sees (``M**k``, ``k`` its memory; 1 for automata).
    zn : ndarray of int64, shape (n,)
        States of each automaton (1 for learners).
    zplace : ndarray of int64, shape (n,)
        Place value of each automaton's state in the system state (0 for learners).
    owner : ndarray of int64, shape (n,)
        The firm of each seat (``arange(n)``: one seat per firm).
    alpha, beta, delta : ndarray of float64, shape (n,)
        Learning rate, exploration decay and discount factor of each learner (0 for automata).
    share : ndarray of float64, shape (n,)
        The update rule of each learner: the probability that each action it did not play is updated from its
        counterfactual profit in a period (0 asynchronous, 1 synchronous, in between mixed; 0 for automata).
    family : ndarray of int64, shape (n,)
        The family of each learner (:data:`FAMILY_CODES`; 0 for automata).
    explore : ndarray of float64, shape (n,)
        A bandit's exploration constant (UCB's ``c``, Thompson's scale ``v``; 0 otherwise).
    noise : ndarray of float64, shape (n,)
        A bandit's observation noise on its scaled reward (0 otherwise).
    reward_lo, reward_span : ndarray of float64, shape (n,)
        A bandit's reward of a profit ``pi`` is ``(pi - reward_lo) * (1 / reward_span)`` (see
        :mod:`sim.learning.bandits`; 0 and 1 otherwise).
    """

    kind: np.ndarray
    lidx: np.ndarray
    radix: np.ndarray
    place: np.ndarray
    mod: np.ndarray
    zn: np.ndarray
    zplace: np.ndarray
    owner: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    delta: np.ndarray
    share: np.ndarray
    family: np.ndarray
    explore: np.ndarray
    noise: np.ndarray
    reward_lo: np.ndarray
    reward_span: np.ndarray


class StageInputs(NamedTuple):
    """The stage game on the line-up's grid.

    Attributes
    ----------
    M : int
        Number of action profiles (``prod(radix)``).
    S : int
        Number of history states (``M**K``).
    K : int
        Longest memory of a learner.
    payoff : ndarray of float64, shape (M, n)
        Profit of each seat at each profile.
    actions : ndarray of float64, shape (M, n)
        Action value (price or quantity) of each seat at each profile.
    prices : ndarray of float64, shape (M, n)
        Price of each seat at each profile.
    mprice : ndarray of float64, shape (M,)
        Public market price of each profile (what price-watching automata see; zeros without automata).
    values : ndarray of float64, shape (n, max(radix))
        Value of each action of each seat.
    quantity_setting : bool
        Whether the firms set quantities (Cournot) rather than prices.
    """

    M: int
    S: int
    K: int
    payoff: np.ndarray
    actions: np.ndarray
    prices: np.ndarray
    mprice: np.ndarray
    values: np.ndarray
    quantity_setting: bool


class AutomatonInputs(NamedTuple):
    """The automata of a line-up, compiled by the engine's compiler (:mod:`strategies.step`); rows of learner
    seats are placeholders that are never played.

    Attributes
    ----------
    states : ndarray of int64, shape (n, n_states, 9)
    probs : ndarray of float64, shape (n, n_states, 4)
    firms : ndarray of int64, shape (n, 5)
    levels : ndarray of float64, shape (n, n_levels, n)
        See :func:`strategies.compile_lineup`.
    act_of_level : ndarray of int64, shape (n, n_levels)
        The index, among the seat's actions, of the action of each level.
    """

    states: np.ndarray
    probs: np.ndarray
    firms: np.ndarray
    levels: np.ndarray
    act_of_level: np.ndarray


class SessionState(NamedTuple):
    """What a session changes in place as it runs.

    Attributes
    ----------
    Q : ndarray of float64, shape (n_learners, max(mod), max(radix))
        Q-values of each learner in each state it sees (entries beyond its states or actions are unused).
    greedy : ndarray of int64, shape (n_learners, max(mod))
        The first index of the largest Q-value of each row, kept up to date as ``Q`` changes.
    z : ndarray of int64, shape (n,)
        Automaton states (entries of learner seats unused).
    rng : ndarray of uint64, shape (4,)
        The session's xoshiro256** state.
    clock : ndarray of int64, shape (2,)
        Periods played so far and, of them, the last consecutive ones without a change of any greedy action: read
        when the session starts (zeros for a new session; a saved session's counters to continue it) and written
        when it stops.
    triggers : ndarray of int64, shape (n, 4)
        The record of every automaton seat's punishments (:data:`TRIGGER_FIELDS`; :func:`new_triggers` for a new
        session): a period counts as punishing when the automaton plays it in a non-collusive state, and an entry
        is a move from a collusive state to a non-collusive one, dated by the period whose signal caused it.
        Learner rows stay as they are.
    counts : ndarray of int64, shape (n_learners, max(radix))
        A bandit's plays of each of its prices so far (zeros for Q-learners); its step counter is their sum.
    sums : ndarray of float64, shape (n_learners, max(radix))
        A bandit's sum of the rewards each price earned (zeros for Q-learners). Its row ``Q[li, 0]`` holds its
        estimates (the mean reward, or the posterior mean), and ``greedy[li, 0]`` their first argmax.
    """

    Q: np.ndarray
    greedy: np.ndarray
    z: np.ndarray
    rng: np.ndarray
    clock: np.ndarray
    triggers: np.ndarray
    counts: np.ndarray
    sums: np.ndarray


#: the columns of a session's record of its automata's punishments (``SessionState.triggers``, one row per seat):
#: entries into a non-collusive state from a collusive one, the periods (from 0) of the first and the last entry
#: (-1: none), and the periods played in a non-collusive state
TRIGGER_FIELDS = ("count", "first", "last", "punishing")


def new_triggers(n: int) -> np.ndarray:
    """An empty record of the automata's punishments: no entry yet (see :data:`TRIGGER_FIELDS`).

    Parameters
    ----------
    n : int
        Seats.

    Returns
    -------
    ndarray of int64, shape (n, 4)
    """
    out = np.zeros((n, len(TRIGGER_FIELDS)), dtype=np.int64)
    out[:, 1:3] = -1
    return out


class Play(NamedTuple):
    """Greedy play after learning: the line-up and the learned greedy tables.

    Attributes
    ----------
    seats : SeatInputs
    stage : StageInputs
    automata : AutomatonInputs
    greedy : ndarray of int64, shape (n_learners, max(mod))
    t_end : int
        The period the automata see (the end of learning).
    rng : ndarray of uint64, shape (4,)
        The generator automata that act at random draw from (advanced in place); deterministic line-ups never
        draw.
    """

    seats: SeatInputs
    stage: StageInputs
    automata: AutomatonInputs
    greedy: np.ndarray
    t_end: int
    rng: np.ndarray


#: :attr:`DeviationInputs.value` of a deviation valued with the deviating seat's own profit
OWN_PROFIT = np.zeros(0)


class DeviationInputs(NamedTuple):
    """The one-period deviation of the impulse response, and the simulation settings of the estimate.

    Attributes
    ----------
    seat : int
        The seat forced to deviate.
    action : int
        Its forced action index, or -1 for its static best response (the first of equal ones) to the others'
        actions of the deviation period.
    discount : float
        Discount factor of the deviator's value.
    points : int
        Deviate from at most this many points of the limit cycle (or simulated deviations).
    burn_in : int
        Estimate only: periods of greedy play simulated and discarded before the averages start.
    periods : int
        Estimate only: periods averaged.
    horizon : int
        Estimate only: periods (the deviation period included) over which a deviation's value is summed.
    value : ndarray of float64, shape (M,) or (0,)
        The profit a deviation is valued with (and the static best response chosen by) at each profile: after a
        merger, the deviator's owner's -- the merged firm's total, what its learner is rewarded with
        (:attr:`sim.learning.lineup.Lineup.reward`); empty (the default): the seat's own profit.
    """

    seat: int
    action: int
    discount: float
    points: int
    burn_in: int = 0
    periods: int = 0
    horizon: int = 0
    value: np.ndarray = OWN_PROFIT


class LimitOutputs(NamedTuple):
    """Where the analysis of greedy play after learning writes.

    Attributes
    ----------
    cycle : ndarray of int64, shape (L,)
        Receives the profiles of the first ``min(cycle length, L)`` periods of the limit cycle.
    lim_actions, lim_prices, lim_profits : ndarray of float64, shape (n,)
        Receive the means over the limit cycle (or the simulated periods).
    ir_prices, ir_profits : ndarray of float64, shape (T + 2, n)
        Receive the impulse response: row 0 the period before the deviation, row 1 the deviation, rows
        ``2 .. T+1`` greedy play afterwards.
    cf_prices, cf_profits : ndarray of float64, shape (T + 2, n)
        Receive the path without the deviation, in the same rows.
    info : ndarray of float64, shape (8,)
        Receives the numbers named by :data:`INFO_FIELDS`.
    """

    cycle: np.ndarray
    lim_actions: np.ndarray
    lim_prices: np.ndarray
    lim_profits: np.ndarray
    ir_prices: np.ndarray
    ir_profits: np.ndarray
    cf_prices: np.ndarray
    cf_profits: np.ndarray
    info: np.ndarray


def limit_outputs(n_seats: int, response_periods: int, cycle_store: int = 64) -> LimitOutputs:
    """Fresh output arrays of the limit analysis of one session.

    Parameters
    ----------
    n_seats : int
        Seats of the line-up (``n``).
    response_periods : int
        Periods recorded after the deviation (``T``).
    cycle_store : int
        Periods of the limit cycle kept (``L``).

    Returns
    -------
    LimitOutputs
        Zeros (the cycle: -1), shapes as documented there.
    """
    n, T2 = int(n_seats), int(response_periods) + 2
    return LimitOutputs(np.full(int(cycle_store), -1, np.int64), np.zeros(n), np.zeros(n), np.zeros(n),
                        np.zeros((T2, n)), np.zeros((T2, n)), np.zeros((T2, n)), np.zeros((T2, n)), np.zeros(8))
