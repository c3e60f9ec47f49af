"""The payoffs of every group of entrants, and what a type earns against a population.

A :class:`PayoffTable` holds, for every *group* (a multiset of ``seats`` types, one match of a tournament), the
payoff of a member of each type in it. With two seats this is the usual payoff matrix ``A[i, j]`` (``i``'s payoff
against ``j``). With more seats, the payoff of type ``i`` against a population is defined by random group formation
(Broom, Cannings and Vickers, 1997, "Multi-player matrix games", Bull. Math. Biol. 59; Gokhale and Traulsen, 2010,
"Evolutionary games in the multiverse", PNAS 107):

* **infinite population with shares x** (replicator dynamics): the ``seats - 1`` rivals of a focal ``i`` are drawn
  independently from the population, so the opponent multiset ``c`` (counts per type, summing to ``seats - 1``) has
  the multinomial probability ``(seats-1)! / prod c_e! * prod x_e^c_e`` and
  ``f_i(x) = sum_c P(c | x) * payoff(i | {i} + c)``. With two seats ``f(x) = A x``.
* **finite population of N** with ``k`` individuals of type ``A`` and ``N - k`` of type ``B`` (Moran process): the
  rivals are drawn without replacement from the other ``N - 1`` individuals, so the number of ``A`` rivals is
  hypergeometric. With two seats this is ``f_A(k) = (a (k - 1) + b (N - k)) / (N - 1)``,
  ``f_B(k) = (c k + d (N - k - 1)) / (N - 1)`` (Nowak, Sasaki, Taylor and Fudenberg, 2004, Nature 428, "Emergence
  of cooperation and evolutionary stability in finite populations").
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
from scipy.stats import hypergeom

from sim.core.errors import InputError

__all__ = ["PayoffTable", "multisets", "type_counts"]


def multisets(n_types: int, size: int) -> list[tuple]:
    """Every multiset of ``size`` types out of ``n_types``, in lexicographic order.

    Parameters
    ----------
    n_types : int
    size : int

    Returns
    -------
    list of tuple of int
        Each multiset as a sorted tuple of type indices (length ``size``).
    """
    return list(itertools.combinations_with_replacement(range(n_types), size))


def type_counts(members: tuple, n_types: int) -> tuple:
    """How many members of each type a multiset holds.

    Parameters
    ----------
    members : tuple of int
        Type indices (a multiset, as :func:`multisets` lists it).
    n_types : int

    Returns
    -------
    tuple of int
        Length ``n_types``.
    """
    c = [0] * n_types
    for e in members:
        c[e] += 1
    return tuple(c)


def _single(c) -> int:
    return int(np.flatnonzero(np.asarray(c))[0])


@dataclass(frozen=True, eq=False)
class PayoffTable:
    """Payoffs of every group of ``seats`` types (see the module notes).

    Parameters
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
        """The number of types E."""
        return len(self.labels)

    # ---- construction --------------------------------------------------------------------------
    @classmethod
    def from_matrix(cls, A, labels=None, se=None, metric: str = "payoff") -> PayoffTable:
        """The table of a two-seat game.

        Parameters
        ----------
        A : array_like of shape (E, E)
            ``A[i, j]``: the payoff of ``i`` against ``j``.
        labels : sequence of str, optional
            Default ``type 1``, ``type 2``, ...
        se : array_like of shape (E, E), optional
            Standard errors (default zero: exact payoffs).
        metric : str

        Returns
        -------
        PayoffTable
        """
        A = np.asarray(A, dtype=float)
        if A.ndim != 2 or A.shape[0] != A.shape[1] or A.shape[0] < 1:
            raise InputError("payoffs", f"must be a square matrix, got shape {A.shape}")
        S = np.zeros_like(A) if se is None else np.asarray(se, dtype=float)
        return cls.from_function(lambda i, c: (A[i, _single(c)], S[i, _single(c)]), A.shape[0], 2, labels, metric)

    @classmethod
    def from_function(cls, fn, n_types: int, seats: int, labels=None, metric: str = "payoff") -> PayoffTable:
        """The table given by a payoff function.

        Parameters
        ----------
        fn : callable
            ``fn(i, rivals)`` -> payoff or ``(payoff, se)`` of a focal ``i`` whose rivals have the counts ``rivals``
            (a tuple of length ``n_types`` summing to ``seats - 1``).
        n_types : int
        seats : int
        labels : sequence of str, optional
        metric : str

        Returns
        -------
        PayoffTable
        """
        labels = tuple(labels) if labels is not None else tuple(f"type {k + 1}" for k in range(n_types))
        sets = multisets(n_types, seats)
        groups = np.array([type_counts(m, n_types) for m in sets], dtype=np.int64).reshape(len(sets), n_types)
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
        """The row of the group with these counts.

        Parameters
        ----------
        counts : sequence of int, length E

        Returns
        -------
        int
        """
        return self._index[tuple(int(v) for v in counts)]

    def value(self, i: int, rivals) -> tuple[float, float]:
        """Payoff and standard error of a focal ``i`` with rival counts ``rivals``.

        Parameters
        ----------
        i : int
        rivals : sequence of int, length E
            Summing to ``seats - 1``.

        Returns
        -------
        payoff, se : float
        """
        c = list(int(v) for v in rivals)
        c[i] += 1
        g = self.group_row(c)
        return float(self.payoff[g, i]), float(self.se[g, i])

    def mixed(self, focal: int, a: int, b: int, k: int) -> tuple[float, float]:
        """Payoff and standard error of ``focal`` (``a`` or ``b``) whose ``seats - 1`` rivals are ``k`` of type
        ``a`` and ``seats - 1 - k`` of type ``b``.

        Parameters
        ----------
        focal, a, b, k : int

        Returns
        -------
        payoff, se : float
        """
        c = [0] * self.n_types
        c[a] += k
        c[b] += self.seats - 1 - k
        return self.value(focal, c)

    def matrix(self) -> np.ndarray:
        """Each type's payoff when every rival is of one type.

        Returns
        -------
        ndarray of shape (E, E)
            ``M[i, j]``: payoff of ``i`` when every rival is ``j`` (two seats: the payoff matrix).
        """
        return self._matrix(0)

    def matrix_se(self) -> np.ndarray:
        """The standard errors of :meth:`matrix`.

        Returns
        -------
        ndarray of shape (E, E)
        """
        return self._matrix(1)

    def _matrix(self, part: int) -> np.ndarray:
        E = self.n_types
        M = np.empty((E, E))
        for i in range(E):
            for j in range(E):
                M[i, j] = self.mixed(i, j, j, 0)[part]
        return M

    # ---- payoffs against populations -----------------------------------------------------------
    def _against_tables(self):
        cache = self.__dict__.setdefault("_cache_against", {})
        if cache:
            return cache["rivals"], cache["coef"], cache["values"]
        E, n = self.n_types, self.seats
        rivals = np.array([type_counts(m, E) for m in multisets(E, n - 1)], dtype=np.int64).reshape(-1, E)
        coef = np.array([math.factorial(n - 1) / math.prod(math.factorial(int(v)) for v in r) for r in rivals])
        values = np.empty((E, rivals.shape[0]))
        for i in range(E):
            for k in range(rivals.shape[0]):
                values[i, k] = self.value(i, rivals[k])[0]
        cache.update(rivals=rivals, coef=coef, values=values)
        return rivals, coef, values

    def against(self, shares) -> np.ndarray:
        """Expected payoff of each type against an infinite population with these shares.

        Parameters
        ----------
        shares : array_like of shape (E,)

        Returns
        -------
        ndarray of shape (E,)
        """
        x = np.asarray(shares, dtype=float)
        rivals, coef, values = self._against_tables()
        mono = coef * np.prod(np.power(x[None, :], rivals), axis=1)
        return values @ mono

    def finite(self, a: int, b: int, N: int) -> tuple[np.ndarray, np.ndarray]:
        """Expected payoffs of type ``a`` and type ``b`` individuals in a population of ``N`` with ``k`` of type
        ``a``, for ``k = 1 .. N-1`` (rivals drawn without replacement; see the module notes).

        Parameters
        ----------
        a, b : int
        N : int
            Population size, at least the number of seats.

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
