"""Bandit learners over the price grid: the upper confidence bound and Thompson sampling.

A bandit seat (``family = "ucb"`` or ``"thompson"`` of :class:`strategies.qlearning.QLearner`) treats its grid as
the arms of a multi-armed bandit. It keeps **no state**: it does not condition on past prices, its rivals' or its
own, and it ignores its rivals altogether -- the misspecified learner of Hansen, Misra and Pai (2021, "Frontiers:
Algorithmic collusion: supra-competitive prices via independent algorithms", Marketing Science 40(1)). Per price
``a`` it keeps the number of plays ``n_a`` (``SessionState.counts``) and the sum of the rewards earned
(``SessionState.sums``); its step counter is ``t = sum_a n_a``.

Rewards
-------
Both rules assume rewards in [0, 1]. The reward of a profit ``pi`` is ``(pi - lo) / (hi - lo)``, where ``hi`` is
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
  period (the ziggurat of :func:`sim.core.rng.next_normal_zig`). The prior mean is 0 while rewards lie in [0, 1]:
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
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.rng import next_normal_zig
from sim.learning.inputs import LEARNER, Q_FAMILY, UCB_FAMILY

__all__ = ["bandit_choice", "bandit_scales", "bandit_update", "reward_bounds", "twin_choice", "twin_update"]


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
def bandit_scales(kind, family, lidx, radix, counts):
    """The scale of each price's exploration term, derived from the counts once when a session (re)starts:
    ``1 / sqrt(n_a)`` for UCB (0 for a price not yet played), ``1 / sqrt(n_a + 1)`` for Thompson sampling.

    Kept beside the counts so that a period computes one square root per UCB seat, not one per price; being
    derived from the counts it is not saved.

    Parameters
    ----------
    kind, family, lidx, radix : ndarray of int64, shape (n,)
        As in :class:`sim.learning.inputs.SeatInputs`.
    counts : ndarray of int64, shape (n_learners, max(radix))

    Returns
    -------
    ndarray of float64, shape (n_learners, max(radix) + 1)
        The last column holds each bandit's step counter ``t = sum_a n_a`` (kept up to date by
        :func:`bandit_update`, so that a period need not add the counts up).
    """
    out = np.zeros((counts.shape[0], counts.shape[1] + 1))
    for i in range(kind.size):
        if kind[i] == LEARNER and family[i] != Q_FAMILY:
            for b in range(radix[i]):
                out[lidx[i], b] = _scale(family[i], counts[lidx[i], b])
                out[lidx[i], -1] += counts[lidx[i], b]
    return out


@njit(cache=True, nogil=True, inline="always")
def _scale(fam, n):
    if fam == UCB_FAMILY:
        return 1.0 / math.sqrt(n) if n > 0 else 0.0
    return 1.0 / math.sqrt(n + 1.0)


@njit(cache=True, nogil=True, inline="always")
def bandit_choice(fam, li, m, c, counts, Q, w, rng):
    """The price a bandit plays: UCB's index, or Thompson's draws (see the module notes).

    Parameters
    ----------
    fam : int
        ``UCB_FAMILY`` or ``THOMPSON_FAMILY``.
    li : int
        The learner's row.
    m : int
        Its prices.
    c : float
        Its exploration constant.
    counts : ndarray of int64, shape (n_learners, max(radix))
    Q : ndarray of float64, shape (n_learners, max(mod), max(radix))
        Row ``Q[li, 0]`` holds the estimates (``sums / n_a`` for UCB, ``sums / (n_a + 1)`` for Thompson sampling),
        as :func:`bandit_update` keeps them.
    w : ndarray of float64, shape (n_learners, max(radix) + 1)
        :func:`bandit_scales`, as :func:`bandit_update` keeps them.
    rng : ndarray of uint64, shape (4,)
        Advanced in place (Thompson sampling only).

    Returns
    -------
    int
        The index of the price.
    """
    best = 0
    bv = -math.inf
    if fam == UCB_FAMILY:
        t = w[li, -1]
        if t < m:
            # every price is tried once first, in increasing order: the untried ones are those from t on
            for b in range(m):
                if counts[li, b] == 0:
                    return b
        # c sqrt(2 ln t / n_a) as c sqrt(2 ln t) (1 / sqrt(n_a)): one square root per period
        cs = c * math.sqrt(2.0 * math.log(t))
        for b in range(m):
            v = Q[li, 0, b] + cs * w[li, b]
            if v > bv:
                bv = v
                best = b
        return best
    for b in range(m):
        v = Q[li, 0, b] + c * next_normal_zig(rng) * w[li, b]
        if v > bv:
            bv = v
            best = b
    return best


@njit(cache=True, nogil=True, inline="always")
def bandit_update(fam, li, a, m, profit, lo, span, noise, counts, sums, Q, greedy, w, rng):
    """Count the price played, add its reward, refresh its estimate, its scale and the greedy price.

    Parameters
    ----------
    fam : int
    li : int
    a : int
        The price played.
    m : int
    profit : float
        The seat's profit this period.
    lo, span : float
        :func:`reward_bounds`.
    noise : float
        Standard deviation of the observation error (a normal is drawn only when it is positive).
    counts : ndarray of int64, shape (n_learners, max(radix))
    sums : ndarray of float64, shape (n_learners, max(radix))
        Updated in place.
    Q : ndarray of float64, shape (n_learners, max(mod), max(radix))
        Row ``Q[li, 0]`` receives the estimates.
    greedy : ndarray of int64, shape (n_learners, max(mod))
        ``greedy[li, 0]`` receives their first argmax.
    w : ndarray of float64, shape (n_learners, max(radix) + 1)
        :func:`bandit_scales`, updated in place.
    rng : ndarray of uint64, shape (4,)

    Returns
    -------
    bool
        Whether the greedy price changed.
    """
    r = (profit - lo) / span
    if noise > 0.0:
        r += noise * next_normal_zig(rng)
    counts[li, a] += 1
    sums[li, a] += r
    old = Q[li, 0, a]
    new = sums[li, a] / (counts[li, a] if fam == UCB_FAMILY else counts[li, a] + 1.0)
    Q[li, 0, a] = new
    w[li, a] = _scale(fam, counts[li, a])
    w[li, -1] += 1.0
    g = greedy[li, 0]
    if a != g:
        # only price a moved: it takes over when it is now the first largest
        if new > Q[li, 0, g] or (new == Q[li, 0, g] and a < g):
            greedy[li, 0] = a
            return True
        return False
    if new >= old:
        return False
    best = 0
    bv = Q[li, 0, 0]
    for b in range(1, m):
        if Q[li, 0, b] > bv:
            bv = Q[li, 0, b]
            best = b
    if best != g:
        greedy[li, 0] = best
        return True
    return False


# ------------------------------------------------------------------------------------------------
# The plain-Python twins (used by sim.learning.twin)
# ------------------------------------------------------------------------------------------------


def twin_choice(family: str, c: float, counts: list, sums: list, rng) -> int:
    """The readable twin of :func:`bandit_choice`, drawing from a :class:`sim.core.rng.ReferenceStream`.

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
        # mean + c sqrt(2 ln t / n), grouped as c sqrt(2 ln t) (1 / sqrt(n)), the kernel's rounding
        bonus = c * math.sqrt(2.0 * math.log(sum(counts)))
        index = [sums[b] / counts[b] + bonus * (1.0 / math.sqrt(counts[b])) for b in range(m)]
    else:
        index = [sums[b] / (counts[b] + 1.0) + c * rng.next_normal_zig() * (1.0 / math.sqrt(counts[b] + 1.0))
                 for b in range(m)]
    return index.index(max(index))


def twin_update(family: str, a: int, profit: float, lo: float, span: float, noise: float, counts: list, sums: list,
                rng) -> list:
    """The readable twin of :func:`bandit_update`: the lists updated in place and the new estimates returned.

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
    r = (profit - lo) / span
    if noise > 0.0:
        r += noise * rng.next_normal_zig()
    counts[a] += 1
    sums[a] += r
    if family == "ucb":
        return [s / n if n > 0 else 0.0 for s, n in zip(sums, counts)]
    return [s / (n + 1.0) for s, n in zip(sums, counts)]
