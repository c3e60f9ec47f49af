"""Sequential (alternating) price setting by two Q-learners: the numba kernels of a session and of its limit play.

The protocol of Klein (2021, "Autonomous algorithmic collusion: Q-learning under sequential pricing", RAND Journal
of Economics 52(3), 538-558), after the alternating-move duopoly of Maskin and Tirole (1988, Econometrica 56(3)):

* the two firms move in turn: firm 1 (seat 0) sets its price in even periods, firm 2 (seat 1) in odd ones, and a
  price stays in force until its firm moves again (two periods);
* the state a firm sees when it moves is the rival's current price (its index on the rival's grid), so a learner's
  Q-values are a table ``Q[i, s, a]`` of ``m_j`` states by ``m_i`` actions;
* firm ``i`` that set ``a`` in state ``s`` in period ``t`` learns when it moves again in ``t + 2``, once the rival's
  answer ``s'`` is known:

      Q_i(s, a) <- (1 - alpha) Q_i(s, a) + alpha [pi_i(a, s) + delta pi_i(a, s') + delta**2 max_b Q_i(s', b)]

  (Klein, 2021, section 3; the update is from memory of the paper: the published abstract, read, confirms the
  protocol and the results but not the formula);
* it explores with probability ``exp(-beta t)`` (Klein writes ``(1 - theta)**t``, the same decay with ``beta =
  -ln(1 - theta)``) and otherwise plays its greedy action, the first largest value of its row.

What the kernels take: the line-up's :class:`~sim.learning.inputs.SeatInputs` and
:class:`~sim.learning.inputs.StageInputs` (``payoff[prof, i]`` with ``prof = a_0 + a_1 place[1]``) and an
:class:`AlternatingState`. Random draws, all from the session's one xoshiro256** stream, in this order: the two
starting prices (seat 0's, then seat 1's, uniform on their grids), then per period the mover's exploration uniform
and, when it explores, a second draw for its price. The readable twin of every function is in
:mod:`sim.learning.alternating_twin`; a test checks both give the same numbers bit for bit.

Greedy play after learning is deterministic: the system state (both prices and who moves next) takes at most
``2 m_0 m_1`` values, so the path from the final state ends in a cycle, found exactly by
:func:`alternating_limit`. A fixed price pair shows as a cycle whose price pair repeats every period (its *price
period* is 1); an Edgeworth-cycle-like path (Maskin and Tirole, 1988) has a longer price period.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit

from sim.core.errors import InputError
from sim.core.rng import next_below, next_double
from sim.learning.inputs import STATUS_CAP, STATUS_CONVERGED

__all__ = ["TIMINGS", "AlternatingState", "alternating_limit", "alternating_start", "check_alternating",
           "run_alternating"]

#: the move timings a learning experiment may choose (``learning.timing``): both firms set their prices every period
#: (Calvano et al., 2020), or in turn, each price held for two periods (Klein, 2021)
TIMINGS = ("simultaneous", "alternating")


class AlternatingState(NamedTuple):
    """What an alternating session changes in place as it runs.

    Attributes
    ----------
    Q : ndarray of float64, shape (2, max(radix), max(radix))
        ``Q[i, s, a]``: seat ``i``'s value of price ``a`` when the rival's current price is ``s``.
    greedy : ndarray of int64, shape (2, max(radix))
        The first index of the largest value of each row of ``Q``, kept up to date.
    prices : ndarray of int64, shape (2,)
        Each seat's price in force (an index on its grid).
    seen : ndarray of int64, shape (2,)
        The state each seat saw at its last move (-1 before its first move): the row its next update changes.
    rng : ndarray of uint64, shape (4,)
        The session's xoshiro256** state.
    clock : ndarray of int64, shape (2,)
        Periods played and, of them, the last consecutive ones without a change of a greedy action (zeros for a
        new session; written when the session stops).
    """

    Q: np.ndarray
    greedy: np.ndarray
    prices: np.ndarray
    seen: np.ndarray
    rng: np.ndarray
    clock: np.ndarray


@njit(cache=True, nogil=True)
def alternating_start(rng, radix, prices, seen):
    """Draw the starting prices (seat 0's, then seat 1's) and mark both seats as not yet moved.

    Parameters
    ----------
    rng : ndarray of uint64, shape (4,)
        Advanced in place.
    radix : ndarray of int64, shape (2,)
        Prices on each seat's grid.
    prices, seen : ndarray of int64, shape (2,)
        Receive the starting prices and -1.

    Returns
    -------
    int
        0 (the status code of the kernels: nothing can fail).
    """
    for i in range(2):
        prices[i] = next_below(rng, radix[i])
        seen[i] = -1
    return 0


@njit(cache=True, nogil=True, inline="always")
def _two_period_target(pi_first, pi_second, continuation, delta):
    """Klein's (2021) target of a move held for two periods: both periods' profits and the value of the state the
    firm meets at its next move, discounted by ``delta**2``."""
    return pi_first + delta * pi_second + delta * delta * continuation


@njit(cache=True, nogil=True)
def run_alternating(seats, stage, state, convergence, max_periods):
    """Run one alternating session until convergence or the cap.

    Parameters
    ----------
    seats : SeatInputs
        Two Q-learner seats (``alpha``, ``beta``, ``delta``, ``radix``, ``place`` are read).
    stage : StageInputs
        ``payoff`` is read.
    state : AlternatingState
        Modified in place; ``greedy`` must hold the first argmax of every row of ``Q`` on entry, and ``prices``
        and ``seen`` the starting point (:func:`alternating_start`).
    convergence : int
        Stop once no greedy action has changed for this many consecutive periods.
    max_periods : int
        Stop once this many periods have been played in all.

    Returns
    -------
    status : int
        ``STATUS_CONVERGED`` or ``STATUS_CAP``.
    periods : int
        Periods played.
    """
    radix, place, alpha, beta, delta = seats.radix, seats.place, seats.alpha, seats.beta, seats.delta
    payoff = stage.payoff
    Q, greedy, prices, seen, rng, clock = state
    t = clock[0]
    stable = clock[1]
    if stable >= convergence:
        return STATUS_CONVERGED, t
    while t < max_periods:
        i = t % 2
        j = 1 - i
        s_new = prices[j]
        changed = False
        # 1. the mover learns from its previous move, now that the rival has answered it
        s = seen[i]
        if s >= 0:
            a = prices[i]
            pi_first = payoff[a * place[i] + s * place[j], i]
            pi_second = payoff[a * place[i] + s_new * place[j], i]
            cont = Q[i, s_new, greedy[i, s_new]]
            old = Q[i, s, a]
            new = (1.0 - alpha[i]) * old + alpha[i] * _two_period_target(pi_first, pi_second, cont, delta[i])
            Q[i, s, a] = new
            g = greedy[i, s]
            if a == g:
                if new < old:
                    best = 0
                    bv = Q[i, s, 0]
                    for b in range(1, radix[i]):
                        if Q[i, s, b] > bv:
                            bv = Q[i, s, b]
                            best = b
                    if best != g:
                        greedy[i, s] = best
                        changed = True
            elif new > Q[i, s, g] or (new == Q[i, s, g] and a < g):
                greedy[i, s] = a
                changed = True
        # 2. the mover sets its price for this period and the next
        eps = math.exp(-beta[i] * np.float64(t))
        if next_double(rng) < eps:
            a = next_below(rng, radix[i])
        else:
            a = greedy[i, s_new]
        prices[i] = a
        seen[i] = s_new
        t += 1
        if changed:
            stable = 0
        else:
            stable += 1
            if stable >= convergence:
                clock[0], clock[1] = t, stable
                return STATUS_CONVERGED, t
    clock[0], clock[1] = t, stable
    return STATUS_CAP, t


@njit(cache=True, nogil=True)
def alternating_limit(seats, stage, greedy, prices, t, cycle, means):
    """Greedy play from the end of an alternating session: the cycle it ends in, and its means.

    Parameters
    ----------
    seats : SeatInputs
    stage : StageInputs
        ``payoff``, ``actions`` and ``prices`` are read.
    greedy : ndarray of int64, shape (2, max(radix))
        The learned greedy tables.
    prices : ndarray of int64, shape (2,)
        The prices in force at the end (not modified).
    t : int
        Periods played (who moves next is ``t % 2``).
    cycle : ndarray of int64, shape (L,)
        Receives the profiles of the first ``min(price period, L)`` periods of the cycle.
    means : ndarray of float64, shape (3, 2)
        Receives the mean action, price and profit of each seat over the cycle.

    Returns
    -------
    transient : int
        Periods before the cycle starts.
    length : int
        Periods after which the system state (both prices and the mover) repeats.
    period : int
        The price period: the smallest ``d`` dividing ``length`` after which the price pair repeats (1 for a fixed
        price pair).
    """
    radix, place = seats.radix, seats.place
    M = radix[0] * radix[1]
    first = np.full(2 * M, -1, np.int64)
    path = np.empty(2 * M + 1, np.int64)
    p0, p1 = prices[0], prices[1]
    mover = t % 2
    k = 0
    while True:
        code = p0 + radix[0] * p1 + M * mover
        if first[code] >= 0:
            break
        first[code] = k
        # the profile in force in period k: the mover's new price against the rival's
        if mover == 0:
            p0 = greedy[0, p1]
        else:
            p1 = greedy[1, p0]
        path[k] = p0 * place[0] + p1 * place[1]
        mover = 1 - mover
        k += 1
    start = first[code]
    length = k - start
    period = length
    for d in range(1, length):
        if length % d != 0:
            continue
        same = True
        for x in range(start, k - d):
            if path[x] != path[x + d]:
                same = False
                break
        if same:
            period = d
            break
    means[:, :] = 0.0
    for x in range(start, k):
        prof = path[x]
        for i in range(2):
            means[0, i] += stage.actions[prof, i]
            means[1, i] += stage.prices[prof, i]
            means[2, i] += stage.payoff[prof, i]
    for r in range(3):
        for i in range(2):
            means[r, i] /= length
    for x in range(min(period, cycle.size)):
        cycle[x] = path[start + x]
    return start, length, period


def check_alternating(lineup, start=None, keep: bool = False, event=None, key: str = "learning.timing") -> None:
    """Refuse a line-up or a run that the alternating protocol does not cover, before any work.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    start : object, optional
        Saved sessions to continue (refused: an alternating session is not saved).
    keep : bool
        Whether the sessions' states are to be kept (refused).
    event : object, optional
        An event after saved sessions (refused).
    key : str
        The key path named by the errors.

    Raises
    ------
    InputError
        Naming ``key`` (or the learner parameter at fault), what the protocol covers and what was given.
    """
    if lineup.n_seats != 2 or lineup.has_automata:
        raise InputError(key, f"alternating moves are played by two Q-learners (Klein, 2021); got "
                              f"{lineup.n_seats} seats: {', '.join(lineup.names)}")
    for i, c in enumerate(lineup.learners):
        where = f"learning (firm {i + 1})"
        if c.family != "q":
            raise InputError(key, f"alternating moves are for Q-learners; {where} has family = {c.family!r}")
        if c.update != "asynchronous":
            raise InputError(key, f"alternating moves update the price played only; {where} has update = "
                                  f"{c.update!r}")
        if c.k != 1:
            raise InputError(key, f"under alternating moves the state is the rival's current price (memory k = 1); "
                                  f"{where} has k = {c.k}")
        if not isinstance(c.init, str):
            raise InputError(key, f"alternating moves start from 'uniform' or 'zeros' values; {where} has given "
                                  "initial values")
    for what, given in (("learning.save_to", keep), ("learning.continue_from", start is not None),
                        ("[event]", event is not None)):
        if given:
            raise InputError(key, f"alternating sessions cannot be saved, continued or followed by an event; "
                                  f"remove {what}")
