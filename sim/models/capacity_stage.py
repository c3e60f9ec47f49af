"""Numba stage core of price competition with capacity constraints, and draws from its mixed equilibrium.

:func:`capacity_stage` is the branch of :func:`sim.models.stagecore.evaluate` for the code
``CODE_CAPACITY_BERTRAND`` (:mod:`sim.models.codes`). It is the compiled twin of the plain-Python one-period play
:func:`sim.models._capacity_reference.play_period`: the same insertion sort by (price, index), the same service
of price levels in turn (efficient or proportional rationing), the same water filling of a level's sales among
tied firms by weight, the same operations in the same order, so that both give the same bits
(``tests/models/test_capacity_stage.py`` compares them). Conventions of demand, rationing and ties are in
:mod:`sim.models._capacity_core`.

Layout of the kernel arrays: ``scalars = (v, M, demand code, rationing code)`` (reservation price, market size,
:data:`~sim.models._capacity_core.DEMAND_CODES`, :data:`~sim.models._capacity_core.RATIONING_CODES`),
``vector`` = the weights by which tied firms share (capacities, or the agreed quantities), ``cost`` the common
marginal cost per firm, ``capacity`` per firm; one product per firm. The demand shock ``theta`` scales the
quantity demanded (the market size ``M``; capacities do not move), as under every price-competition model of
the core.

Market price and consumer surplus
---------------------------------
The market price of a period is the quantity-weighted mean of the prices paid (the plain mean when nothing
sells). Consumer surplus: with inelastic demand every unit sold is worth ``v`` to its buyer, ``sum (v - p_i)
q_i``; with linear demand and efficient rationing the buyers served are those who value the good most, so the
gross value is the area under the inverse demand up to the quantity sold, ``v Q - v Q^2 / (2 M)``, less what
they pay; with linear demand and proportional rationing the buyers at a price level are a random draw among the
consumers left who value the good at least that price, whose values are spread evenly over ``[p, v]``, so each
unit brings ``(v - p) / 2``.

The mixed equilibrium in a simulation
-------------------------------------
When the static equilibrium is in mixed strategies (Bertrand-Edgeworth), a level priced at :data:`MIXED_PRICE`
(a negative price, which no firm can charge) means "draw this period's price from the firm's equilibrium
distribution". The distribution is tabulated by :func:`quantile_table` as its quantile function at
:data:`N_QUANTILES` equally likely levels, the midpoints ``(j + 1/2) / N_QUANTILES``; one uniform ``u`` of the
replication's stream picks level ``floor(u N_QUANTILES)`` (:func:`draw_mixed`). The draw is exact for the
tabulated distribution; its expected payoffs differ from the equilibrium's by the discretisation, of order
``1 / N_QUANTILES`` of the price range (``tests/simulation/test_capacity_simulation.py`` bounds it).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["MIXED_PRICE", "N_QUANTILES", "capacity_stage", "draw_mixed", "quantile_table"]

#: price of a level whose actions are drawn from the firm's mixed equilibrium distribution (never a real price)
MIXED_PRICE = -1.0
#: equally likely levels of a tabulated mixed distribution
N_QUANTILES = 4096


@njit(cache=True, _nrt=False, inline="always")
def _quantity(p, demand_code, v, M):
    if p > v:
        return 0.0
    if demand_code == 1:
        return M * (1.0 - p / v)
    return M


@njit(cache=True, _nrt=False, inline="always")
def _share(order, start, stop, sold, capacity, weights, sales_out):
    """Share ``sold`` among the firms ``order[start:stop]`` by weight, capped at capacity (as
    :func:`sim.models._capacity_reference._share`; ``order`` holds firm indices as floats)."""
    rest = sold
    open_count = stop - start
    while open_count > 0:
        w = 0.0
        for t in range(start, stop):
            i = int(order[t])
            if sales_out[i] < capacity[i]:
                w += weights[i]
        capped = False
        for t in range(start, stop):
            i = int(order[t])
            if sales_out[i] < capacity[i] and rest * weights[i] / w >= capacity[i]:
                rest -= capacity[i]
                sales_out[i] = capacity[i]
                open_count -= 1
                capped = True
        if not capped:
            for t in range(start, stop):
                i = int(order[t])
                if sales_out[i] < capacity[i]:
                    sales_out[i] = rest * weights[i] / w
            return


@njit(cache=True, _nrt=False, inline="always")
def capacity_stage(scalars, vector, cost, capacity, owner, n, actions, theta, q, p, profit, work, want_cs):
    """Sales, prices and profits of one price profile (``profit`` already zeroed).

    Parameters
    ----------
    scalars : ndarray of shape (4,)
        Reservation price, market size, demand code, rationing code.
    vector : ndarray of shape (n,)
        Tie-sharing weights (> 0).
    cost, capacity : ndarray of shape (n,)
    owner : int64 ndarray of shape (n,)
    n : int
        Number of firms.
    actions : ndarray of shape (n,)
        Prices.
    theta : float
        Multiplicative demand shock (scales the market size).
    q, p : ndarray of shape (n,)
        Output: sales and prices.
    profit : ndarray of shape (n_firms,)
        Output: profits (added to).
    work : ndarray of shape (2, n)
        Scratch (row 0: the firms in order of price).
    want_cs : bool
        Whether to compute consumer surplus (nan otherwise).

    Returns
    -------
    market_price, surplus : float
    """
    v = scalars[0]
    M = scalars[1] * theta
    demand_code = int(scalars[2])
    rationing_code = int(scalars[3])
    order = work[0]
    for i in range(n):
        p[i] = actions[i]
        order[i] = i
        q[i] = 0.0
    for a in range(1, n):  # insertion sort by (price, index)
        j = int(order[a])
        b = a - 1
        while b >= 0 and p[int(order[b])] > p[j]:
            order[b + 1] = order[b]
            b -= 1
        order[b + 1] = j
    done = 0.0
    start = 0
    while start < n:
        price = p[int(order[start])]
        stop = start + 1
        while stop < n and p[int(order[stop])] == price:
            stop += 1
        level_cap = 0.0
        for t in range(start, stop):
            level_cap += capacity[int(order[t])]
        D = _quantity(price, demand_code, v, M)
        if rationing_code == 0:
            demand = D - done
        else:
            demand = (1.0 - done) * D
        if demand < 0.0:
            demand = 0.0
        sold = level_cap if level_cap < demand else demand
        _share(order, start, stop, sold, capacity, vector, q)
        if rationing_code == 0:
            done += sold
        elif D > 0.0:
            done += sold / D
        start = stop
    Q = 0.0
    num = 0.0
    mean = 0.0
    value = 0.0
    for i in range(n):
        profit[owner[i]] += (p[i] - cost[i]) * q[i]
        Q += q[i]
        num += p[i] * q[i]
        mean += p[i]
        value += (v - p[i]) * q[i]
    cs = math.nan
    if want_cs:
        if demand_code == 0:
            cs = value
        elif rationing_code == 0:
            cs = v * Q - v * Q * Q / (2.0 * M) - num if M > 0.0 else 0.0
        else:
            cs = 0.5 * value
    return (num / Q if Q > 0.0 else mean / n), cs


@njit(cache=True, _nrt=False, inline="always")
def draw_mixed(table, k, u):
    """Price of product ``k`` drawn from its tabulated mixed distribution.

    Parameters
    ----------
    table : ndarray of shape (n_products, n_levels)
        Quantile levels (:func:`quantile_table`).
    k : int
        Product.
    u : float
        Uniform draw in [0, 1).

    Returns
    -------
    float
    """
    m = table.shape[1]
    j = int(u * m)
    if j >= m:
        j = m - 1
    return table[k, j]


def quantile_table(equilibrium, n_levels: int = N_QUANTILES) -> np.ndarray:
    """The quantile function of each firm's mixed equilibrium distribution at equally likely levels.

    ``Q(u) = min {p : F(p) >= u}`` at ``u = (j + 1/2) / n_levels``. For the closed forms the distribution is
    linear between its grid points with the atom at the top of the support kept as a jump; for the numeric method
    it is a step function on its price grid (:meth:`sim.models._capacity_mixed.StaticEquilibrium.cdf_at`).

    Parameters
    ----------
    equilibrium : StaticEquilibrium
        A mixed equilibrium.
    n_levels : int
        Number of levels.

    Returns
    -------
    ndarray of shape (n_firms, n_levels)
    """
    eq = equilibrium
    u = (np.arange(n_levels) + 0.5) / n_levels
    grid = np.asarray(eq.prices, dtype=float)
    out = np.empty((eq.cdf.shape[0], n_levels))
    for i in range(eq.cdf.shape[0]):
        F = np.maximum.accumulate(np.clip(np.asarray(eq.cdf[i], dtype=float), 0.0, 1.0))
        if eq.method == "numeric":
            t = np.minimum(np.searchsorted(F, u, side="left"), grid.size - 1)
            out[i] = grid[t]
            continue
        F = F.copy()
        F[-1] = 1.0 - eq.atoms[i]  # the left limit at the top: the atom is a jump, not spread
        t = np.minimum(np.searchsorted(F, u, side="left"), grid.size - 1)
        lo = np.maximum(t - 1, 0)
        span = F[t] - F[lo]
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where(span > 0, (u - F[lo]) / span, 1.0)
        q = grid[lo] + np.clip(w, 0.0, 1.0) * (grid[t] - grid[lo])
        out[i] = np.where(u > F[-1], eq.support_high[i], np.clip(q, eq.support_low[i], eq.support_high[i]))
    return out
