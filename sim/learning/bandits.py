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

Where the work is done: the rules' loops over the prices are written in the kernel's period loop itself
(:func:`sim.learning.kernel.run_session`), which reads the arrays directly; this module holds the functions of
numbers they call (inlined), what a session derives once when it starts (:func:`bandit_scales`), and the readable
twins. What a period keeps so as not to compute it again: each price's estimate (``Q[li, 0]``, one division for
the price played), its scale ``1 / sqrt(n_a)`` or ``1 / sqrt(n_a + 1)`` (one square root for the price played), the
step counter, and, for UCB, ``c sqrt(2 ln t)`` for the bandits that share ``t`` and ``c`` (one logarithm per
period). Every number is computed as the twins compute it, in the same order.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.learning.inputs import LEARNER, Q_FAMILY, UCB_FAMILY

__all__ = ["arm_estimate", "arm_scale", "bandit_reward", "bandit_scales", "reward_bounds", "twin_choice", "twin_update",
           "ucb_bonus"]


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
        The last column holds each bandit's step counter ``t = sum_a n_a`` (kept up to date by the kernel, so that
        a period need not add the counts up).
    """
    out = np.zeros((counts.shape[0], counts.shape[1] + 1))
    for i in range(kind.size):
        if kind[i] == LEARNER and family[i] != Q_FAMILY:
            for b in range(radix[i]):
                out[lidx[i], b] = arm_scale(family[i], counts[lidx[i], b])
                out[lidx[i], -1] += counts[lidx[i], b]
    return out


@njit(cache=True, nogil=True, inline="always")
def arm_scale(fam, n):
    """The scale of a price's exploration term after ``n`` plays: ``1 / sqrt(n)`` for UCB (0 before its first
    play), ``1 / sqrt(n + 1)`` for Thompson sampling.

    Parameters
    ----------
    fam : int
        ``UCB_FAMILY`` or ``THOMPSON_FAMILY``.
    n : int
        Plays of the price.

    Returns
    -------
    float
    """
    if fam == UCB_FAMILY:
        return 1.0 / math.sqrt(n) if n > 0 else 0.0
    return 1.0 / math.sqrt(n + 1.0)


@njit(cache=True, nogil=True, inline="always")
def arm_estimate(fam, total, n):
    """A price's estimate from its sum of rewards and its plays: the sample mean ``total / n`` for UCB, the posterior
    mean ``total / (n + 1)`` for Thompson sampling.

    Parameters
    ----------
    fam : int
    total : float
        Sum of the rewards the price earned.
    n : int
        Its plays (at least 1).

    Returns
    -------
    float
    """
    return total / (n if fam == UCB_FAMILY else n + 1.0)


@njit(cache=True, nogil=True, inline="always")
def bandit_reward(profit, lo, span):
    """The reward of a profit: ``(profit - lo) / span`` (:func:`reward_bounds`), in [0, 1] on the grid.

    Parameters
    ----------
    profit, lo, span : float

    Returns
    -------
    float
    """
    return (profit - lo) / span


@njit(cache=True, nogil=True, inline="always")
def ucb_bonus(c, t):
    """UCB's ``c sqrt(2 ln t)``: the exploration term of a price is this times its scale :func:`arm_scale`, so that
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
        # mean + c sqrt(2 ln t / n), grouped as c sqrt(2 ln t) (1 / sqrt(n)), the kernel's rounding
        bonus = c * math.sqrt(2.0 * math.log(sum(counts)))
        index = [sums[b] / counts[b] + bonus * (1.0 / math.sqrt(counts[b])) for b in range(m)]
    else:
        index = [sums[b] / (counts[b] + 1.0) + c * rng.next_normal_zig() * (1.0 / math.sqrt(counts[b] + 1.0))
                 for b in range(m)]
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
    r = (profit - lo) / span
    if noise > 0.0:
        r += noise * rng.next_normal_zig()
    counts[a] += 1
    sums[a] += r
    if family == "ucb":
        return [s / n if n > 0 else 0.0 for s, n in zip(sums, counts)]
    return [s / (n + 1.0) for s, n in zip(sums, counts)]
