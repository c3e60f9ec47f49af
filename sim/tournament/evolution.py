"""Evolutionary dynamics on tournament payoffs: replicator dynamics, the Moran process, stability.

The payoffs
-----------
A :class:`PayoffTable` holds, for every *group* (a multiset of ``seats`` entrants, one match of a
tournament), the payoff of a member of each type in it. With two seats this is the usual payoff
matrix ``A[i, j]`` (``i``'s payoff against ``j``). With more seats, the payoff of type ``i`` against a
population is defined by random group formation (Broom, Cannings and Vickers, 1997, "Multi-player
matrix games", Bull. Math. Biol. 59; Gokhale and Traulsen, 2010, "Evolutionary games in the
multiverse", PNAS 107):

* **infinite population with shares x** (replicator dynamics): the ``seats - 1`` rivals of a focal
  ``i`` are drawn independently from the population, so the opponent multiset ``c`` (counts per type,
  summing to ``seats - 1``) has the multinomial probability ``(seats-1)! / prod c_e! * prod x_e^c_e`` and
  ``f_i(x) = sum_c P(c | x) * payoff(i | {i} + c)``. With two seats ``f(x) = A x``.
* **finite population of N** with ``k`` individuals of type ``A`` and ``N - k`` of type ``B`` (Moran
  process): the rivals are drawn without replacement from the other ``N - 1`` individuals, so the
  number of ``A`` rivals is hypergeometric. With two seats this is
  ``f_A(k) = (a (k - 1) + b (N - k)) / (N - 1)``, ``f_B(k) = (c k + d (N - k - 1)) / (N - 1)``
  (Nowak, Sasaki, Taylor and Fudenberg, 2004, Nature 428, "Emergence of cooperation and
  evolutionary stability in finite populations").

Fitness
-------
Payoff ``p`` becomes fitness by ``1 - w + w p`` (``"linear"``, Nowak et al., 2004; it must stay
positive) or ``exp(w p)`` (``"exponential"``, Traulsen, Shoresh and Nowak, 2008, "Analytical results
for individual and group selection of any intensity", Bull. Math. Biol. 70), ``w`` the selection
intensity. The linear map is applied to the expected payoff (it commutes with expectation); so is
the exponential one.

Dynamics
--------
* Discrete replicator dynamics (Taylor and Jonker, 1978; Weibull, 1995, "Evolutionary Game Theory",
  section 4.2): ``x_i(t+1) = x_i(t) F_i(x(t)) / sum_j x_j(t) F_j(x(t))``. Rest points are those of the
  continuous dynamics (every type present earns the mean payoff).
* The birth-death Moran process: each step one individual reproduces with probability proportional
  to its fitness and its offspring replaces one individual chosen uniformly. With ``f_k``, ``g_k`` the
  fitnesses of ``A`` and ``B`` when there are ``k`` ``A`` individuals, the probability that a single
  ``A`` takes over a population of ``B`` is
  ``rho_A = 1 / (1 + sum_{k=1}^{N-1} prod_{j=1}^{k} g_j / f_j)`` (Nowak et al., 2004, eq. 2; Nowak,
  2006, "Evolutionary Dynamics", ch. 6); with constant fitness ratio ``r`` it is
  ``(1 - 1/r) / (1 - 1/r^N)``, under neutrality ``1/N``. The seeded simulation plays the process's
  jump chain (up with probability ``f_k / (f_k + g_k)``: the steps in which nothing changes do not
  alter where it ends) and checks the formula.
* With rare mutations the population is almost always monomorphic and moves from resident ``j`` to
  ``i`` at a rate proportional to ``rho[i, j]`` (Fudenberg and Imhof, 2006, "Imitation processes with
  small mutations", J. Econ. Theory 131): the stationary distribution of that chain says where the
  population spends its time.

Stability against the entrant set
---------------------------------
* ``ess`` (infinite population; Maynard Smith and Price, 1973): resident ``j`` resists invader ``i``
  when, for a small share of ``i``, ``j`` earns more. With ``d_k`` the payoff of ``j`` minus that of
  ``i`` when the focal's rivals include ``k`` invaders, that is the first ``d_k`` (k = 0, 1, ...) that
  is not a tie being positive (two seats: ``A[j,j] > A[i,j]``, or equal and ``A[j,i] > A[i,i]``). Payoffs
  from simulations are estimates: a difference within ``z`` standard errors (the confidence level's
  normal quantile) counts as a tie. All ties: ``i`` is neutral against ``j``.
* ``ess_n`` (finite population N; Nowak et al., 2004): a single invader is less fit than the
  residents and ``rho_i < 1/N`` (selection opposes both the invasion and the replacement).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
from numba import njit, prange
from scipy.stats import hypergeom, norm

from sim.core.errors import InputError
from sim.core.parallel import NumbaThreads
from sim.core.params import Integer, Options, Real
from sim.core.rng import ReferenceStream, next_double, stream_states
from sim.core.stats import normal_quantile

__all__ = [
    "EvolutionResult",
    "PayoffTable",
    "ReplicatorPath",
    "evolve",
    "fitness",
    "fixation_probabilities",
    "fixation_probability",
    "replicator",
    "simulate_fixation",
    "stability",
    "stationary_distribution",
]

#: stream family (appended to the caller's key) of the Moran simulation
MORAN_KEY = 2**32 + 1
FITNESS_MAPS = ("linear", "exponential")
_TIE_REL = 1e-12


# --------------------------------------------------------------------------------------------------
# Payoffs
# --------------------------------------------------------------------------------------------------


def multisets(n_types: int, size: int) -> list[tuple]:
    """Every multiset of ``size`` types out of ``n_types``, as sorted tuples, in lexicographic order."""
    return list(itertools.combinations_with_replacement(range(n_types), size))


def _counts(ms: tuple, n_types: int) -> tuple:
    c = [0] * n_types
    for e in ms:
        c[e] += 1
    return tuple(c)


@dataclass(frozen=True, eq=False)
class PayoffTable:
    """Payoffs of every group of ``seats`` types (see the module notes).

    Attributes
    ----------
    labels : tuple of str, length E
    seats : int
        Group size (players per match), >= 2.
    groups : int64 ndarray of shape (G, E)
        Count of each type in each group (rows sum to ``seats``); every multiset appears once.
    payoff : ndarray of shape (G, E)
        Payoff of one member of type ``e`` in group ``g`` (nan where the type is absent).
    se : ndarray of shape (G, E)
        Standard errors of the payoffs (0 for exact payoffs; nan where absent).
    metric : str
        What the payoff measures (for labels).
    """

    labels: tuple
    seats: int
    groups: np.ndarray
    payoff: np.ndarray
    se: np.ndarray
    metric: str = "payoff"
    _index: dict = field(default_factory=dict, repr=False)

    def __post_init__(self):
        E = len(self.labels)
        if self.seats < 2:
            raise InputError("seats", f"must be an integer >= 2, got {self.seats}")
        if E < 1:
            raise InputError("labels", "at least one type is needed")
        want = multisets(E, self.seats)
        if self.groups.shape != (len(want), E) or self.payoff.shape != self.groups.shape:
            raise InputError("groups", f"must list every group of {self.seats} out of {E} types once "
                                       f"({len(want)} groups), got shape {self.groups.shape}")
        for g in range(self.groups.shape[0]):
            key = tuple(int(v) for v in self.groups[g])
            if sum(key) != self.seats or key in self._index:
                raise InputError("groups", f"row {g + 1} is not a new group of {self.seats}: {list(key)}")
            self._index[key] = g
        present = self.groups > 0
        if not np.all(np.isfinite(self.payoff[present])):
            raise InputError("payoff", "every payoff of a type present in a group must be a finite number")

    @property
    def n_types(self) -> int:
        return len(self.labels)

    # ---- construction --------------------------------------------------------------------------
    @classmethod
    def from_matrix(cls, A, labels=None, se=None, metric: str = "payoff") -> PayoffTable:
        """Two seats: ``A[i, j]`` is the payoff of ``i`` against ``j``."""
        A = np.asarray(A, dtype=float)
        if A.ndim != 2 or A.shape[0] != A.shape[1] or A.shape[0] < 1:
            raise InputError("payoffs", f"must be a square matrix, got shape {A.shape}")
        S = np.zeros_like(A) if se is None else np.asarray(se, dtype=float)
        return cls.from_function(lambda i, c: (A[i, _single(c)], S[i, _single(c)]), A.shape[0], 2, labels, metric)

    @classmethod
    def from_function(cls, fn, n_types: int, seats: int, labels=None, metric: str = "payoff") -> PayoffTable:
        """Build from ``fn(i, rivals)`` -> payoff or ``(payoff, se)`` of a focal ``i`` whose rivals have
        the counts ``rivals`` (a tuple of length ``n_types`` summing to ``seats - 1``)."""
        labels = tuple(labels) if labels is not None else tuple(f"type {k + 1}" for k in range(n_types))
        sets = multisets(n_types, seats)
        groups = np.array([_counts(m, n_types) for m in sets], dtype=np.int64).reshape(len(sets), n_types)
        payoff = np.full(groups.shape, np.nan)
        se = np.full(groups.shape, np.nan)
        for g in range(groups.shape[0]):
            for i in range(n_types):
                if groups[g, i] == 0:
                    continue
                rivals = list(groups[g])
                rivals[i] -= 1
                v = fn(i, tuple(int(x) for x in rivals))
                p, s = (v if isinstance(v, tuple) else (v, 0.0))
                payoff[g, i] = float(p)
                se[g, i] = float(s)
        return cls(labels, int(seats), groups, payoff, se, metric)

    # ---- look-ups ------------------------------------------------------------------------------
    def group_row(self, counts) -> int:
        return self._index[tuple(int(v) for v in counts)]

    def value(self, i: int, rivals) -> tuple[float, float]:
        """Payoff and standard error of a focal ``i`` with rival counts ``rivals``."""
        c = list(int(v) for v in rivals)
        c[i] += 1
        g = self.group_row(c)
        return float(self.payoff[g, i]), float(self.se[g, i])

    def mixed(self, focal: int, a: int, b: int, k: int) -> tuple[float, float]:
        """Payoff (and se) of ``focal`` (``a`` or ``b``) whose ``seats - 1`` rivals are ``k`` of type ``a`` and
        ``seats - 1 - k`` of type ``b``."""
        c = [0] * self.n_types
        c[a] += k
        c[b] += self.seats - 1 - k
        return self.value(focal, c)

    def matrix(self) -> np.ndarray:
        """``M[i, j]``: payoff of ``i`` when every rival is ``j`` (two seats: the payoff matrix)."""
        E = self.n_types
        M = np.empty((E, E))
        for i in range(E):
            for j in range(E):
                M[i, j] = self.mixed(i, j, j, 0)[0]
        return M

    def matrix_se(self) -> np.ndarray:
        E = self.n_types
        M = np.empty((E, E))
        for i in range(E):
            for j in range(E):
                M[i, j] = self.mixed(i, j, j, 0)[1]
        return M

    # ---- payoffs against populations -----------------------------------------------------------
    def _against_tables(self):
        cache = self.__dict__.setdefault("_cache_against", {})
        if cache:
            return cache["rivals"], cache["coef"], cache["values"]
        E, n = self.n_types, self.seats
        rivals = np.array([_counts(m, E) for m in multisets(E, n - 1)], dtype=np.int64).reshape(-1, E)
        coef = np.array([math.factorial(n - 1) / math.prod(math.factorial(int(v)) for v in r) for r in rivals])
        values = np.empty((E, rivals.shape[0]))
        for i in range(E):
            for k in range(rivals.shape[0]):
                values[i, k] = self.value(i, rivals[k])[0]
        cache.update(rivals=rivals, coef=coef, values=values)
        return rivals, coef, values

    def against(self, shares) -> np.ndarray:
        """Expected payoff of each type against an infinite population with these shares, shape (E,)."""
        x = np.asarray(shares, dtype=float)
        rivals, coef, values = self._against_tables()
        mono = coef * np.prod(np.power(x[None, :], rivals), axis=1)
        return values @ mono

    def finite(self, a: int, b: int, N: int) -> tuple[np.ndarray, np.ndarray]:
        """Expected payoffs of type ``a`` and type ``b`` individuals in a population of ``N`` with ``k``
        of type ``a``, for ``k = 1 .. N-1`` (rivals drawn without replacement; see the module notes).

        Returns
        -------
        pa, pb : ndarray of shape (N - 1,)
        """

        n = self.seats
        if N < n:
            raise InputError("population", f"must be at least the number of seats ({n}), got {N}")
        k = np.arange(1, N)
        m = np.arange(n)  # number of type-a rivals
        PA = np.array([self.mixed(a, a, b, int(j))[0] for j in m])
        PB = np.array([self.mixed(b, a, b, int(j))[0] for j in m])
        # focal a: rivals from k - 1 a's and N - k b's; focal b: from k a's and N - k - 1 b's
        ha = hypergeom.pmf(m[None, :], N - 1, (k - 1)[:, None], n - 1)
        hb = hypergeom.pmf(m[None, :], N - 1, k[:, None], n - 1)
        return ha @ PA, hb @ PB


def _single(c) -> int:
    return int(np.flatnonzero(np.asarray(c))[0])


# --------------------------------------------------------------------------------------------------
# Fitness and replicator dynamics
# --------------------------------------------------------------------------------------------------


def fitness(payoff, selection: float, mapping: str = "linear"):
    """Fitness of a payoff: ``1 - w + w p`` (linear) or ``exp(w p)`` (exponential)."""
    p = np.asarray(payoff, dtype=float)
    if mapping == "linear":
        return 1.0 - selection + selection * p
    return np.exp(selection * p)


def _check_selection(table: PayoffTable, selection, mapping, key: str = "selection", map_key: str = "fitness"):
    mapping = Options(*FITNESS_MAPS).check(map_key, mapping)
    w = Real(0, None, closed="neither").check(key, selection)
    if mapping == "linear":
        w = Real(0, 1, closed="right").check(key, w)
        lo = float(np.nanmin(table.payoff))
        if not 1.0 - w + w * lo > 0:
            top = 1.0 / (1.0 - lo)
            raise InputError(key, f"the fitness 1 - w + w * payoff must stay positive, and the lowest payoff is "
                                  f"{lo:.6g}: w must be below {top:.6g} (or use {map_key} = 'exponential'), got {w:g}")
    return w, mapping


@dataclass(frozen=True, eq=False)
class ReplicatorPath:
    """Population shares over generations of the discrete replicator dynamics.

    Attributes
    ----------
    shares : ndarray of shape (generations + 1, E)
        Row 0 the initial shares.
    mean_payoff : ndarray of shape (generations + 1,)
        Population-average payoff ``x . f(x)``.
    payoffs : ndarray of shape (generations + 1, E)
        Payoff of each type against the population.
    labels : tuple of str
    settings : dict
    """

    shares: np.ndarray
    mean_payoff: np.ndarray
    payoffs: np.ndarray
    labels: tuple
    settings: dict

    @property
    def final(self) -> np.ndarray:
        return self.shares[-1]

    @property
    def last_change(self) -> float:
        """Largest change of a share in the last generation (0 at a rest point)."""
        if self.shares.shape[0] < 2:
            return math.nan
        return float(np.abs(self.shares[-1] - self.shares[-2]).max())

    def to_dict(self, max_points: int = 500) -> dict:
        G = self.shares.shape[0]
        idx = np.unique(np.round(np.linspace(0, G - 1, min(G, max_points))).astype(int))
        return {"settings": self.settings, "labels": list(self.labels), "generation": idx.tolist(),
                "shares": self.shares[idx].tolist(), "mean_payoff": self.mean_payoff[idx].tolist(),
                "final": self.final.tolist(), "last_change": self.last_change}


def _check_shares(shares, E: int, labels, key: str = "shares") -> np.ndarray:
    if shares is None:
        return np.full(E, 1.0 / E)
    if isinstance(shares, dict):
        unknown = [k for k in shares if k not in labels]
        if unknown:
            raise InputError(f"{key}.{unknown[0]}", f"is not an entrant; entrants: {', '.join(labels)}")
        shares = [shares.get(lab, 0.0) for lab in labels]
    x = np.asarray(shares, dtype=float) if not isinstance(shares, str) else np.array([np.nan])
    if x.shape != (E,) or not np.all(np.isfinite(x)) or np.any(x < 0):
        raise InputError(key, f"must be {E} non-negative numbers (one per entrant), got {shares!r}")
    if not x.sum() > 0:
        raise InputError(key, "at least one share must be positive")
    return x / x.sum()


def replicator(payoffs: PayoffTable, shares=None, generations: int = 1000, selection: float = 0.1,
               fitness_map: str = "linear") -> ReplicatorPath:
    """Discrete replicator dynamics from ``shares`` (default: equal shares).

    Parameters
    ----------
    payoffs : PayoffTable
    shares : array_like of shape (E,) or dict label -> share, optional
        Initial shares (normalised to sum to one).
    generations : int
    selection : float
        Selection intensity ``w`` of the fitness map.
    fitness_map : {"linear", "exponential"}

    Returns
    -------
    ReplicatorPath
    """
    E = payoffs.n_types
    x = _check_shares(shares, E, payoffs.labels)
    G = Integer(0, 10_000_000).check("generations", generations)
    w, mapping = _check_selection(payoffs, selection, fitness_map, "selection", "fitness")
    out = np.empty((G + 1, E))
    pay = np.empty((G + 1, E))
    mean = np.empty(G + 1)
    for t in range(G + 1):
        f = payoffs.against(x)
        out[t] = x
        pay[t] = f
        mean[t] = float(x @ f)
        if t == G:
            break
        F = fitness(f, w, mapping)
        y = x * F
        x = y / y.sum()
    return ReplicatorPath(out, mean, pay, payoffs.labels,
                          {"generations": G, "selection": w, "fitness": mapping, "initial": out[0].tolist()})


# --------------------------------------------------------------------------------------------------
# The Moran process
# --------------------------------------------------------------------------------------------------


def fixation_probability(f, g) -> float:
    """Probability that a single ``A`` takes over, from the fitnesses ``f[k-1]`` of ``A`` and ``g[k-1]`` of
    ``B`` with ``k = 1 .. N-1`` individuals of type ``A`` (Nowak et al., 2004, eq. 2), computed in logs."""
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


def _pair_fitness(payoffs: PayoffTable, a: int, b: int, N: int, w: float, mapping: str):
    pa, pb = payoffs.finite(a, b, N)
    return fitness(pa, w, mapping), fitness(pb, w, mapping)


def fixation_probabilities(payoffs: PayoffTable, population: int = 100, selection: float = 0.1,
                           fitness_map: str = "linear") -> np.ndarray:
    """Exact fixation probabilities of the birth-death Moran process.

    Returns
    -------
    rho : ndarray of shape (E, E)
        ``rho[i, j]``: probability that a single ``i`` takes over a population of ``N - 1`` ``j``
        (nan on the diagonal).
    """
    N = Integer(2, 10_000_000).check("population", population)
    w, mapping = _check_selection(payoffs, selection, fitness_map)
    E = payoffs.n_types
    rho = np.full((E, E), np.nan)
    for i in range(E):
        for j in range(E):
            if i != j:
                f, g = _pair_fitness(payoffs, i, j, N, w, mapping)
                rho[i, j] = fixation_probability(f, g)
    return rho


@njit(cache=True, parallel=True)
def _moran_kernel(up, runs, rng_states, out):
    """For every pair ``p`` (``prange``), play ``runs`` jump chains of the Moran process from one ``A``
    until absorption and write the number that ended with ``A`` everywhere into ``out[p]``.

    Parameters
    ----------
    up : ndarray of shape (n_pairs, N + 1)
        ``up[p, k]``: probability that the number of ``A`` goes up from ``k`` (entries 1 .. N-1 used).
    runs : int
    rng_states : uint64 ndarray of shape (n_pairs, 4)
        One stream per pair (advanced in place).
    out : int64 ndarray of shape (n_pairs,)
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


def _moran_reference(up: np.ndarray, runs: int, rng_states: np.ndarray) -> np.ndarray:
    """Plain-Python twin of :func:`_moran_kernel` (same streams, same draws)."""
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


def _up_table(payoffs: PayoffTable, N: int, w: float, mapping: str) -> tuple[list, np.ndarray]:
    E = payoffs.n_types
    pairs = [(i, j) for i in range(E) for j in range(E) if i != j]
    up = np.zeros((len(pairs), N + 1))
    for p, (i, j) in enumerate(pairs):
        f, g = _pair_fitness(payoffs, i, j, N, w, mapping)
        up[p, 1:N] = f / (f + g)
    return pairs, up


def simulate_fixation(payoffs: PayoffTable, population: int = 100, selection: float = 0.1,
                      fitness_map: str = "linear", runs: int = 10_000, seed: int = 0, key=(),
                      threads: int | None = None, reference: bool = False) -> np.ndarray:
    """Seeded simulation of the Moran process: for every ordered pair, ``runs`` invasions by one mutant.

    Pair ``p`` (invader ``i``, resident ``j`` in row-major order without the diagonal) draws from stream
    ``p`` of the family ``(*key, MORAN_KEY)`` of :func:`sim.core.rng.stream_states`, so the counts do not
    depend on the number of threads. ``reference=True`` plays the plain-Python twin instead.

    Returns
    -------
    fixed : int64 ndarray of shape (E, E)
        Number of runs in which the invader took over (-1 on the diagonal).
    """
    N = Integer(2, 10_000_000).check("population", population)
    R = Integer(1, 100_000_000).check("runs", runs)
    seed = Integer(0, 2**63 - 1).check("seed", seed)
    w, mapping = _check_selection(payoffs, selection, fitness_map)
    pairs, up = _up_table(payoffs, N, w, mapping)
    E = payoffs.n_types
    out = np.full((E, E), -1, dtype=np.int64)
    if not pairs:
        return out
    states = stream_states(seed, (*tuple(key), MORAN_KEY), 0, len(pairs))
    if reference:
        counts = _moran_reference(up, R, states)
    else:

        counts = np.zeros(len(pairs), dtype=np.int64)
        with NumbaThreads(threads):
            _moran_kernel(up, R, states, counts)
    for p, (i, j) in enumerate(pairs):
        out[i, j] = counts[p]
    return out


def stationary_distribution(rho: np.ndarray) -> np.ndarray:
    """Stationary distribution of the monomorphic states with rare mutations (Fudenberg and Imhof,
    2006): from resident ``j`` a mutant of each other type arises with equal probability and takes over
    with probability ``rho[i, j]``. Shape (E,)."""
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


# --------------------------------------------------------------------------------------------------
# Stability against the entrant set
# --------------------------------------------------------------------------------------------------


def _tie(d: float, se: float, z: float, scale: float) -> bool:
    if abs(d) <= _TIE_REL * max(1.0, scale):
        return True
    return bool(np.isfinite(se) and se > 0 and abs(d) <= z * se)


def stability(payoffs: PayoffTable, population: int = 100, selection: float = 0.1, fitness_map: str = "linear",
              confidence: float = 0.95, rho: np.ndarray | None = None) -> dict:
    """Which entrants resist invasion by every other (see the module notes).

    Returns
    -------
    dict with ``ess``, ``neutral``, ``ess_n`` (lists of bool per entrant), ``invaded_by`` (list of the
    labels that invade each entrant in the infinite-population sense), ``ess_n_failures`` (labels of
    invaders against which ``ess_n`` fails), ``pairs`` (per ordered pair: ``verdict`` "resists" |
    "invaded" | "neutral", the deciding ``k``, the difference and its se, and the finite-population
    conditions).
    """
    E = payoffs.n_types
    n = payoffs.seats
    z = normal_quantile(confidence)
    N = Integer(2, 10_000_000).check("population", population)
    w, mapping = _check_selection(payoffs, selection, fitness_map)
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
            verdict, decided, diff, dse = "neutral", None, 0.0, 0.0
            for k in range(n):
                pj, sj = payoffs.mixed(j, i, j, k)
                pi, si = payoffs.mixed(i, i, j, k)
                d = pj - pi
                s = math.sqrt((sj if np.isfinite(sj) else 0.0) ** 2 + (si if np.isfinite(si) else 0.0) ** 2)
                if not _tie(d, s, z, max(abs(pj), abs(pi))):
                    verdict = "resists" if d > 0 else "invaded"
                    decided, diff, dse = k, d, s
                    break
            if verdict == "invaded":
                ess[j] = False
                invaded_by[j].append(payoffs.labels[i])
            elif verdict == "neutral":
                ess[j] = False
                neutral[j] = True
            fi, fj = _pair_fitness(payoffs, i, j, N, w, mapping)
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


# --------------------------------------------------------------------------------------------------
# Everything at once
# --------------------------------------------------------------------------------------------------

EVOLUTION_CONSTRAINTS = {
    "generations": Integer(0, 10_000_000),
    "population": Integer(2, 1_000_000),
    "runs": Integer(0, 100_000_000),
    "seed": Integer(0, 2**63 - 1),
    "confidence": Real(0, 1, closed="neither"),
}


@dataclass(frozen=True, eq=False)
class EvolutionResult:
    """Replicator dynamics, Moran fixation (exact and simulated) and stability on one payoff table.

    Attributes
    ----------
    payoffs : PayoffTable
    replicator : ReplicatorPath
    fixation : ndarray of shape (E, E)
        Exact ``rho[i, j]`` (invader ``i``, resident ``j``).
    simulated : int64 ndarray of shape (E, E) or None
        Runs (out of ``runs``) in which the invader took over.
    runs : int
    stationary : ndarray of shape (E,)
        Share of time each entrant is the resident with rare mutations.
    stability : dict
        See :func:`stability`.
    settings : dict
    """

    payoffs: PayoffTable
    replicator: ReplicatorPath
    fixation: np.ndarray
    simulated: np.ndarray | None
    runs: int
    stationary: np.ndarray
    stability: dict
    settings: dict

    def simulated_share(self) -> np.ndarray | None:
        return None if self.simulated is None else np.where(self.simulated >= 0, self.simulated / self.runs, np.nan)

    def agreement(self, z: float | None = None) -> dict:
        """How well the simulation matches the formula: the largest gap over the pairs in binomial standard
        errors (``sqrt(rho (1 - rho) / runs)``) and whether it is below ``z``. By default ``z`` bounds the
        largest of the ``E (E - 1)`` gaps at a family-wise level of 1 % (Bonferroni: the normal quantile
        of ``1 - 0.01 / (2 E (E - 1))``: 2.81 for two entrants, 3.86 for ten)."""

        if self.simulated is None:
            return {"max_standard_errors": None, "within": None, "z": z}
        sim = self.simulated_share()
        rho = self.fixation
        mask = ~np.isnan(rho)
        if z is None:
            z = float(norm.ppf(1.0 - 0.01 / (2 * max(1, int(mask.sum())))))
        se = np.sqrt(np.maximum(rho[mask] * (1.0 - rho[mask]), 1e-300) / self.runs)
        gap = np.abs(sim[mask] - rho[mask]) / se
        worst = float(gap.max()) if gap.size else 0.0
        return {"max_standard_errors": worst, "within": bool(worst <= z), "z": z}

    def to_dict(self) -> dict:
        N = self.settings["population"]
        sim = self.simulated_share()
        return {
            "settings": self.settings,
            "labels": list(self.payoffs.labels),
            "metric": self.payoffs.metric,
            "replicator": self.replicator.to_dict(),
            "fixation": {"exact": self.fixation.tolist(), "times_population": (self.fixation * N).tolist(),
                         "simulated": sim.tolist() if sim is not None else None, "runs": self.runs,
                         "agreement": self.agreement(), "neutral": 1.0 / N},
            "stationary": self.stationary.tolist(),
            "stability": self.stability,
        }


def evolve(payoffs: PayoffTable, shares=None, generations: int = 1000, selection: float = 0.1,
           fitness_map: str = "linear", population: int = 100, runs: int = 10_000, seed: int = 0, key=(),
           confidence: float = 0.95, threads: int | None = None, prefix: str = "") -> EvolutionResult:
    """Replicator dynamics, the Moran process (exact and simulated) and the stability check.

    Parameters
    ----------
    payoffs : PayoffTable
    shares : initial shares of the replicator dynamics (default equal)
    generations : int
    selection, fitness_map : the fitness map (see the module notes)
    population : int
        N of the Moran process (at least the number of seats).
    runs : int
        Simulated invasions per ordered pair (0: no simulation).
    seed, key : the Moran simulation's streams
    confidence : float
        Level at which payoff differences count as ties in the stability check.
    prefix : str
        Key prefix of error messages (``"tournament"`` in experiment files).
    """
    def k(name):
        return f"{prefix}.{name}" if prefix else name

    vals = {}
    for name, value in (("generations", generations), ("population", population), ("runs", runs), ("seed", seed),
                        ("confidence", confidence)):
        vals[name] = EVOLUTION_CONSTRAINTS[name].check(k(name), value)
    if vals["population"] < payoffs.seats:
        raise InputError(k("population"), f"must be at least the number of seats ({payoffs.seats}), "
                                          f"got {vals['population']}")
    w, mapping = _check_selection(payoffs, selection, fitness_map, k("selection"), k("fitness"))
    x0 = _check_shares(shares, payoffs.n_types, payoffs.labels, k("shares"))
    path = replicator(payoffs, x0, vals["generations"], w, mapping)
    N = vals["population"]
    rho = fixation_probabilities(payoffs, N, w, mapping)
    sim = None
    if vals["runs"] > 0:
        sim = simulate_fixation(payoffs, N, w, mapping, vals["runs"], vals["seed"], key, threads)
    st = stability(payoffs, N, w, mapping, vals["confidence"], rho)
    settings = {"generations": vals["generations"], "selection": w, "fitness": mapping, "population": N,
                "runs": vals["runs"], "seed": vals["seed"], "confidence": vals["confidence"],
                "initial_shares": x0.tolist(), "seats": payoffs.seats}
    return EvolutionResult(payoffs, path, rho, sim, vals["runs"], stationary_distribution(rho), st, settings)
