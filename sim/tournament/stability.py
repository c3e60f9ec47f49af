"""Which entrants resist invasion by every other, in a large and in a finite population.

* **Large population** (Maynard Smith and Price, 1973, "The logic of animal conflict", Nature 246): resident ``j``
  resists invader ``i`` when, for a small share of ``i``, ``j`` earns more. With ``d_k`` the payoff of ``j`` minus
  that of ``i`` when the focal's rivals include ``k`` invaders, that is the first ``d_k`` (k = 0, 1, ...) that is
  not a tie being positive (two seats: ``A[j,j] > A[i,j]``, or equal and ``A[j,i] > A[i,i]``). Payoffs from
  simulations are estimates: a difference within ``z`` standard errors (the confidence level's normal quantile)
  counts as a tie. All ties: ``i`` is neutral against ``j``.
* **Finite population of N** (Nowak, Sasaki, Taylor and Fudenberg, 2004, Nature 428): a single invader is less fit
  than the residents and ``rho_i < 1/N`` (selection opposes both the invasion and the replacement).
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.params import Integer
from sim.core.stats import normal_quantile
from sim.tournament.moran import fixation_probabilities, pair_fitness
from sim.tournament.payoffs import PayoffTable
from sim.tournament.replicator import check_selection

__all__ = ["stability"]

_TIE_REL = 1e-12


def _tie(d: float, se: float, z: float, scale: float) -> bool:
    if abs(d) <= _TIE_REL * max(1.0, scale):
        return True
    return bool(np.isfinite(se) and se > 0 and abs(d) <= z * se)


def _large_population(payoffs: PayoffTable, i: int, j: int, z: float) -> tuple:
    """Verdict of invader ``i`` against resident ``j`` in a large population: ("resists" | "invaded" | "neutral",
    the number of invaders among the rivals that decides it, the payoff difference and its standard error)."""
    for k in range(payoffs.seats):
        pj, sj = payoffs.mixed(j, i, j, k)
        pi, si = payoffs.mixed(i, i, j, k)
        d = pj - pi
        s = math.sqrt((sj if np.isfinite(sj) else 0.0) ** 2 + (si if np.isfinite(si) else 0.0) ** 2)
        if not _tie(d, s, z, max(abs(pj), abs(pi))):
            return ("resists" if d > 0 else "invaded"), k, d, s
    return "neutral", None, 0.0, 0.0


def stability(payoffs: PayoffTable, population: int = 100, selection: float = 0.1, fitness_map: str = "linear",
              confidence: float = 0.95, rho: np.ndarray | None = None) -> dict:
    """Which entrants resist invasion by every other (see the module notes).

    Parameters
    ----------
    payoffs : PayoffTable
    population : int
        N of the finite population.
    selection : float
    fitness_map : {"linear", "exponential"}
    confidence : float
        Level at which payoff differences count as ties.
    rho : ndarray of shape (E, E), optional
        The exact fixation probabilities, when already computed.

    Returns
    -------
    dict
        ``ess``, ``neutral``, ``ess_n`` (lists of bool per entrant), ``invaded_by`` (list of the labels that invade
        each entrant in the large population), ``ess_n_failures`` (labels of invaders against which ``ess_n``
        fails), ``pairs`` (per ordered pair: ``verdict`` "resists" | "invaded" | "neutral", the deciding ``k``, the
        difference and its se, and the finite-population conditions) and ``confidence``.
    """
    E = payoffs.n_types
    z = normal_quantile(confidence)
    N = Integer(2, 10_000_000).check("population", population)
    w, mapping = check_selection(payoffs, selection, fitness_map)
    if rho is None:
        rho = fixation_probabilities(payoffs, N, w, mapping)
    ess, neutral, ess_n = [True] * E, [False] * E, [True] * E
    invaded_by: list = [[] for _ in range(E)]
    failures: list = [[] for _ in range(E)]
    pairs = []
    for j in range(E):  # resident
        for i in range(E):  # invader
            if i == j:
                continue
            verdict, decided, diff, dse = _large_population(payoffs, i, j, z)
            if verdict == "invaded":
                ess[j] = False
                invaded_by[j].append(payoffs.labels[i])
            elif verdict == "neutral":
                ess[j] = False
                neutral[j] = True
            fi, fj = pair_fitness(payoffs, i, j, N, w, mapping)
            single_less_fit = bool(fi[0] < fj[0])
            below_neutral = bool(rho[i, j] < 1.0 / N)
            if not (single_less_fit and below_neutral):
                ess_n[j] = False
                failures[j].append(payoffs.labels[i])
            pairs.append({"resident": payoffs.labels[j], "invader": payoffs.labels[i], "verdict": verdict,
                          "invaders_among_rivals": decided, "difference": diff, "se": dse,
                          "single_invader_less_fit": single_less_fit, "rho_times_n": float(rho[i, j] * N),
                          "rho_below_neutral": below_neutral})
    for j in range(E):
        if invaded_by[j]:
            neutral[j] = False
    return {"ess": ess, "neutral": neutral, "ess_n": ess_n, "invaded_by": invaded_by,
            "ess_n_failures": failures, "pairs": pairs, "confidence": confidence}
