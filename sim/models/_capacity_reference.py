"""One period of capacity-constrained price competition in plain Python.

:func:`play_period` is written in the arithmetic a numba stage core uses: scalar loops over plain
arrays, the same operations in the same order, no numpy reductions, so that the same body compiled
with ``numba.njit`` gives the same bits (IEEE double arithmetic, no fast-math). It writes into output
arrays and returns a status code, the calling convention of the project's kernels.

Order of service: firms sorted by price, ties by index (an insertion sort, stable and independent of
any library's sorting algorithm). Each price level is served in turn:

* efficient rationing: quantity demanded at the level ``max(0, D(p) - sold so far)``;
* proportional rationing: ``max(0, 1 - gone) * D(p)``, where ``gone`` adds up ``sold at level / D(level
  price)`` over the cheaper levels;

the level sells ``min(its capacity, that quantity)``, shared among its firms in proportion to their
weights, capped at capacity (water filling). Conventions as in :mod:`sim.models._capacity_core`.
"""

from __future__ import annotations

__all__ = ["STATUS_BAD_INPUT", "STATUS_OK", "play_period"]

STATUS_OK = 0
STATUS_BAD_INPUT = 1


def _quantity(p, demand_code, v, M):
    if p > v:
        return 0.0
    if demand_code == 1:
        return M * (1.0 - p / v)
    return M


def play_period(prices, capacity, weights, cost, demand_code, reservation_price, market_size, rationing_code,
                order, sales_out, profits_out):
    """Sales and profits of one period.

    Parameters
    ----------
    prices, capacity, weights : float arrays of shape (n_firms,)
        Prices charged, capacities (> 0) and the weights by which tied firms share (> 0; capacities
        for the default convention).
    cost : float
        Common marginal cost.
    demand_code : int
        0 inelastic, 1 linear (``DEMAND_CODES``).
    reservation_price, market_size : float
    rationing_code : int
        0 efficient, 1 proportional (``RATIONING_CODES``).
    order : int array of shape (n_firms,)
        Scratch space (firm indices sorted by price on return).
    sales_out, profits_out : float arrays of shape (n_firms,)
        Written with each firm's sales and profit.

    Returns
    -------
    int
        ``STATUS_OK``, or ``STATUS_BAD_INPUT`` for a non-positive capacity or weight.
    """
    n = len(prices)
    for i in range(n):
        if not (capacity[i] > 0.0) or not (weights[i] > 0.0):
            return STATUS_BAD_INPUT
        order[i] = i
        sales_out[i] = 0.0
    for a in range(1, n):  # insertion sort by (price, index)
        j = order[a]
        b = a - 1
        while b >= 0 and prices[order[b]] > prices[j]:
            order[b + 1] = order[b]
            b -= 1
        order[b + 1] = j
    done = 0.0
    start = 0
    while start < n:
        p = prices[order[start]]
        stop = start + 1
        while stop < n and prices[order[stop]] == p:
            stop += 1
        level_cap = 0.0
        for t in range(start, stop):
            level_cap += capacity[order[t]]
        D = _quantity(p, demand_code, reservation_price, market_size)
        if rationing_code == 0:
            demand = D - done
        else:
            demand = (1.0 - done) * D
        if demand < 0.0:
            demand = 0.0
        sold = level_cap if level_cap < demand else demand
        _share(order, start, stop, sold, capacity, weights, sales_out)
        if rationing_code == 0:
            done += sold
        elif D > 0.0:
            done += sold / D
        start = stop
    for i in range(n):
        profits_out[i] = (prices[i] - cost) * sales_out[i]
    return STATUS_OK


def _share(order, start, stop, sold, capacity, weights, sales_out):
    """Share ``sold`` among the firms ``order[start:stop]`` by weight, capped at capacity."""
    rest = sold
    open_count = stop - start
    while open_count > 0:
        w = 0.0
        for t in range(start, stop):
            i = order[t]
            if sales_out[i] < capacity[i]:
                w += weights[i]
        capped = False
        for t in range(start, stop):
            i = order[t]
            if sales_out[i] < capacity[i] and rest * weights[i] / w >= capacity[i]:
                rest -= capacity[i]
                sales_out[i] = capacity[i]
                open_count -= 1
                capped = True
        if not capped:
            for t in range(start, stop):
                i = order[t]
                if sales_out[i] < capacity[i]:
                    sales_out[i] = rest * weights[i] / w
            return
