"""The birth-death Moran process on a table of payoffs: exact fixation probabilities, a seeded simulation (a numba
kernel and its plain-Python twin) and the rare-mutation limit.

Each step one individual reproduces with probability proportional to its fitness and its offspring replaces one
individual chosen uniformly. With ``f_k``, ``g_k`` the fitnesses of ``A`` and ``B`` when there are ``k`` ``A``
individuals, the probability that a single ``A`` takes over a population of ``B`` is
``rho_A = 1 / (1 + sum_{k=1}^{N-1} prod_{j=1}^{k} g_j / f_j)`` (Nowak, Sasaki, Taylor and Fudenberg, 2004, Nature
428, eq. 2; Nowak, 2006, "Evolutionary Dynamics", ch. 6); with constant fitness ratio ``r`` it is
``(1 - 1/r) / (1 - 1/r^N)``, under neutrality ``1/N``. The seeded simulation plays the process's jump chain (up with
probability ``f_k / (f_k + g_k)``: the steps in which nothing changes do not alter where it ends) and checks the
formula.

With rare mutations the population is almost always monomorphic and moves from resident ``j`` to ``i`` at a rate
proportional to ``rho[i, j]`` (Fudenberg and Imhof, 2006, "Imitation processes with small mutations", J. Econ.
Theory 131): the stationary distribution of that chain says where the population spends its time.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from sim.core.compiling import announce_compile
from sim.core.parallel import NumbaThreads
from sim.core.params import Integer
from sim.core.rng import ReferenceStream, next_double, stream_states
from sim.tournament.payoffs import PayoffTable
from sim.tournament.replicator import check_selection, fitness

__all__ = ["MORAN_KEY", "fixation_probabilities", "fixation_probability", "moran_kernel", "moran_reference",
           "pair_fitness", "simulate_fixation", "stationary_distribution", "up_table"]

#: stream family (appended to the caller's key) of the Moran simulation
MORAN_KEY = 2**32 + 1


def fixation_probability(f, g) -> float:
    """Probability that a single ``A`` takes over (Nowak et al., 2004, eq. 2), computed in logs.

    Parameters
    ----------
    f, g : array_like of shape (N - 1,)
        Fitness of ``A`` and of ``B`` when there are ``k = 1 .. N-1`` individuals of type ``A``.

    Returns
    -------
    float
    """
    f = np.asarray(f, dtype=float)
    g = np.asarray(g, dtype=float)
    if f.shape != g.shape or f.ndim != 1 or f.size < 1:
        raise ValueError("f and g must be vectors of the same length N - 1 >= 1")
    if np.any(~(f > 0)) or np.any(~(g > 0)):
        raise ValueError("fitness must be positive")
    L = np.cumsum(np.log(g) - np.log(f))
    top = float(L.max())
    with np.errstate(under="ignore"):  # terms far below the largest do not count
        log_s = top + math.log(float(np.exp(L - top).sum()))
        return math.exp(-float(np.logaddexp(0.0, log_s)))


def pair_fitness(payoffs: PayoffTable, a: int, b: int, N: int, w: float, mapping: str):
    """Fitness of ``a`` and ``b`` in a population of ``N`` holding ``k = 1 .. N-1`` of type ``a``.

    Parameters
    ----------
    payoffs : PayoffTable
    a, b, N : int
    w : float
        Selection intensity.
    mapping : {"linear", "exponential"}

    Returns
    -------
    fa, fb : ndarray of shape (N - 1,)
    """
    pa, pb = payoffs.finite(a, b, N)
    return fitness(pa, w, mapping), fitness(pb, w, mapping)


def fixation_probabilities(payoffs: PayoffTable, population: int = 100, selection: float = 0.1,
                           fitness_map: str = "linear") -> np.ndarray:
    """Exact fixation probabilities of the birth-death Moran process.

    Parameters
    ----------
    payoffs : PayoffTable
    population : int
        N, at least the number of seats.
    selection : float
    fitness_map : {"linear", "exponential"}

    Returns
    -------
    rho : ndarray of shape (E, E)
        ``rho[i, j]``: probability that a single ``i`` takes over a population of ``N - 1`` ``j`` (nan on the
        diagonal).
    """
    N = Integer(2, 10_000_000).check("population", population)
    w, mapping = check_selection(payoffs, selection, fitness_map)
    E = payoffs.n_types
    rho = np.full((E, E), np.nan)
    for i in range(E):
        for j in range(E):
            if i != j:
                f, g = pair_fitness(payoffs, i, j, N, w, mapping)
                rho[i, j] = fixation_probability(f, g)
    return rho


@njit(cache=True, parallel=True)
def moran_kernel(up, runs, rng_states, out):
    """For every pair ``p`` (``prange``), play ``runs`` jump chains of the Moran process from one ``A`` until
    absorption and write the number that ended with ``A`` everywhere into ``out[p]``.

    Parameters
    ----------
    up : ndarray of shape (n_pairs, N + 1)
        ``up[p, k]``: probability that the number of ``A`` goes up from ``k`` (entries 1 .. N-1 used).
    runs : int
    rng_states : uint64 ndarray of shape (n_pairs, 4)
        One stream per pair (advanced in place).
    out : int64 ndarray of shape (n_pairs,)

    Returns
    -------
    None
        The counts are written into ``out``.
    """
    n_pairs, width = up.shape
    N = width - 1
    for p in prange(n_pairs):
        rng = rng_states[p]
        fixed = 0
        for _r in range(runs):
            k = 1
            while 0 < k < N:
                if next_double(rng) < up[p, k]:
                    k += 1
                else:
                    k -= 1
            if k == N:
                fixed += 1
        out[p] = fixed


def moran_reference(up: np.ndarray, runs: int, rng_states: np.ndarray) -> np.ndarray:
    """Plain-Python twin of :func:`moran_kernel` (same streams, same draws).

    Parameters
    ----------
    up : ndarray of shape (n_pairs, N + 1)
    runs : int
    rng_states : uint64 ndarray of shape (n_pairs, 4)

    Returns
    -------
    int64 ndarray of shape (n_pairs,)
    """
    n_pairs, width = up.shape
    N = width - 1
    out = np.zeros(n_pairs, dtype=np.int64)
    for p in range(n_pairs):
        rng = ReferenceStream(rng_states[p])
        fixed = 0
        for _r in range(runs):
            k = 1
            while 0 < k < N:
                k += 1 if rng.next_double() < float(up[p, k]) else -1
            fixed += k == N
        out[p] = fixed
    return out


def up_table(payoffs: PayoffTable, N: int, w: float, mapping: str) -> tuple[list, np.ndarray]:
    """The jump chain of every ordered pair: the probability that the invader's count goes up.

    Parameters
    ----------
    payoffs : PayoffTable
    N : int
    w : float
    mapping : str

    Returns
    -------
    pairs : list of (int, int)
        (invader, resident), row-major without the diagonal.
    up : ndarray of shape (n_pairs, N + 1)
    """
    E = payoffs.n_types
    pairs = [(i, j) for i in range(E) for j in range(E) if i != j]
    up = np.zeros((len(pairs), N + 1))
    for p, (i, j) in enumerate(pairs):
        f, g = pair_fitness(payoffs, i, j, N, w, mapping)
        up[p, 1:N] = f / (f + g)
    return pairs, up


def simulate_fixation(payoffs: PayoffTable, population: int = 100, selection: float = 0.1,
                      fitness_map: str = "linear", runs: int = 10_000, seed: int = 0, key=(),
                      threads: int | None = None, reference: bool = False) -> np.ndarray:
    """Seeded simulation of the Moran process: for every ordered pair, ``runs`` invasions by one mutant.

    Pair ``p`` (invader ``i``, resident ``j`` in row-major order without the diagonal) draws from stream ``p`` of the
    family ``(*key, MORAN_KEY)`` of :func:`sim.core.rng.stream_states`, so the counts do not depend on the number of
    threads.

    Parameters
    ----------
    payoffs : PayoffTable
    population : int
    selection : float
    fitness_map : {"linear", "exponential"}
    runs : int
    seed : int
    key : tuple of int
        Prefix of the stream family.
    threads : int, optional
    reference : bool
        Play the plain-Python twin instead of the kernel.

    Returns
    -------
    fixed : int64 ndarray of shape (E, E)
        Number of runs in which the invader took over (-1 on the diagonal).
    """
    N = Integer(2, 10_000_000).check("population", population)
    R = Integer(1, 100_000_000).check("runs", runs)
    seed = Integer(0, 2**63 - 1).check("seed", seed)
    w, mapping = check_selection(payoffs, selection, fitness_map)
    pairs, up = up_table(payoffs, N, w, mapping)
    E = payoffs.n_types
    out = np.full((E, E), -1, dtype=np.int64)
    if not pairs:
        return out
    states = stream_states(seed, (*tuple(key), MORAN_KEY), 0, len(pairs))
    if reference:
        counts = moran_reference(up, R, states)
    else:
        counts = np.zeros(len(pairs), dtype=np.int64)
        announce_compile("Moran", (moran_kernel,))
        with NumbaThreads(threads):
            moran_kernel(up, R, states, counts)
    for p, (i, j) in enumerate(pairs):
        out[i, j] = counts[p]
    return out


def stationary_distribution(rho: np.ndarray) -> np.ndarray:
    """Stationary distribution of the monomorphic states with rare mutations (Fudenberg and Imhof, 2006): from
    resident ``j`` a mutant of each other type arises with equal probability and takes over with probability
    ``rho[i, j]``.

    Parameters
    ----------
    rho : ndarray of shape (E, E)
        Fixation probabilities (invader, resident), nan on the diagonal.

    Returns
    -------
    ndarray of shape (E,)
        Share of time each type is the resident.
    """
    E = rho.shape[0]
    if E == 1:
        return np.ones(1)
    T = np.where(np.isnan(rho), 0.0, rho).T / (E - 1)  # T[j, i]: from j to i
    np.fill_diagonal(T, 0.0)
    np.fill_diagonal(T, 1.0 - T.sum(axis=1))
    # solve pi (T - I) = 0 with sum(pi) = 1
    A = np.vstack([(T - np.eye(E)).T, np.ones(E)])
    b = np.zeros(E + 1)
    b[-1] = 1.0
    pi, *_ = np.linalg.lstsq(A, b, rcond=None)
    pi = np.clip(pi, 0.0, None)
    return pi / pi.sum()
