"""The compiled form of automaton strategies and the numba functions that play it.

Everything here is plain arrays and ``@njit(cache=True)`` functions, so that the simulation kernel
(:mod:`sim.simulation.kernel`) and other kernels (learning agents, tournaments) can step automata from numba.
The plain-Python twin used by the tests is :mod:`sim.simulation.twin`.

Compiled line-up
----------------
A line-up of ``n_firms`` automata (``S`` the largest state count, ``L`` the largest level count,
``n_products`` the number of products; one product per firm unless firms own several) is four arrays:

``states`` : int64 array of shape (n_firms, S, N_STATE_INT)
    Per state: ``ACTION`` (level index played), ``EXPECT`` (level index whose profile the firm expects
    from everyone; -1: none), ``JUDGE`` (``JUDGE_RESTRAINT`` or ``JUDGE_PUNISHMENT``), ``WATCH`` (signal
    mode, ``WATCH_*``), ``GOOD`` and ``BAD`` (next state after a good or bad signal), ``ALT_GOOD`` and
    ``ALT_BAD`` (alternative next states), ``COLLUSIVE`` (1 if the state counts as colluding).
``probs`` : float64 array of shape (n_firms, S, N_STATE_FLT)
    Per state: ``THRESHOLD`` (trigger price or aspiration profit of the price and profit signals),
    ``P_ALT_GOOD`` and ``P_ALT_BAD`` (probability of going to the alternative state instead; forgiveness
    is ``P_ALT_BAD`` with ``ALT_BAD`` a collusive state), ``P_CHEAT`` (probability per period of playing
    the cheating level instead of the state's action).
``firms`` : int64 array of shape (n_firms, N_FIRM_INT)
    Per firm: ``N_STATES``, ``INITIAL`` state, ``CHEAT_LEVEL`` (level index played when cheating),
    ``CHEAT_FROM`` and ``CHEAT_UNTIL`` (periods ``t`` with ``CHEAT_FROM <= t < CHEAT_UNTIL``, counted from
    0, in which ``P_CHEAT`` applies).
``levels`` : float64 array of shape (n_firms, L, n_products)
    Level ``l`` of firm ``i`` is a whole action profile: the firm plays the entries of its own products
    and, when judging conduct, expects the entries of its rivals' products.

Signals (``WATCH``)
-------------------
``WATCH_NOTHING``  the signal is always good (unconditional transitions).
``WATCH_ALL``      good when every firm, the firm itself included, complied with the expected profile.
``WATCH_RIVALS``   good when every rival complied (the firm's own conduct is ignored).
``WATCH_PRICE``    good when the public market price is at or above ``THRESHOLD``.
``WATCH_PROFIT``   good when the firm's own profit is at or above ``THRESHOLD``.

Compliance: with ``JUDGE_RESTRAINT`` a product complies when it is no more aggressive than expected
(Cournot: quantity <= expected + tol; Bertrand: price >= expected - tol); with ``JUDGE_PUNISHMENT``
when it is at least as aggressive (a punishment that is not shirked). ``tol = TOL * max(1, |expected|)``.
A firm complies when all its products comply. A firm sees its own conduct exactly; it misreads each
rival's conduct with the perception-error probability, independently per rival.

Compilation: the functions are inlined into their numba callers (``inline="always"``, at the level of
numba's IR): called for every firm in every period with a dozen array arguments, the out-of-line calls
took about a third of the simulation kernel's time. Inlining changes no arithmetic (no fast-math), so
results are the same bit for bit. Called from Python, they are compiled on their own without numba's
reference-counting runtime (``_nrt=False``): they never allocate. Callers pass arrays as usual.

Random draws (fixed order, each only when its probability is strictly between 0 and 1, except the
perception draws, which happen for every rival of a conduct-watching firm when the error is positive):
the cheat draw in :func:`choose_level`, the perception draws in :func:`bad_signal` (rivals in
ascending order), the transition draw in :func:`next_state`.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from sim.core.rng import next_double

__all__ = [
    "ACTION", "ALT_BAD", "ALT_GOOD", "BAD", "CHEAT_FROM", "CHEAT_LEVEL", "CHEAT_UNTIL", "COLLUSIVE", "EXPECT",
    "FOREVER", "GOOD", "INITIAL", "JUDGE", "JUDGE_PUNISHMENT", "JUDGE_RESTRAINT", "N_FIRM_INT", "N_STATES",
    "N_STATE_FLT", "N_STATE_INT", "P_ALT_BAD", "P_ALT_GOOD", "P_CHEAT", "THRESHOLD", "TOL", "WATCH",
    "WATCH_ALL", "WATCH_NOTHING", "WATCH_PRICE", "WATCH_PROFIT", "WATCH_RIVALS", "bad_signal", "choose_level",
    "firm_complies", "next_state",
]

# integer fields of a state
ACTION, EXPECT, JUDGE, WATCH, GOOD, BAD, ALT_GOOD, ALT_BAD, COLLUSIVE = range(9)
N_STATE_INT = 9
# float fields of a state
THRESHOLD, P_ALT_GOOD, P_ALT_BAD, P_CHEAT = range(4)
N_STATE_FLT = 4
# integer fields of a firm
N_STATES, INITIAL, CHEAT_LEVEL, CHEAT_FROM, CHEAT_UNTIL = range(5)
N_FIRM_INT = 5

WATCH_NOTHING, WATCH_ALL, WATCH_RIVALS, WATCH_PRICE, WATCH_PROFIT = range(5)
JUDGE_RESTRAINT, JUDGE_PUNISHMENT = 0, 1

#: relative tolerance of compliance judgements (actions are exact level values, so this only absorbs
#: representation error; it must stay far below the effective Bertrand tick of sim.models.stagecore)
TOL = 1e-12
#: CHEAT_UNTIL value meaning "no end"
FOREVER = np.int64(2**62)


@njit(cache=True, _nrt=False, inline="always")
def choose_level(i, s, t, states, probs, firms, rng):
    """Level firm ``i`` plays in state ``s`` at period ``t`` (0-based).

    Draws one uniform from ``rng`` only when the state's cheat probability is strictly between 0 and 1
    and ``t`` is in the firm's cheat window.

    Parameters
    ----------
    i : int
        The firm.
    s : int
        Its current state.
    t : int
        The period, counted from 0.
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of the line-up's states.
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of the line-up's states.
    firms : int64 ndarray of shape (n_firms, N_FIRM_INT)
        Per-firm fields (cheating level and window).
    rng : uint64 ndarray of shape (4,)
        The replication's generator state, advanced in place.

    Returns
    -------
    level : int
        Index of the level played (into ``levels[i]``).
    cheated : bool
        Whether the firm played its cheating level.
    """
    p = probs[i, s, P_CHEAT]
    if p > 0.0 and t >= firms[i, CHEAT_FROM] and t < firms[i, CHEAT_UNTIL]:
        if p >= 1.0:
            return firms[i, CHEAT_LEVEL], True
        if next_double(rng) < p:
            return firms[i, CHEAT_LEVEL], True
    return states[i, s, ACTION], False


@njit(cache=True, _nrt=False, inline="always")
def firm_complies(i, s, j, actions, owner, states, levels, quantity_setting):
    """Whether firm ``j``'s products comply with what firm ``i`` expects in state ``s``.

    A state without expectation (``EXPECT < 0``) finds everyone compliant.

    Parameters
    ----------
    i : int
        The judging firm.
    s : int
        Its current state.
    j : int
        The judged firm.
    actions : float64 ndarray of shape (n_products,)
        Actions played this period.
    owner : int64 ndarray of shape (n_products,)
        Firm owning each product.
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of the line-up's states.
    levels : float64 ndarray of shape (n_firms, L, n_products)
        Action profile of each firm's levels.
    quantity_setting : bool
        True when actions are quantities (more is more aggressive), False for prices (less is).

    Returns
    -------
    bool
    """
    e_level = states[i, s, EXPECT]
    if e_level < 0:
        return True
    judge = states[i, s, JUDGE]
    for k in range(actions.shape[0]):
        if owner[k] != j:
            continue
        e = levels[i, e_level, k]
        tol = TOL * max(1.0, abs(e))
        # how much more aggressive than expected: a larger quantity, or a lower price
        more = actions[k] - e if quantity_setting else e - actions[k]
        if judge == JUDGE_RESTRAINT:
            if more > tol:
                return False
        elif more < -tol:
            return False
    return True


@njit(cache=True, _nrt=False, inline="always")
def bad_signal(i, s, n_firms, actions, owner, market_price, own_profit, perception_error, states, probs,
               levels, quantity_setting, rng):
    """The binary signal firm ``i`` in state ``s`` receives at the end of a period.

    Parameters
    ----------
    i : int
        The firm.
    s : int
        Its state at the start of the period.
    n_firms : int
        Number of firms.
    actions : ndarray of shape (n_products,)
        Actions played this period (after cheating and implementation errors).
    owner : int64 ndarray of shape (n_products,)
        Firm owning each product.
    market_price : float
        Public market price of the period (after the demand shock).
    own_profit : float
        Firm ``i``'s profit this period.
    perception_error : float
        Probability of misreading each rival's conduct (conduct signals only).
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of the line-up's states.
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of the line-up's states (thresholds).
    levels : float64 ndarray of shape (n_firms, L, n_products)
        Action profile of each firm's levels (the expected conduct).
    quantity_setting : bool
        True when actions are quantities, False for prices.
    rng : uint64 ndarray of shape (4,)
        The replication's generator state, advanced in place by the perception draws.

    Returns
    -------
    bool
        True when the signal is bad.
    """
    w = states[i, s, WATCH]
    if w == WATCH_NOTHING:
        return False
    if w == WATCH_PRICE:
        return market_price < probs[i, s, THRESHOLD]
    if w == WATCH_PROFIT:
        return own_profit < probs[i, s, THRESHOLD]
    bad = False
    for j in range(n_firms):
        ok = firm_complies(i, s, j, actions, owner, states, levels, quantity_setting)
        if j == i:
            if w == WATCH_ALL and not ok:
                bad = True
            continue
        if perception_error > 0.0:
            # drawn for every rival, so that the stream position does not depend on what was seen
            if next_double(rng) < perception_error:
                ok = not ok
        if not ok:
            bad = True
    return bad


@njit(cache=True, _nrt=False, inline="always")
def next_state(i, s, bad, states, probs, rng):
    """Next state of firm ``i`` from state ``s`` after a good or a bad signal.

    Draws one uniform only when the alternative-state probability is strictly between 0 and 1.

    Parameters
    ----------
    i : int
        The firm.
    s : int
        Its state at the start of the period.
    bad : bool
        Whether the signal was bad.
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of the line-up's states (transitions).
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of the line-up's states (alternative-state probabilities).
    rng : uint64 ndarray of shape (4,)
        The replication's generator state, advanced in place.

    Returns
    -------
    int
        The next state.
    """
    if bad:
        nxt, alt, p = states[i, s, BAD], states[i, s, ALT_BAD], probs[i, s, P_ALT_BAD]
    else:
        nxt, alt, p = states[i, s, GOOD], states[i, s, ALT_GOOD], probs[i, s, P_ALT_GOOD]
    if p > 0.0:
        if p >= 1.0:
            return alt
        if next_double(rng) < p:
            return alt
    return nxt
