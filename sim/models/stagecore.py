"""Numba twin of the stage-game evaluation of the shipped demand systems and
:meth:`sim.models.market.MarketSpec.evaluate`.

The kernels evaluate one action profile at a time. Everything works per product with an owner map
(``owner[k]`` is the firm selling product ``k``; the identity when no firm sells several products):
actions, quantities, prices, costs and capacities have one entry per product, and firm profits add
up the profits of the products a firm owns. ``tests/models/test_stagecore.py`` checks every (demand, model)
code against the numpy definitions on random profiles.

Conventions shared with :mod:`sim.models.market`
-----------------------------------------
* The demand shock ``theta`` scales the price under quantity competition and the quantity under price
  competition. Consumer surplus scales by ``theta`` as well (the shock scales the demand curve).
* The *market price* of a period is the price at which a homogeneous good trades (Cournot: ``P(Q)``;
  homogeneous Bertrand: the lowest price), and the quantity-weighted mean price of differentiated
  products (the plain mean when nothing sells).
* Homogeneous Bertrand: undercutting means pricing one price step below the rival, the market's
  ``tick`` or, with continuous prices, ``EFFECTIVE_TICK`` times the choke price
  (:attr:`sim.models.market.MarketSpec.price_step`, read by :func:`effective_tick`). The stage game reports
  only such attainable profiles, so the engine plays them as they are; a deviation profit falls
  short of the continuous-price supremum by about ``step * D(p)`` (``tests/models/test_stagecore.py``
  checks this order).

Extension point
---------------
Numba kernels cannot call back into Python objects without losing their speed, so the core is
closed: it evaluates the (demand, mode) pairs of :mod:`sim.models.codes`, each from a code, four
scalars and one per-product vector. A demand system names the code of each of its pairs in its
``stage_codes`` table. A new system whose formula is one of these, written with other parameters,
reuses the code and maps its parameters onto ``scalars`` and ``vector`` in its ``spec``; a new
formula needs a new code in :mod:`sim.models.codes`, a branch of :func:`evaluate`, and the check of
``tests/models/test_stagecore.py``. A system without a code still has its whole theory (which is
plain Python); the simulations refuse it with an error naming it.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.models.capacity_stage import capacity_stage
from sim.models.codes import (
    CODE_CAPACITY_BERTRAND,
    CODE_DIFF_BERTRAND,
    CODE_DIFF_COURNOT,
    CODE_ISO_COURNOT,
    CODE_LINEAR_BERTRAND,
    CODE_LINEAR_COURNOT,
)

__all__ = ["EFFECTIVE_TICK", "MarketArrays", "effective_tick", "evaluate", "market_arrays"]

#: price step of homogeneous Bertrand with continuous prices, relative to the choke price (the value
#: :attr:`sim.models.market.MarketSpec.price_step` uses; ``tests/models/test_stagecore.py`` checks they agree)
EFFECTIVE_TICK = 1e-9

_LCP_TOL = 1e-12


class MarketArrays:
    """The numeric arrays of a market in the layout the kernels take.

    Parameters
    ----------
    code : int
        Stage-core code (:mod:`sim.models.codes`).
    scalars : array_like of shape (4,)
    vector, cost, capacity : array_like of shape (n_products,)
    owner : array_like of int, shape (n_products,)
    n_firms : int
    quantity_setting : bool
    mixed : array_like of shape (n_products, n_levels), optional
        Quantile levels of the products' mixed equilibrium prices (:mod:`sim.models.capacity_stage`), drawn by the
        kernels for an action at ``MIXED_PRICE``; empty (shape (0, 0), the default) when no level is mixed.

    Attributes
    ----------
    code : int
    scalars : float64 ndarray of shape (4,)
    vector, cost, capacity : float64 ndarray of shape (n_products,)
    owner : int64 ndarray of shape (n_products,)
    n_firms, n_products : int
    quantity_setting : bool
    mixed : float64 ndarray of shape (n_products, n_levels) or (0, 0)
    """

    def __init__(self, code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting, mixed=None):
        self.code = int(code)
        self.scalars = np.ascontiguousarray(scalars, dtype=np.float64)
        self.vector = np.ascontiguousarray(vector, dtype=np.float64)
        self.cost = np.ascontiguousarray(cost, dtype=np.float64)
        self.capacity = np.ascontiguousarray(capacity, dtype=np.float64)
        self.owner = np.ascontiguousarray(owner, dtype=np.int64)
        self.n_firms = int(n_firms)
        self.n_products = int(self.owner.shape[0])
        self.quantity_setting = bool(quantity_setting)
        self.mixed = np.ascontiguousarray(np.zeros((0, 0)) if mixed is None else mixed, dtype=np.float64)

    def args(self):
        """Positional arguments of :func:`evaluate` before the action profile.

        Returns
        -------
        tuple
            ``(code, scalars, vector, cost, capacity, owner, n_firms)``.
        """
        return (self.code, self.scalars, self.vector, self.cost, self.capacity, self.owner, self.n_firms)


def market_owner(ms) -> np.ndarray:
    """Owner map of a MarketSpec (identity when the spec has no multi-product firms).

    Parameters
    ----------
    ms : MarketSpec

    Returns
    -------
    int64 ndarray of shape (n_products,)
    """
    owner = getattr(ms, "owner", None)
    if owner is None:
        return np.arange(ms.n_firms, dtype=np.int64)
    return np.asarray(owner, dtype=np.int64)


def market_arrays(ms) -> MarketArrays:
    """The kernel arrays of a :class:`~sim.models.market.MarketSpec`.

    The code comes from the demand system (:meth:`~sim.models.demand_spec.DemandSpec.stage_code`): a
    system the kernels cannot evaluate is refused here, naming it.

    Parameters
    ----------
    ms : MarketSpec

    Returns
    -------
    MarketArrays
    """
    return MarketArrays(ms.code, ms.demand.scalars, ms.demand.vector, ms.cost, ms.capacity, market_owner(ms),
                        ms.n_firms, ms.quantity_setting, getattr(ms, "mixed", None))


def effective_tick(ms) -> float:
    """Price step used to undercut in homogeneous Bertrand: the market's ``tick`` when positive,
    otherwise ``EFFECTIVE_TICK`` times the choke price (the market's own :attr:`price_step`, the one
    definition the stage game uses).

    Parameters
    ----------
    ms : MarketSpec

    Returns
    -------
    float
    """
    return float(ms.price_step)


@njit(cache=True, _nrt=False)
def _lcp(a, b, g, p, q, active, d):
    """Direct demand of the differentiated linear system with ``q >= 0`` for one price profile, by
    Murty's least-index principal pivoting alone (Murty, 1974: one index exchanged per step, which
    terminates for P-matrices). :func:`sim.models.differentiated._lcp_demand` solves the same complementarity problem
    by block principal pivoting with Murty's rule as its safeguard; the matrix is positive definite, so
    the solution is unique and both give the same demand (``tests/models/test_stagecore.py`` compares them).
    With one profile and a handful of products, the single-exchange rule is simple and fast enough.
    Writes ``q``; ``active`` (1.0 for products in the active set) and ``d`` are scratch. Returns False
    if the pivoting does not terminate."""
    n = p.shape[0]
    scale = 1.0
    for k in range(n):
        d[k] = a[k] - p[k]
        active[k] = 1.0 if d[k] > 0 else 0.0
        scale = max(scale, abs(a[k]))
    for _ in range(4 * n * n + 50):
        kk = 0
        dsum = 0.0
        for k in range(n):
            if active[k] > 0.0:
                kk += 1
                dsum += d[k]
        coef = g / (1.0 + (kk - 1) * g) if kk > 0 else 0.0
        tot = 0.0
        for k in range(n):
            q[k] = (d[k] - coef * dsum) / (b * (1.0 - g)) if active[k] > 0.0 else 0.0
            tot += q[k]
        first = -1
        for k in range(n):
            w = p[k] - a[k] + b * ((1.0 - g) * q[k] + g * tot)
            on = active[k] > 0.0
            if (on and q[k] < -_LCP_TOL * scale / b) or ((not on) and w < -_LCP_TOL * scale):
                first = k
                break
        if first < 0:
            for k in range(n):
                if q[k] < 0.0:
                    q[k] = 0.0
            return True
        active[first] = 0.0 if active[first] > 0.0 else 1.0
    return False


@njit(cache=True, _nrt=False, inline="always")
def evaluate(code, scalars, vector, cost, capacity, owner, n_firms, actions, theta, q, p, profit, work, want_cs):
    """Quantities, prices and firm profits of one action profile.

    Parameters
    ----------
    code : int
        (demand, model) code of :mod:`sim.models.codes`.
    scalars : ndarray of shape (4,)
    vector, cost, capacity : ndarray of shape (n_products,)
    owner : int64 ndarray of shape (n_products,)
    n_firms : int
    actions : ndarray of shape (n_products,)
        Quantities (Cournot) or prices (Bertrand).
    theta : float
        Multiplicative demand shock.
    q, p : ndarray of shape (n_products,)
        Output: quantities and prices (modified in place).
    profit : ndarray of shape (n_firms,)
        Output: firm profits (modified in place).
    work : ndarray of shape (2, n_products)
        Scratch space (differentiated Bertrand only).
    want_cs : bool
        Whether to compute consumer surplus (nan otherwise).

    Returns
    -------
    market_price : float
        See the module notes; nan if the evaluation failed (differentiated Bertrand pivoting).
    surplus : float
        Consumer surplus (already scaled by ``theta``), or nan.

    Notes
    -----
    Inlined into the kernels (``inline="always"``): an out-of-line call with a dozen array arguments
    cost about as much as the evaluation itself. Inlining changes no arithmetic.
    """
    n = actions.shape[0]
    for i in range(n_firms):
        profit[i] = 0.0
    if code == CODE_LINEAR_COURNOT or code == CODE_ISO_COURNOT or code == CODE_DIFF_COURNOT:
        return _quantity_stage(code, scalars, vector, cost, capacity, owner, n, actions, theta, q, p, profit, want_cs)
    if code == CODE_CAPACITY_BERTRAND:
        return capacity_stage(scalars, vector, cost, capacity, owner, n, actions, theta, q, p, profit, work, want_cs)
    return _price_stage(code, scalars, vector, cost, owner, n, actions, theta, q, p, profit, work, want_cs)


@njit(cache=True, _nrt=False, inline="always")
def _quantity_stage(code, scalars, vector, cost, capacity, owner, n, actions, theta, q, p, profit, want_cs):
    """:func:`evaluate` under quantity competition (``profit`` already zeroed)."""
    cs = math.nan
    mprice = 0.0
    Q = 0.0
    for k in range(n):
        x = actions[k]
        if x < 0.0:
            x = 0.0
        if x > capacity[k]:
            x = capacity[k]
        q[k] = x
        Q += x
    if code == CODE_LINEAR_COURNOT:
        a0 = scalars[0]
        b = scalars[1]
        base = a0 - b * Q
        if base < 0.0:
            base = 0.0
        if want_cs:
            pm = min(base, a0)
            cs = 0.5 * (a0 - pm) * min(Q, max(0.0, (a0 - pm) / b)) * theta
        price = base * theta
        for k in range(n):
            p[k] = price
        mprice = price
    elif code == CODE_ISO_COURNOT:
        A = scalars[0]
        eps = scalars[1]
        base = A * Q ** (-1.0 / eps) if Q > 0.0 else np.inf
        price = base * theta
        for k in range(n):
            p[k] = price
        if want_cs:
            cs = base * Q / (eps - 1.0) * theta if Q > 0.0 else 0.0
        mprice = price
    else:
        b = scalars[0]
        g = scalars[1]
        util = 0.0
        sq = 0.0
        for k in range(n):
            base = vector[k] - b * ((1.0 - g) * q[k] + g * Q)
            if base < 0.0:
                base = 0.0
            p[k] = base
            util += vector[k] * q[k]
            sq += q[k] * q[k]
        if want_cs:
            util -= 0.5 * b * ((1.0 - g) * sq + g * Q * Q)
            spend = 0.0
            for k in range(n):
                spend += p[k] * q[k]
            cs = (util - spend) * theta
        num = 0.0
        mean = 0.0
        for k in range(n):
            p[k] *= theta
            num += p[k] * q[k]
            mean += p[k]
        mprice = num / Q if Q > 0.0 else mean / n
    for k in range(n):
        if q[k] > 0.0:
            profit[owner[k]] += (p[k] - cost[k]) * q[k]
    return mprice, cs


@njit(cache=True, _nrt=False, inline="always")
def _price_stage(code, scalars, vector, cost, owner, n, actions, theta, q, p, profit, work, want_cs):
    """:func:`evaluate` under price competition (``profit`` already zeroed)."""
    cs = math.nan
    mprice = 0.0
    for k in range(n):
        p[k] = actions[k]
    if code == CODE_LINEAR_BERTRAND:
        a0 = scalars[0]
        b = scalars[1]
        pmin = p[0]
        for k in range(1, n):
            if p[k] < pmin:
                pmin = p[k]
        wsum = 0.0
        for k in range(n):
            if p[k] == pmin:
                wsum += vector[k]
        D = max(0.0, (a0 - pmin) / b)
        Q = 0.0
        for k in range(n):
            q[k] = (vector[k] / wsum) * D if p[k] == pmin else 0.0
            Q += q[k]
        if want_cs:
            pm = min(pmin, a0)
            cs = 0.5 * (a0 - pm) * min(Q, max(0.0, (a0 - pm) / b)) * theta
        mprice = pmin
    elif code == CODE_DIFF_BERTRAND:
        b = scalars[0]
        g = scalars[1]
        if not _lcp(vector, b, g, p, q, work[0], work[1]):
            return math.nan, math.nan
        if want_cs:
            tot = 0.0
            sq = 0.0
            util = 0.0
            spend = 0.0
            for k in range(n):
                tot += q[k]
                sq += q[k] * q[k]
                util += vector[k] * q[k]
                spend += p[k] * q[k]
            cs = (util - 0.5 * b * ((1.0 - g) * sq + g * tot * tot) - spend) * theta
    else:  # CODE_LOGIT_BERTRAND
        cs = _logit_demand(scalars, vector, n, p, q, theta, want_cs)
    Qt = 0.0
    num = 0.0
    mean = 0.0
    for k in range(n):
        q[k] *= theta
        Qt += q[k]
        num += p[k] * q[k]
        mean += p[k]
        profit[owner[k]] += (p[k] - cost[k]) * q[k]
    if code != CODE_LINEAR_BERTRAND:
        mprice = num / Qt if Qt > 0.0 else mean / n
    return mprice, cs


@njit(cache=True, _nrt=False, inline="always")
def _logit_demand(scalars, vector, n, p, q, theta, want_cs):
    """Logit quantities before the shock into ``q``; returns consumer surplus (already scaled by
    ``theta``) or nan."""
    cs = math.nan
    a0 = scalars[0]
    mu = scalars[1]
    size = scalars[2]
    u0 = a0 / mu
    top = u0
    for k in range(n):
        u = (vector[k] - p[k]) / mu
        if u > top:
            top = u
    denom = 0.0
    for k in range(n):
        q[k] = math.exp((vector[k] - p[k]) / mu - top)
        denom += q[k]
    denom += math.exp(u0 - top)
    for k in range(n):
        q[k] = size * q[k] / denom
    if want_cs:
        cs = size * mu * (top + math.log(denom) - a0 / mu) * theta
    return cs


def evaluate_py(arrays: MarketArrays, actions, theta: float = 1.0, want_cs: bool = True):
    """Evaluate one profile from Python (allocates the outputs of :func:`evaluate`).

    Parameters
    ----------
    arrays : MarketArrays
    actions : array_like of shape (n_products,)
    theta : float
        Multiplicative demand shock.
    want_cs : bool
        Whether to compute consumer surplus.

    Returns
    -------
    quantities, prices : ndarray of shape (n_products,)
    firm_profits : ndarray of shape (n_firms,)
    market_price, surplus : float
    """
    a = np.ascontiguousarray(actions, dtype=np.float64)
    q = np.empty(arrays.n_products)
    p = np.empty(arrays.n_products)
    pi = np.empty(arrays.n_firms)
    work = np.empty((2, arrays.n_products))
    mp, cs = evaluate(*arrays.args(), a, float(theta), q, p, pi, work, want_cs)
    return q, p, pi, mp, cs
