"""Demand systems.

A demand system maps actions to quantities and prices. It knows nothing about costs or firms'
objectives: :class:`sim.models.market.Market` combines a demand system with marginal costs, capacities and a
mode of competition.

Every function here works on arrays of action profiles of shape ``(..., n_firms)`` and is plain numpy:
these are the readable definitions. The simulation kernels use a numba twin
(:mod:`sim.models.stagecore`) that is tested against this module.

Shipped systems
---------------
LinearDemand
    Homogeneous good, ``P(Q) = max(0, intercept - slope * Q)``. Quantity or price competition.
DifferentiatedDemand
    Linear demand for n differentiated products from the standard representative consumer with
    quadratic utility ``U(q) = sum_i a_i q_i - (b/2) (sum_i q_i^2 + g sum_{i != j} q_i q_j)``
    (Shubik and Levitan, 1980; Singh and Vives, 1984, for two goods). Inverse demand
    ``p_i = a_i - b (q_i + g sum_{j != i} q_j)``. Under price competition, direct demand respects
    ``q >= 0``: a product priced above its choke price sells nothing and drops out of the others'
    demand (the consumer's utility maximisation over ``q >= 0``, solved as a linear complementarity
    problem).
LogitDemand
    Multinomial logit with an outside good: ``s_i = exp((a_i - p_i)/mu) / (sum_j exp((a_j - p_j)/mu)
    + exp(a_0/mu))`` and ``q_i = size * s_i``. Price competition.
IsoelasticDemand
    Homogeneous good with constant elasticity: ``P(Q) = scale * Q**(-1/elasticity)``. Quantity
    competition.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError, SolverError
from sim.core.params import Parametrized, PerFirm, Real, optional

__all__ = [
    "DEMAND_TYPES",
    "Demand",
    "DifferentiatedDemand",
    "IsoelasticDemand",
    "LinearDemand",
    "LogitDemand",
]

#: Largest absolute value accepted for prices, costs, intercepts, slopes and sizes: far beyond any
#: market in any currency unit, and small enough that squares and products stay finite.
MAX_MAGNITUDE = 1e9

# Codes shared with the numba core (sim.models.stagecore). One code per (demand, mode) pair.
CODE_LINEAR_COURNOT = 0
CODE_LINEAR_BERTRAND = 1
CODE_DIFF_COURNOT = 2
CODE_DIFF_BERTRAND = 3
CODE_LOGIT_BERTRAND = 4
CODE_ISO_COURNOT = 5


@dataclass(frozen=True)
class DemandSpec:
    """Validated, numeric form of a demand system for a given number of firms.

    Attributes
    ----------
    kind : str
        ``"linear"``, ``"differentiated"``, ``"logit"`` or ``"isoelastic"``.
    scalars : ndarray of shape (4,)
        Scalar parameters in the layout the numba core expects (see each class).
    vector : ndarray of shape (n_firms,)
        The per-firm parameter (intercepts, qualities or tie-sharing weights).
    """

    kind: str
    scalars: np.ndarray
    vector: np.ndarray


class Demand(Parametrized):
    """Base class of demand systems."""

    #: modes of competition the system supports
    models: tuple[str, ...] = ()
    #: name used in experiment files and on the command line
    name: str = ""

    def spec(self, n_firms: int, prefix: str = "market") -> DemandSpec:  # pragma: no cover
        raise NotImplementedError


class LinearDemand(Demand):
    """Linear demand for a homogeneous good: ``P(Q) = max(0, intercept - slope * Q)``.

    Parameters
    ----------
    intercept : float
        Choke price (> 0).
    slope : float
        Slope of inverse demand (> 0).
    split : list of float, optional
        Price competition only: when several firms tie at the lowest price they share the market in
        proportion to these weights (default: equally). A market-sharing agreement at a common price
        is written this way.
    """

    models = ("cournot", "bertrand")
    name = "linear"
    _constraints = {
        "intercept": Real(0, MAX_MAGNITUDE, closed="right"),
        "slope": Real(0, MAX_MAGNITUDE, closed="right"),
        "split": optional(PerFirm(Real(0, MAX_MAGNITUDE, closed="right"), broadcast=False)),
    }

    def __init__(self, intercept=10.0, slope=1.0, split=None):
        self.intercept = intercept
        self.slope = slope
        self.split = split

    def spec(self, n_firms, prefix="market"):
        p = self._check_params(prefix, n_firms)
        split = p["split"] if p["split"] is not None else np.ones(n_firms)
        return DemandSpec("linear", np.array([p["intercept"], p["slope"], 0.0, 0.0]), split)


class DifferentiatedDemand(Demand):
    """Linear demand for differentiated products (representative consumer, quadratic utility).

    Parameters
    ----------
    intercept : float or list of float
        Demand intercept ``a_i`` of each product (> 0): its choke price when the others sell nothing.
    slope : float
        Own-quantity slope ``b`` of inverse demand (> 0).
    substitution : float
        Substitutability ``g`` in [0, 1]: 0 independent products, 1 perfect substitutes. Price
        competition needs ``g < 1``: use :class:`LinearDemand` for a homogeneous good.
    """

    models = ("cournot", "bertrand")
    name = "differentiated"
    _constraints = {
        "intercept": PerFirm(Real(0, MAX_MAGNITUDE, closed="right")),
        "slope": Real(0, MAX_MAGNITUDE, closed="right"),
        "substitution": Real(0, 1),
    }

    def __init__(self, intercept=10.0, slope=1.0, substitution=0.5):
        self.intercept = intercept
        self.slope = slope
        self.substitution = substitution

    def spec(self, n_firms, prefix="market"):
        p = self._check_params(prefix, n_firms)
        return DemandSpec(
            "differentiated", np.array([p["slope"], p["substitution"], 0.0, 0.0]), p["intercept"]
        )


class LogitDemand(Demand):
    """Multinomial logit demand with an outside good.

    Parameters
    ----------
    quality : float or list of float
        Quality index ``a_i`` of each product.
    outside : float
        Quality index ``a_0`` of the outside good.
    mu : float
        Horizontal differentiation (> 0); products become perfect substitutes as ``mu -> 0``.
    size : float
        Market size: quantities are ``size`` times shares.
    """

    models = ("bertrand",)
    name = "logit"
    _constraints = {
        "quality": PerFirm(Real(-1e6, 1e6)),
        "outside": Real(-1e6, 1e6),
        "mu": Real(1e-6, 1e6),
        "size": Real(0, MAX_MAGNITUDE, closed="right"),
    }

    def __init__(self, quality=2.0, outside=0.0, mu=0.25, size=1.0):
        self.quality = quality
        self.outside = outside
        self.mu = mu
        self.size = size

    def spec(self, n_firms, prefix="market"):
        p = self._check_params(prefix, n_firms)
        return DemandSpec("logit", np.array([p["outside"], p["mu"], p["size"], 0.0]), p["quality"])


class IsoelasticDemand(Demand):
    """Constant-elasticity demand for a homogeneous good: ``P(Q) = scale * Q**(-1/elasticity)``.

    Parameters
    ----------
    scale : float
        Price at ``Q = 1`` (> 0).
    elasticity : float
        Absolute price elasticity of demand, > 1 (the joint-profit maximum does not exist otherwise).
    """

    models = ("cournot",)
    name = "isoelastic"
    _constraints = {
        "scale": Real(0, MAX_MAGNITUDE, closed="right"),
        "elasticity": Real(1, 100, closed="right"),
    }

    def __init__(self, scale=1.0, elasticity=2.0):
        self.scale = scale
        self.elasticity = elasticity

    def spec(self, n_firms, prefix="market"):
        if isinstance(self.elasticity, int | float) and not isinstance(self.elasticity, bool):
            if self.elasticity < 0:
                raise InputError(
                    f"{prefix}.elasticity",
                    f"give the absolute value of the price elasticity (a number > 1), got {self.elasticity!r}",
                )
        p = self._check_params(prefix, n_firms)
        return DemandSpec("isoelastic", np.array([p["scale"], p["elasticity"], 0.0, 0.0]), np.ones(n_firms))


DEMAND_TYPES: dict[str, type[Demand]] = {
    cls.name: cls for cls in (LinearDemand, DifferentiatedDemand, LogitDemand, IsoelasticDemand)
}


# --------------------------------------------------------------------------------------------------
# Vectorised evaluation (numpy). ``s`` is a DemandSpec; arrays have shape (..., n).
# --------------------------------------------------------------------------------------------------


def inverse_demand(s: DemandSpec, q: np.ndarray) -> np.ndarray:
    """Prices of each firm's product given quantities, shape (..., n). Quantity competition."""
    q = np.asarray(q, dtype=float)
    if s.kind == "linear":
        a, b = s.scalars[0], s.scalars[1]
        p = np.maximum(0.0, a - b * q.sum(axis=-1, keepdims=True))
        return np.broadcast_to(p, q.shape).copy()
    if s.kind == "differentiated":
        b, g = s.scalars[0], s.scalars[1]
        tot = q.sum(axis=-1, keepdims=True)
        return np.maximum(0.0, s.vector - b * ((1.0 - g) * q + g * tot))
    if s.kind == "isoelastic":
        A, eps = s.scalars[0], s.scalars[1]
        Q = q.sum(axis=-1, keepdims=True)
        with np.errstate(divide="ignore"):
            p = np.where(Q > 0, A * np.power(np.where(Q > 0, Q, 1.0), -1.0 / eps), np.inf)
        return np.broadcast_to(p, q.shape).copy()
    raise ValueError(f"inverse demand undefined for {s.kind}")


def direct_demand(s: DemandSpec, p: np.ndarray) -> np.ndarray:
    """Quantities sold by each firm given prices, shape (..., n). Price competition."""
    p = np.asarray(p, dtype=float)
    if s.kind == "linear":
        a, b = s.scalars[0], s.scalars[1]
        pmin = p.min(axis=-1, keepdims=True)
        at_min = p == pmin
        w = np.where(at_min, s.vector, 0.0)
        share = w / w.sum(axis=-1, keepdims=True)
        return share * np.maximum(0.0, (a - pmin) / b)
    if s.kind == "differentiated":
        return _lcp_demand(s.vector, s.scalars[0], s.scalars[1], p)
    if s.kind == "logit":
        a0, mu, size = s.scalars[0], s.scalars[1], s.scalars[2]
        u = (s.vector - p) / mu
        u0 = np.full(p.shape[:-1] + (1,), a0 / mu)
        top = np.maximum(u.max(axis=-1, keepdims=True), u0)
        e = np.exp(u - top)
        denom = e.sum(axis=-1, keepdims=True) + np.exp(u0 - top)
        return size * e / denom
    raise ValueError(f"direct demand undefined for {s.kind}")


def logit_share_complement(s: DemandSpec, p: np.ndarray, products) -> float:
    """``1 - sum of the shares of products`` for one price profile, computed as the share of every
    other option (no cancellation when those products dominate the market)."""
    a0, mu = s.scalars[0], s.scalars[1]
    u = (s.vector - np.asarray(p, dtype=float)) / mu
    top = max(float(u.max()), a0 / mu)
    e = np.exp(u - top)
    e0 = np.exp(a0 / mu - top)
    mask = np.zeros(u.size, bool)
    mask[np.asarray(products)] = True
    return float((e[~mask].sum() + e0) / (e.sum() + e0))


def logit_outside_share(s: DemandSpec, p: np.ndarray) -> np.ndarray:
    """Share of the outside good under logit demand, shape (...,)."""
    a0, mu = s.scalars[0], s.scalars[1]
    u = (s.vector - np.asarray(p, dtype=float)) / mu
    u0 = np.full(u.shape[:-1] + (1,), a0 / mu)
    top = np.maximum(u.max(axis=-1, keepdims=True), u0)
    e = np.exp(u - top)
    e0 = np.exp(u0 - top)
    return (e0 / (e.sum(axis=-1, keepdims=True) + e0))[..., 0]


def consumer_surplus(s: DemandSpec, q: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Consumer surplus at quantities ``q`` and prices ``p``, shape (...,).

    Linear: area under demand above the price. Differentiated: ``U(q) - p.q`` of the representative
    consumer. Logit: ``size * mu * (log(sum_j exp((a_j - p_j)/mu) + exp(a_0/mu)) - a_0/mu)``, the
    expected surplus relative to buying only the outside good (Small and Rosen, 1981). Isoelastic:
    ``P Q / (elasticity - 1)``, finite because the elasticity exceeds one.
    """
    q = np.asarray(q, dtype=float)
    p = np.asarray(p, dtype=float)
    if s.kind == "linear":
        a, b = s.scalars[0], s.scalars[1]
        Q = q.sum(axis=-1)
        pm = np.minimum(p.min(axis=-1), a)
        return 0.5 * (a - pm) * np.minimum(Q, np.maximum(0.0, (a - pm) / b))
    if s.kind == "differentiated":
        b, g = s.scalars[0], s.scalars[1]
        tot = q.sum(axis=-1)
        sq = (q * q).sum(axis=-1)
        util = (s.vector * q).sum(axis=-1) - 0.5 * b * ((1.0 - g) * sq + g * tot * tot)
        return util - (p * q).sum(axis=-1)
    if s.kind == "logit":
        a0, mu, size = s.scalars[0], s.scalars[1], s.scalars[2]
        u = (s.vector - p) / mu
        u0 = np.full(u.shape[:-1] + (1,), a0 / mu)
        allu = np.concatenate([u, u0], axis=-1)
        top = allu.max(axis=-1, keepdims=True)
        lse = (top + np.log(np.exp(allu - top).sum(axis=-1, keepdims=True)))[..., 0]
        return size * mu * (lse - a0 / mu)
    if s.kind == "isoelastic":
        eps = s.scalars[1]
        Q = q.sum(axis=-1)
        P = np.where(Q > 0, p[..., 0], 0.0)
        return np.where(Q > 0, P * Q / (eps - 1.0), 0.0)
    raise ValueError(s.kind)


def _lcp_demand(a: np.ndarray, b: float, g: float, p: np.ndarray, tol: float = 1e-12) -> np.ndarray:
    """Direct demand of the differentiated linear system with ``q >= 0``.

    Solves, for every row of ``p``, the linear complementarity problem ``w = p - a + b B q``,
    ``q >= 0``, ``w >= 0``, ``q.w = 0`` with ``B = (1-g) I + g 11'``. ``B`` is positive definite for
    ``g < 1``, so the solution is unique. We use block principal pivoting with Murty's least-index
    rule as the safeguard (Judice and Pires, 1994, "A block principal pivoting algorithm for large-scale
    strictly monotone linear complementarity problems", Computers & Operations Research 21): every
    infeasible index is exchanged at once while that reduces the number of infeasibilities (or for a
    few more tries), otherwise only the least infeasible index is (Murty, 1974, which terminates for
    P-matrices from any start). On an active set S of size k the system has the closed form
    ``q_S = (d_S - g/(1 + (k-1) g) * sum_S d) / (b (1-g))`` with ``d = a - p``.
    """
    p = np.asarray(p, dtype=float)
    shape = p.shape
    n = shape[-1]
    P = p.reshape(-1, n)
    if P.shape[0] == 1 and n <= 64:
        # one profile: the same pivoting in plain Python avoids numpy's per-call overhead
        return np.array(_lcp_one(a.tolist(), b, g, P[0].tolist(), tol)).reshape(shape)
    d = a[None, :] - P
    active = d > 0
    scale = max(1.0, float(np.abs(a).max()))
    rows = np.arange(P.shape[0])
    best = np.full(P.shape[0], n + 1)
    tries = np.full(P.shape[0], 3)
    for _ in range(4 * n * n + 50):
        k = active.sum(axis=1)
        dsum = np.where(active, d, 0.0).sum(axis=1)
        coef = np.where(k > 0, g / (1.0 + (k - 1) * g), 0.0)
        q = np.where(active, (d - (coef * dsum)[:, None]) / (b * (1.0 - g)), 0.0)
        tot = q.sum(axis=1, keepdims=True)
        w = P - a[None, :] + b * ((1.0 - g) * q + g * tot)
        bad = (active & (q < -tol * scale / b)) | (~active & (w < -tol * scale))
        count = bad.sum(axis=1)
        todo = count > 0
        if not todo.any():
            return np.maximum(q, 0.0).reshape(shape)
        improved = count < best
        best = np.where(improved, count, best)
        tries = np.where(improved, 3, tries - (~improved & todo))
        block = todo & (tries > 0)
        single = todo & ~block
        active[block] ^= bad[block]
        if single.any():
            first = np.argmax(bad, axis=1)
            r = rows[single]
            active[r, first[single]] = ~active[r, first[single]]
            tries = np.where(single, 0, tries)
    raise SolverError("differentiated demand: complementarity pivoting did not terminate")


def _lcp_one(a: list, b: float, g: float, p: list, tol: float) -> list:
    """:func:`_lcp_demand` for a single price profile (same pivoting rules, plain Python)."""
    n = len(a)
    d = [ai - pi for ai, pi in zip(a, p)]
    active = [x > 0 for x in d]
    scale = max(1.0, max(abs(x) for x in a))
    best, tries = n + 1, 3
    inv = 1.0 / (b * (1.0 - g))
    for _ in range(4 * n * n + 50):
        k = sum(active)
        dsum = sum(x for x, on in zip(d, active) if on)
        coef = g / (1.0 + (k - 1) * g) if k > 0 else 0.0
        q = [(x - coef * dsum) * inv if on else 0.0 for x, on in zip(d, active)]
        tot = sum(q)
        bad = []
        for j in range(n):
            if active[j]:
                if q[j] < -tol * scale / b:
                    bad.append(j)
            elif p[j] - a[j] + b * ((1.0 - g) * q[j] + g * tot) < -tol * scale:
                bad.append(j)
        if not bad:
            return [max(x, 0.0) for x in q]
        if len(bad) < best:
            best, tries = len(bad), 3
        else:
            tries -= 1
        if tries > 0:
            for j in bad:
                active[j] = not active[j]
        else:
            active[bad[0]] = not active[bad[0]]
            tries = 0
    raise SolverError("differentiated demand: complementarity pivoting did not terminate")
