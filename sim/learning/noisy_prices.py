"""Learning from noisy prices: each Q-learner sees its own last price exactly and its rivals' last prices with error.

The ``[learning] observe = "noisy_prices"`` setting, with ``price_noise`` (the standard deviation of the error, in
steps of the price grid). It is a protocol of imperfect monitoring in the sense of Stigler (1964), "A theory of
oligopoly", Journal of Political Economy 72, and Green and Porter (1984), "Noncooperative collusion under imperfect
price information", Econometrica 52: a firm cannot tell for sure what its rivals charged, so a punishment may start
after a price that was never cut, and a cut may go unseen. The measurement error of a price that firms collect about
each other (read off a shelf, a screen or a price comparison page) is its model here.

The protocol
------------
* Learner ``i``'s state is a profile of the grid, ``o_i``: its own last price, and for each rival ``j`` the price it
  saw, ``clip(round(a_j + price_noise * z_ij), 0, m_j - 1)`` with ``a_j`` the index of the price ``j`` charged,
  ``z_ij`` a standard normal and ``round`` to the nearest index (halves up). Each learner draws its own errors,
  so two learners may see the same period differently.
* The state has memory one (``k = 1``): ``m ** n`` states per learner, those of the prices protocol.
* Everything else is the prices protocol of :func:`sim.learning.kernel.run_session` with its asynchronous rule:
  simultaneous moves, exploration ``exp(-beta t)``, the value of the action played updated from the realised profit
  and the best value of the state the learner sees next (Watkins and Dayan, 1992).
* Every seat is a Q-learner with the asynchronous rule and memory one; no automata, bandits or events
  (:func:`check_noisy_lineup` says so, naming ``learning.observe``). A demand shock may be added.
* Draws, per period, after the prices protocol's and the demand shock's: learners in seat order, for each its
  rivals in seat order, one ziggurat normal (:func:`sim.core.rng.next_normal_zig`).

Where it runs
-------------
In the learning kernel itself, :func:`sim.learning.kernel.run_session` with ``observe = 2`` and ``band`` the
noise: a learner's state is read with :func:`sim.learning.signals.signal_state` (width ``m ** n``) and the next one is
computed with :func:`seen_price` (inlined). :func:`reference_noisy_session` is its plain-Python twin.

Layout and the limit
--------------------
The system state is one integer, ``x = sum_i o_i * (m ** n) ** i``, saved as ``history``. Learner ``i``'s own price is
exact in ``o_i``, so the profile actually played last is known (:func:`true_profile`). The limit outcomes are those
of greedy play *without error*, from that profile: every learner then sees the true profile, which is the prices
protocol's state, and the limit cycle, the impulse response and the deviation values are those of
:func:`sim.learning.limits.analyse_limit` on the learned greedy tables.

Play with error after learning
------------------------------
What the error does to the learned strategies once learning stops is measured apart (:func:`error_play`): from the
system state at the end of learning, every learner plays its greedy action for the view it has, and sees its
rivals' prices with the same error as during learning, for :data:`ERROR_PLAY_PERIODS` periods; no learning, no
exploration, no demand shock (profits are the stage game's). The means of those periods are the outcomes *with
error*, beside the limit outcomes *without error*. The draws come from the session's generator at the end of
learning advanced by ``2**128`` draws (:func:`sim.learning.limits.jump`), so they share none with a continuation of
the saved session. :func:`twin_error_play` is the plain-Python twin.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.errors import InputError
from sim.core.rng import ReferenceStream, next_normal_zig
from sim.learning.inputs import AUTOMATON, Q_FAMILY
from sim.learning.limits import jump
from sim.learning.shocks import twin_shock

__all__ = ["ERROR_PLAY_PERIODS", "PRICE_NOISE", "check_noisy_lineup", "error_play", "error_play_start",
           "noisy_start", "reference_noisy_session", "seen_price", "true_profile", "twin_error_play"]

#: the default standard deviation of a seen price's error, in grid steps
PRICE_NOISE = 1.0

#: periods of greedy play with error after learning whose means are the outcomes with error (:func:`error_play`)
ERROR_PLAY_PERIODS = 10_000


def check_noisy_lineup(lineup, key: str = "learning.observe") -> None:
    """Refuse a line-up the noisy-price protocol cannot run.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    key : str
        Key path of the setting in error messages.

    Raises
    ------
    InputError
        An automaton or a bandit, a learner with the synchronous or mixed rule, or a memory other than one period.
    """
    seats = lineup.seats
    if (seats.kind == AUTOMATON).any() or (seats.family != Q_FAMILY).any():
        raise InputError(key, "'noisy_prices' needs a Q-learner on every seat (no automata or bandits)")
    if (seats.share > 0.0).any():
        raise InputError(key, "'noisy_prices' needs the asynchronous update rule (learning.update = 'asynchronous')")
    if int(lineup.stage.K) != 1:
        raise InputError(key, f"'noisy_prices' needs a memory of one period (learning.k = 1), got k = "
                              f"{int(lineup.stage.K)}")
    if int(lineup.stage.M) ** int(seats.radix.size) >= 2**62:
        raise InputError(key, f"'noisy_prices' keeps every learner's view in one integer: "
                              f"{int(lineup.stage.M)} profiles to the power {int(seats.radix.size)} firms is too many "
                              "(fewer prices or firms)")


@njit(cache=True, nogil=True, inline="always")
def seen_price(a, noise, m, z):
    """The index of the price a learner sees a rival charge.

    Parameters
    ----------
    a : int
        The index of the price charged.
    noise : float
        Standard deviation of the error, in grid steps.
    m : int
        The rival's number of prices.
    z : float
        A standard normal draw.

    Returns
    -------
    int
        ``a + noise * z`` rounded to the nearest index (halves up) and kept on the grid.
    """
    v = math.floor(a + noise * z + 0.5)
    if v < 0.0:
        return 0
    if v > m - 1.0:
        return m - 1
    return int(v)


def noisy_start(s: int, lineup) -> int:
    """The system state at the start of a session: every learner sees the profile of history state ``s`` as it is.

    Parameters
    ----------
    s : int
        A history state of :func:`sim.learning.kernel.initial_state` (memory one: a profile).
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    int
    """
    M, n = int(lineup.stage.M), int(lineup.seats.radix.size)
    return sum(int(s) * M**i for i in range(n))


def true_profile(x: int, lineup) -> int:
    """The profile played last in system state ``x``: each learner's own price, which it sees exactly.

    Parameters
    ----------
    x : int
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    int
    """
    seats, M = lineup.seats, int(lineup.stage.M)
    out = 0
    for i in range(seats.radix.size):
        o = (int(x) // M**i) % M
        place = int(seats.place[i])
        out += ((o // place) % int(seats.radix[i])) * place
    return out


def reference_noisy_session(lineup, rng_state, convergence, max_periods, noise, shock=0, sigma=0.0):
    """Plain-Python twin of :func:`sim.learning.kernel.run_session` with ``observe = 2``, from a new session: slow,
    readable, the check on it.

    States are tuples of price indices (what each learner saw), Q-values a dictionary of lists keyed by them, the
    greedy action recomputed with ``max`` on every use; the draws are the kernel's, in its order.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    rng_state : array_like of uint64, shape (4,)
        The session's generator state.
    convergence, max_periods : int
    noise : float
        ``price_noise``.
    shock : int
    sigma : float

    Returns
    -------
    dict
        ``status``, ``periods``, ``state`` (the kernel's system state), ``Q`` (ndarray in the kernel's layout),
        ``rng`` (the generator state after the last period).
    """
    seats = lineup.seats
    n = int(seats.radix.size)
    radix = [int(r) for r in seats.radix]
    place = [int(p) for p in seats.place]
    payoff = lineup.learning_stage.payoff.tolist()
    M = int(lineup.stage.M)
    rng = ReferenceStream(rng_state)
    first = tuple(rng.next_below(radix[i]) for i in range(n))  # the history draw of initial_state, memory one
    views = [first] * n

    def number(view):
        return sum(a * p for a, p in zip(view, place))

    q0 = lineup.q0
    Q = [{} for _ in range(n)]

    def row(i, view):
        key = number(view)
        if key not in Q[i]:
            Q[i][key] = [float(v) for v in q0[int(seats.lidx[i]), key, :radix[i]]]
        return Q[i][key]

    t, stable, status = 0, 0, 1
    while t < max_periods:
        acts = []
        for i in range(n):
            if rng.next_double() < math.exp(-float(seats.beta[i]) * t):
                acts.append(rng.next_below(radix[i]))
            else:
                r = row(i, views[i])
                acts.append(r.index(max(r)))
        prof = number(acts)
        theta = twin_shock(shock, sigma, rng)
        new_views = []
        for i in range(n):
            seen = []
            for j in range(n):
                if j == i:
                    seen.append(acts[j])
                else:
                    v = math.floor(acts[j] + noise * rng.next_normal_zig() + 0.5)
                    seen.append(int(min(max(v, 0.0), radix[j] - 1.0)))
            new_views.append(tuple(seen))
        changed = False
        for i in range(n):
            r = row(i, views[i])
            before = r.index(max(r))
            a, al, de = acts[i], float(seats.alpha[i]), float(seats.delta[i])
            r[a] = (1.0 - al) * r[a] + al * (theta * payoff[prof][i] + de * max(row(i, new_views[i])))
            changed = changed or r.index(max(r)) != before
        views = new_views
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = 0
            break
    q = lineup.q0.copy()
    for i in range(n):
        for key, r in Q[i].items():
            q[int(seats.lidx[i]), key, :radix[i]] = r
    x = sum(number(views[i]) * M**i for i in range(n))
    return {"status": status, "periods": t, "state": x, "Q": q, "rng": np.array(rng.s, dtype=np.uint64)}


@njit(cache=True, nogil=True)
def error_play(x, greedy, lidx, radix, place, M, stage_prices, stage_payoff, noise, rng, periods, out):
    """Greedy play of learned strategies with the learning's observation error: the means of ``periods`` periods.

    Period by period: every learner plays the greedy action of the view it has (its own last price and its rivals'
    as it saw them; at first the views of system state ``x``), then, learners in seat order and for each its
    rivals in seat order, draws one normal per rival price it sees (:func:`seen_price`), as learning does. No
    learning, no exploration, no demand shock.

    Parameters
    ----------
    x : int
        System state at the end of learning (``sum_i o_i M**i``).
    greedy : ndarray of int64, shape (n_learners, M)
        The learned greedy actions, one row per learner, indexed by view.
    lidx, radix, place : ndarray of int64, shape (n,)
        As in :class:`sim.learning.inputs.SeatInputs`.
    M : int
        Number of action profiles.
    stage_prices, stage_payoff : ndarray of float64, shape (M, n)
        Each firm's price and profit in each profile (:class:`sim.learning.inputs.StageInputs`).
    noise : float
        Standard deviation of a seen price's error, in grid steps.
    rng : ndarray of uint64, shape (4,)
        The generator, advanced in place.
    periods : int
    out : ndarray of float64, shape (2, n)
        Receives each firm's mean price (row 0) and mean profit (row 1).
    """
    n = radix.size
    view = np.empty(n, np.int64)
    act = np.empty(n, np.int64)
    for i in range(n):
        view[i] = (x // M**i) % M
    out[:, :] = 0.0
    for _t in range(periods):
        prof = 0
        for i in range(n):
            act[i] = greedy[lidx[i], view[i]]
            prof += act[i] * place[i]
        for i in range(n):
            out[0, i] += stage_prices[prof, i]
            out[1, i] += stage_payoff[prof, i]
        for i in range(n):
            o = 0
            for j in range(n):
                aj = act[j]
                if j != i:
                    aj = seen_price(aj, noise, radix[j], next_normal_zig(rng))
                o += aj * place[j]
            view[i] = o
    out /= periods


def twin_error_play(x: int, greedy, lineup, noise: float, rng_state, periods: int):
    """Plain-Python twin of :func:`error_play` (views as tuples, the error written out), from the state the kernel
    starts from (the caller's generator state; the jump is the caller's).

    Parameters
    ----------
    x : int
    greedy : ndarray of int64, shape (n_learners, M)
    lineup : sim.learning.lineup.Lineup
    noise : float
    rng_state : array_like of uint64, shape (4,)
    periods : int

    Returns
    -------
    ndarray of float64, shape (2, n)
        Mean prices and mean profits.
    """
    seats, stage = lineup.seats, lineup.stage
    n, M = int(seats.radix.size), int(stage.M)
    radix = [int(r) for r in seats.radix]
    place = [int(p) for p in seats.place]
    rng = ReferenceStream(rng_state)
    views = [[((int(x) // M**i) % M // place[j]) % radix[j] for j in range(n)] for i in range(n)]
    sums = [[0.0] * n, [0.0] * n]
    for _ in range(periods):
        acts = [int(greedy[int(seats.lidx[i]), sum(a * p for a, p in zip(views[i], place))]) for i in range(n)]
        prof = sum(a * p for a, p in zip(acts, place))
        for i in range(n):
            sums[0][i] += float(stage.prices[prof, i])
            sums[1][i] += float(stage.payoff[prof, i])
        for i in range(n):
            for j in range(n):
                if j == i:
                    views[i][j] = acts[j]
                else:
                    v = math.floor(acts[j] + noise * rng.next_normal_zig() + 0.5)
                    views[i][j] = int(min(max(v, 0.0), radix[j] - 1.0))
    return np.array(sums) / periods


def error_play_start(rng_end) -> np.ndarray:
    """The generator state play with error starts from: the session's at the end of learning advanced by
    ``2**128`` draws.

    Parameters
    ----------
    rng_end : array_like of uint64, shape (4,)

    Returns
    -------
    ndarray of uint64, shape (4,)
        A new array.
    """
    r = np.array(rng_end, dtype=np.uint64).copy()
    jump(r)
    return r
