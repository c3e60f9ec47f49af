"""Price competition with differentiated linear demand: the solvers behind
:class:`sim.models.differentiated.DifferentiatedDemandSpec`.

Direct demand respects ``q >= 0``, so a firm's profit is piecewise quadratic in its own price: a
product priced at or above its choke price sells nothing and drops out of the others' demand. On a
fixed set S of products with positive demand (k of them), ``q_S = (d_S - g/(1 + (k-1) g) sum_S d) /
(b (1-g))`` with ``d = a - p``; everything here works piece by piece on such sets.
"""

from __future__ import annotations

import numpy as np

__all__ = ["bertrand_multi_response", "interior_nash", "sweep_price"]


def bertrand_multi_response(ms, i: int, own: np.ndarray, row: np.ndarray) -> np.ndarray:
    """Prices of a multi-product firm under differentiated linear demand.

    On a fixed set S of products with positive demand, ``q_S = M (a_S - p_S)`` with ``M`` the inverse
    of ``b((1-g)I + g11')`` on S, the firm's profit is concave quadratic in its own prices and the
    first-order conditions give ``p_f = (a_f + c_f)/2 + M_ff^{-1} M_fr (a_r - p_r) / 2``. We iterate
    on S until it is consistent with the demand it produces and certify the candidate by an exact
    search over each own price (:func:`sweep_price`); if that finds a better price, coordinate ascent
    with the same exact searches takes over, and the closed form is tried again from where it stops.

    Parameters
    ----------
    ms : MarketSpec
    i : int
        The firm (0-based).
    own : ndarray of int
        Its products.
    row : ndarray of shape (n_products,)
        The rivals' prices (the firm's own entries are a starting point).

    Returns
    -------
    ndarray of shape (n_products,)
        ``row`` with the firm's products at its best response.
    """

    def firm_profit(P):
        return float(ms.firm_profits(np.atleast_2d(P))[0, i])

    start = row.copy()
    for _ in range(3):
        cand = _diff_bertrand_active_set(ms, own, start)
        if cand is not None and _sweep_certifies(ms, i, own, cand, firm_profit(cand)):
            return cand
        start = _coordinate_ascent(ms, i, own, start if cand is None else cand, firm_profit)
    return start


def _sweep_certifies(ms, i, own, p, base, rtol=1e-11) -> bool:
    for k in own:
        _, v = sweep_price(ms, i, int(k), p)
        if v > base + rtol * max(1.0, abs(base)):
            return False
    return True


def _coordinate_ascent(ms, i, own, p, firm_profit, max_sweeps=500):
    p = np.array(p, dtype=float)
    for _ in range(max_sweeps):
        before = firm_profit(p)
        for k in own:
            p[int(k)], _ = sweep_price(ms, i, int(k), p)
        if firm_profit(p) - before <= 1e-14 * max(1.0, abs(before)):
            break
    return p


def sweep_price(ms, firm: int, k: int, row: np.ndarray) -> tuple[float, float]:
    """Exact maximum of firm ``firm``'s profit over the price of its product ``k`` (the other prices
    fixed), under differentiated linear demand.

    Raising ``p_k`` from ``c_k`` lowers product k's demand and raises every rival product's; inactive
    products enter at kinks where their price reaches their choke price, and product k leaves at its
    own choke price. Between kinks all demands are linear in ``p_k`` (closed form on the active set),
    so the firm's profit is a concave quadratic there; we walk the pieces and take the best vertex or
    endpoint.

    Parameters
    ----------
    ms : MarketSpec
    firm : int
        The firm whose profit counts (it may sell other products too).
    k : int
        The product whose price moves.
    row : ndarray of shape (n_products,)
        The other prices.

    Returns
    -------
    price, profit : float
        The best price of product ``k`` and the firm's profit there.
    """
    d = ms.demand
    b, g = d.scalars[0], d.scalars[1]
    a = d.vector
    c = ms.cost
    own_mask = ms.owner == firm
    p = np.array(row, dtype=float)
    p[k] = c[k]
    q = d.direct_demand(p[None, :])[0]
    S = q > 0
    if not S[k]:
        return float(c[k]), float(ms.firm_profits(p[None, :])[0, firm])
    best_p, best_v = float(c[k]), -np.inf
    scale = max(1.0, float(np.abs(a).max()))
    for _ in range(ms.n_products + 2):
        idx = np.flatnonzero(S)
        n_s = idx.size
        theta = g / (1 + (n_s - 1) * g)
        inv = 1.0 / (b * (1 - g))
        # derivatives of active quantities with respect to p_k, and the demand at the piece start
        dq = np.zeros(ms.n_products)
        dq[idx] = theta * inv
        dq[k] = -(1 - theta) * inv
        d_act = a[idx] - p[idx]
        q = np.zeros(ms.n_products)
        q[idx] = (d_act - theta * d_act.sum()) * inv
        p0 = p[k]
        # end of the piece: product k's exit, or the first entry of an inactive product
        entering = _entries(p, a, b, g, q, dq, S, p0)
        ends = [p0 + q[k] / -dq[k], *(t for t, _ in entering)]
        p1 = min(ends)
        # profit on the piece: sum over own active products of (p_l - c_l)(q_l + dq_l (x - p0))
        m = own_mask & S
        m_other = m.copy()
        m_other[k] = False
        lin = q[k] + float(((p[m_other] - c[m_other]) * dq[m_other]).sum())
        # d/dx [(x - c_k)(q_k + dq_k (x - p0))] + lin-part = 0
        x_star = (dq[k] * (p0 + c[k]) - lin) / (2 * dq[k]) if dq[k] != 0 else p1
        for x in (p0, min(max(x_star, p0), p1), p1):
            qq = q + dq * (x - p0)
            val = (x - c[k]) * qq[k] + float(((p[m_other] - c[m_other]) * qq[m_other]).sum())
            if val > best_v:
                best_p, best_v = float(x), float(val)
        if p1 == ends[0] or not entering:
            break
        p[k] = p1
        for t, j in entering:
            if t <= p1 + 1e-15 * scale:
                S[j] = True
    # the value of the firm's products outside S (zero demand) does not change; evaluate exactly
    p[k] = best_p
    return best_p, float(ms.firm_profits(p[None, :])[0, firm])


def _entries(p, a, b, g, q, dq, S, p0) -> list:
    """(price of product ``k``, product) at which each inactive product starts selling along the piece."""
    entering = []
    if g > 0:
        tot = q.sum()
        dtot = dq.sum()
        for j in np.flatnonzero(~S):
            w = p[j] - a[j] + b * g * tot  # >= 0 while j sells nothing
            dw = b * g * dtot
            if dw < 0:
                with np.errstate(over="ignore"):  # a vanishing g: the product enters beyond any price (inf)
                    entering.append((p0 + w / -dw, j))
    return entering


def _diff_bertrand_active_set(ms, own, row):
    """Iterate the stationary prices of products ``own`` over active sets until the set is
    consistent with the demand it produces; None if it does not settle."""
    S = np.ones(ms.n_products, bool)
    for _ in range(2 * ms.n_products + 2):
        trial = _diff_bertrand_firm_candidate(ms, own, row, S)
        S_new = ms.demand.direct_demand(trial[None, :])[0] > 0
        if np.array_equal(S_new, S):
            return trial
        S = S_new
    return None


def _diff_bertrand_firm_candidate(ms, own, row, S):
    """Stationary prices of the firm's products that sell on the active set S; its products outside
    S are priced at their choke price (they sell nothing and do not affect the others)."""
    d = ms.demand
    b, g = d.scalars[0], d.scalars[1]
    out = row.copy()
    own_set = set(own.tolist())
    act = np.array([k for k in own if S[k]], dtype=int)
    idx = np.flatnonzero(S)
    if act.size:
        n_s = idx.size
        M = (np.eye(n_s) - g / (1 + (n_s - 1) * g) * np.ones((n_s, n_s))) / (b * (1 - g))
        pos = {k: j for j, k in enumerate(idx)}
        f_pos = np.array([pos[k] for k in act])
        r_pos = np.array([j for j in range(n_s) if idx[j] not in own_set], dtype=int)
        p_f = 0.5 * (d.vector[act] + ms.cost[act])
        if r_pos.size:
            r_idx = idx[r_pos]
            Mff = M[np.ix_(f_pos, f_pos)]
            p_f = p_f + 0.5 * np.linalg.solve(Mff, M[np.ix_(f_pos, r_pos)] @ (d.vector[r_idx] - row[r_idx]))
        out[act] = p_f
    idle = np.array([k for k in own if not S[k]], dtype=int)
    if idle.size:
        q = d.direct_demand(out[None, :])[0]
        q[idle] = 0.0
        out[idle] = np.maximum(ms.cost[idle], d.vector[idle] - b * g * q.sum())
    return out



def interior_nash(av, c, b, g, active):
    """Interior Bertrand equilibrium of the differentiated linear system on the active set.

    Direct demand on the active set S (k products): ``q_i = (d_i - g/(1+(k-1)g) sum_S d) / (b(1-g))``
    with ``d = a - p``. Each firm's first-order condition ``q_i + (p_i - c_i) dq_i/dp_i = 0`` is
    linear in prices; we solve the k x k system directly.

    Parameters
    ----------
    av : ndarray of shape (n_products,)
        Demand intercepts.
    c : ndarray of shape (n_products,)
        Marginal costs.
    b, g : float
        Slope and substitutability.
    active : ndarray of bool, shape (n_products,)
        The products assumed to sell.

    Returns
    -------
    ndarray of shape (n_products,)
        Equilibrium prices of the active products; the others at their intercepts.
    """
    idx = np.flatnonzero(active)
    k = idx.size
    theta = g / (1 + (k - 1) * g)
    # q_i = [ (a_i - p_i) - theta sum_j (a_j - p_j) ] / (b (1-g)); dq_i/dp_i = -(1 - theta)/(b(1-g))
    # FOC: (a_i - p_i) - theta sum_j (a_j - p_j) - (1 - theta)(p_i - c_i) = 0
    M = np.zeros((k, k))
    rhs = np.zeros(k)
    for r, i in enumerate(idx):
        M[r, :] = theta  # + theta p_j for all j (including i)
        M[r, r] += -1.0 - (1 - theta)
        rhs[r] = -(av[i] - theta * av[idx].sum() + (1 - theta) * c[i])
    p = np.linalg.solve(M, rhs)
    out = np.array(av, dtype=float)
    out[idx] = p
    return out

