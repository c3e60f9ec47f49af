"""Bandit learners over the price grid: the upper confidence bound and Thompson sampling.

A bandit seat (``family = "ucb"`` or ``"thompson"`` of :class:`strategies.qlearning.QLearner`) treats its grid as
the arms of a multi-armed bandit. It keeps **no state**: it does not condition on past prices, its rivals' or its
own, and it ignores its rivals altogether -- the misspecified learner of Hansen, Misra and Pai (2021, "Frontiers:
Algorithmic collusion: supra-competitive prices via independent algorithms", Marketing Science 40(1)). Per price
``a`` it keeps the number of plays ``n_a`` (``SessionState.counts``) and the sum of the rewards earned
(``SessionState.sums``); its step counter is ``t = sum_a n_a``.

Rewards
-------
Both rules assume rewards in [0, 1]. The reward of a profit ``pi`` is ``(pi - lo) * (1 / (hi - lo))``, where ``hi`` is
the seat's largest profit on the grid (over every action profile of the line-up, so at least its monopoly-like
profit when the rivals price high) and ``lo = min(0, the seat's smallest profit on the grid)``
(:func:`reward_bounds`); a profit on the grid therefore maps into [0, 1]. With ``noise > 0`` the bandit observes
the reward plus a normal error of standard deviation ``noise`` (the noise of its price experiments; the
signal-to-noise ratio of Hansen, Misra and Pai is the spread of the rewards over the grid against it).

Choice of a price (step 1 of a period)
--------------------------------------
* UCB (Auer, Cesa-Bianchi and Fischer, 2002, "Finite-time analysis of the multiarmed bandit problem", Machine
  Learning 47, policy UCB1): every price is tried once first, in increasing order; then the price with the largest
  index ``mean_a + c sqrt(2 ln t / n_a)`` (``mean_a = sums_a / n_a``; the first of equal ones). ``c = 1`` is UCB1;
  ``c`` is ``exploration``. No random draw.
* Thompson sampling with Gaussian priors (Agrawal and Goyal, 2013, "Further optimal regret bounds for Thompson
  sampling", AISTATS, algorithm 2): for each price, in increasing order, draw ``theta_a = mean_a + v z_a /
  sqrt(n_a + 1)`` with ``mean_a = sums_a / (n_a + 1)`` and ``z_a`` a standard normal; play the first largest
  ``theta``. This is the exact posterior of a known-variance normal model: prior ``N(0, v**2)`` on the mean reward
  and rewards ``N(mean, v**2)``; ``v = 1`` is their choice, ``v`` is ``exploration``. One normal per price per
  period, two from each 64-bit word (:func:`sim.core.rng.next_normals_by_halves`: the 256-layer ziggurat with
  23-bit magnitudes, as numpy draws its single-precision normals), and ``v sqrt(1 / (n_a + 1))`` kept per price
  (:func:`arm_stats`), so that a draw is one product and one sum. The prior mean is 0 while rewards lie in [0, 1]:
  with a small ``v`` (0.1 on the baseline grid) a price played early can keep the largest draw for good, so ``v``
  well below the rewards' scale is not advised.

Update (step 2)
---------------
``n_a += 1``, ``sums_a += reward`` for the price played only, then the seat's estimates ``Q[li, 0, a]`` (``mean_a``
above: the sample mean for UCB, the posterior mean for Thompson sampling) and its greedy price (their first
argmax). After learning a bandit plays its greedy price (the limit analysis of :mod:`sim.learning.limits`), and a
session has converged when no learner's greedy price or action has changed for ``convergence`` periods.

Random draws, in the kernel's order (:mod:`sim.learning.kernel`): in step 1, a Thompson seat draws its ``m``
normals where a Q-learner draws its exploration uniforms; in step 2, learners in seat order, a bandit with noise
draws one normal for its reward (a Q-learner with the mixed rule its uniforms).

Where the work is done: the rules' loops over the prices are written in the kernel's period loop itself
(:func:`sim.learning.kernel.run_session`), which reads the arrays directly; this module holds the functions of
numbers they call (inlined), what a session derives once when it starts (:func:`bandit_scales`), and the readable
twins. What a period keeps so as not to compute it again: each price's estimate (``Q[li, 0]``) and its scale
``sqrt(1 / n_a)`` or ``v sqrt(1 / (n_a + 1))`` (for the price played, one division and one square root between
them: :func:`arm_stats`), the step counter, and, for UCB, ``c sqrt(2 ln t)`` for the bandits that share ``t`` and
``c`` (one logarithm per period); a reward is a product with ``1 / (hi - lo)``, taken once per session. Divisions and
square roots are what a bandit's period spends most on after its draws (measured on one machine: a reward divided
by the span rather than multiplied by its inverse cost a Thompson period a few per cent). Every number is computed
as the twins compute it, in the same order.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.learning.inputs import LEARNER, Q_FAMILY, THOMPSON_FAMILY, UCB_FAMILY

__all__ = [
    "arm_estimates", "arm_stats", "bandit_reward", "bandit_scales", "reward_bounds", "twin_choice", "twin_update",
    "ucb_bonus", "with_estimates",
]


def reward_bounds(payoff: np.ndarray, seat: int) -> tuple[float, float]:
    """The bounds that scale a bandit seat's profits to rewards in [0, 1] (see the module notes).

    Parameters
    ----------
    payoff : ndarray of float64, shape (M, n)
        Profit of each seat at each profile of the grid.
    seat : int

    Returns
    -------
    lo : float
        ``min(0, smallest profit of the seat on the grid)``.
    span : float
        ``largest profit - lo`` (1 when every profile gives the same profit 0).
    """
    col = payoff[:, seat]
    lo = min(0.0, float(col.min()))
    span = float(col.max()) - lo
    return lo, (span if span > 0.0 else 1.0)


@njit(cache=True, nogil=True)
def bandit_scales(kind, family, lidx, radix, counts, explore):
    """The scale of each price's exploration term, derived from the counts once when a session (re)starts:
    ``sqrt(1 / n_a)`` for UCB (0 for a price not yet played), ``v sqrt(1 / (n_a + 1))`` for Thompson sampling
    (:func:`arm_stats`).

    Kept beside the counts so that a period computes one square root per UCB seat, not one per price; being
    derived from the counts it is not saved.

    Parameters
    ----------
    kind, family, lidx, radix : ndarray of int64, shape (n,)
        As in :class:`sim.learning.inputs.SeatInputs`.
    counts : ndarray of int64, shape (n_learners, max(radix))
    explore : ndarray of float64, shape (n,)
        Each seat's exploration parameter (Thompson's ``v``; UCB's ``c`` enters through :func:`ucb_bonus`).

    Returns
    -------
    ndarray of float64, shape (n_learners, max(radix) + 1)
        The last column holds each bandit's step counter ``t = sum_a n_a`` (kept up to date by the kernel, so that
        a period need not add the counts up).
    """
    out = np.zeros((counts.shape[0], counts.shape[1] + 1))
    for i in range(kind.size):
        if kind[i] == LEARNER and family[i] != Q_FAMILY:
            for b in range(radix[i]):
                out[lidx[i], b] = arm_stats(family[i], 0.0, counts[lidx[i], b], explore[i])[1]
                out[lidx[i], -1] += counts[lidx[i], b]
    return out


@njit(cache=True, nogil=True, inline="always")
def arm_stats(fam, total, n, v):
    """A price's estimate and the scale of its exploration term after ``n`` plays, with one division and one square
    root: with ``k = n`` for UCB and ``k = n + 1`` for Thompson sampling, and ``inv = 1 / k``, the estimate is
    ``total * inv`` (UCB's sample mean, Thompson's posterior mean) and the scale ``sqrt(inv)`` for UCB (0 and 0
    before its first play) and ``v * sqrt(inv)`` for Thompson sampling (the posterior's standard deviation: a draw is
    the estimate plus this times a standard normal).

    Parameters
    ----------
    fam : int
        ``UCB_FAMILY`` or ``THOMPSON_FAMILY``.
    total : float
        Sum of the rewards the price earned.
    n : int
        Plays of the price.
    v : float
        Thompson's scale ``v`` (not used by UCB, whose ``c`` enters through :func:`ucb_bonus`).

    Returns
    -------
    estimate, scale : float
    """
    if fam == UCB_FAMILY:
        if n == 0:
            return 0.0, 0.0
        inv = 1.0 / n
        return total * inv, math.sqrt(inv)
    inv = 1.0 / (n + 1.0)
    return total * inv, v * math.sqrt(inv)


def arm_estimates(fam: int, counts: np.ndarray, sums: np.ndarray) -> np.ndarray:
    """Every price's estimate from its statistics, as :func:`arm_stats` computes it (``sums * (1 / k)``, 0 for a UCB
    price never played), for arrays of any shape.

    A continued session takes its bandits' estimates from here rather than from the saved ``Q``: they are a function
    of the statistics, and a file saved by an earlier version holds them rounded otherwise (``sums / k``).

    Parameters
    ----------
    fam : int
        ``UCB_FAMILY`` or ``THOMPSON_FAMILY``.
    counts : ndarray of int
        Plays of each price.
    sums : ndarray of float64, the shape of ``counts``
        Sums of their rewards.

    Returns
    -------
    ndarray of float64, the shape of ``counts``
    """
    k = counts.astype(np.float64) + (0.0 if fam == UCB_FAMILY else 1.0)
    inv = np.divide(1.0, k, out=np.zeros_like(k), where=k > 0)
    return sums * inv


def with_estimates(seats, q: np.ndarray, greedy: np.ndarray, counts: np.ndarray, sums: np.ndarray):
    """One session's Q-values and greedy actions with every bandit's estimates and greedy price recomputed from its
    statistics (:func:`arm_estimates`; the greedy price their first argmax, as the kernel keeps it).

    Parameters
    ----------
    seats : sim.learning.inputs.SeatInputs
    q, greedy : ndarray
        The session's (``SessionState.Q`` and ``.greedy``); not changed.
    counts, sums : ndarray
        The session's bandit statistics.

    Returns
    -------
    q, greedy : ndarray
        Copies.
    """
    q, greedy = q.copy(), greedy.copy()
    for i in range(seats.kind.size):
        if seats.kind[i] == LEARNER and int(seats.family[i]) in (UCB_FAMILY, THOMPSON_FAMILY):
            li, m = int(seats.lidx[i]), int(seats.radix[i])
            q[li, 0, :m] = arm_estimates(int(seats.family[i]), counts[li, :m], sums[li, :m])
            greedy[li, 0] = int(np.argmax(q[li, 0, :m]))
    return q, greedy


@njit(cache=True, nogil=True, inline="always")
def bandit_reward(profit, lo, inv_span):
    """The reward of a profit: ``(profit - lo) * (1 / span)`` (:func:`reward_bounds`), in [0, 1] on the grid; the
    kernel takes ``1 / span`` once per session.

    Parameters
    ----------
    profit, lo, inv_span : float

    Returns
    -------
    float
    """
    return (profit - lo) * inv_span


@njit(cache=True, nogil=True, inline="always")
def ucb_bonus(c, t):
    """UCB's ``c sqrt(2 ln t)``: the exploration term of a price is this times its scale (:func:`arm_stats`), so that
    a period computes one logarithm and one square root, not one per price.

    Parameters
    ----------
    c : float
        The exploration constant.
    t : float
        The bandit's step counter (at least its number of prices).

    Returns
    -------
    float
    """
    return c * math.sqrt(2.0 * math.log(t))


# ------------------------------------------------------------------------------------------------
# The plain-Python twins (used by sim.learning.twin)
# ------------------------------------------------------------------------------------------------


def twin_choice(family: str, c: float, counts: list, sums: list, rng) -> int:
    """The readable twin of a bandit's choice in the kernel (step 1 of :func:`sim.learning.kernel.run_session`),
    drawing from a :class:`sim.core.rng.ReferenceStream`.

    Parameters
    ----------
    family : {"ucb", "thompson"}
    c : float
    counts : list of int
        Plays of each price.
    sums : list of float
        Sum of the rewards of each price.
    rng : sim.core.rng.ReferenceStream

    Returns
    -------
    int
    """
    m = len(counts)
    if family == "ucb":
        for b in range(m):
            if counts[b] == 0:
                return b
        # mean + c sqrt(2 ln t / n), grouped as c sqrt(2 ln t) sqrt(1 / n), the kernel's rounding (arm_stats)
        bonus = c * math.sqrt(2.0 * math.log(sum(counts)))
        inv = [1.0 / n for n in counts]
        index = [sums[b] * inv[b] + bonus * math.sqrt(inv[b]) for b in range(m)]
    else:
        z = rng.next_normals_by_halves(m)
        inv = [1.0 / (n + 1.0) for n in counts]
        index = [sums[b] * inv[b] + z[b] * (c * math.sqrt(inv[b])) for b in range(m)]
    return index.index(max(index))


def twin_update(family: str, a: int, profit: float, lo: float, span: float, noise: float, counts: list, sums: list,
                rng) -> list:
    """The readable twin of a bandit's update in the kernel (step 2 of :func:`sim.learning.kernel.run_session`): the
    lists updated in place and the new estimates returned.

    Parameters
    ----------
    family : {"ucb", "thompson"}
    a : int
    profit, lo, span, noise : float
    counts : list of int
    sums : list of float
    rng : sim.core.rng.ReferenceStream

    Returns
    -------
    list of float
        Every price's estimate (0 for a price not yet played by UCB).
    """
    r = (profit - lo) * (1.0 / span)
    if noise > 0.0:
        r += noise * rng.next_normal_zig()
    counts[a] += 1
    sums[a] += r
    if family == "ucb":
        return [s * (1.0 / n) if n > 0 else 0.0 for s, n in zip(sums, counts)]
    return [s * (1.0 / (n + 1.0)) for s, n in zip(sums, counts)]
