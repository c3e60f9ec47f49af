"""Static solutions of the stage game.

* :func:`best_response` -- a firm's profit-maximising action against given rival actions.
* :func:`static_nash` -- the static Nash equilibrium: closed form where one exists, otherwise a
  best-response iteration that certifies its own convergence (every firm's global best response is
  checked at the end) and raises :class:`~sim.core.errors.SolverError` when it cannot.
* :func:`collusive_outcome` -- the outcome the firms agree on: the joint-profit maximum, the best
  symmetric outcome (a common quantity or price), quantities proportional to the static-Nash ones,
  or actions the user gives.
* :func:`best_deviation` -- each firm's best one-shot deviation against the others' agreed actions.
* :func:`minmax` -- each firm's minmax payoff (the least the rivals can hold it to).
* :func:`stage_game` -- all of the above in one object, the input of :mod:`sim.theory.thresholds`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from sim.core.errors import InputError, SolverError
from sim.models.demand import direct_demand, logit_outside_share, logit_share_complement
from sim.models.market import MarketSpec

__all__ = [
    "AGREEMENTS",
    "Outcome",
    "StageGame",
    "best_deviation",
    "best_response",
    "collusive_outcome",
    "minmax",
    "stage_game",
    "static_nash",
]

AGREEMENTS = ("joint", "symmetric", "proportional", "given")


@dataclass(frozen=True)
class Outcome:
    """One action profile with what it produces.

    Attributes
    ----------
    actions, quantities, prices, profits : ndarray of shape (n_products,)
        Per product (one product per firm unless the market has multi-product firms).
    firm_profits : ndarray of shape (n_firms,)
    """

    actions: np.ndarray
    quantities: np.ndarray
    prices: np.ndarray
    profits: np.ndarray
    firm_profits: np.ndarray

    @property
    def joint_profit(self) -> float:
        return float(self.profits.sum())

    def to_dict(self) -> dict:
        keys = ("actions", "quantities", "prices", "profits", "firm_profits")
        return {k: getattr(self, k).tolist() for k in keys}


def _spec(market) -> MarketSpec:
    return market if isinstance(market, MarketSpec) else market.spec()


def outcome_of(ms: MarketSpec, actions) -> Outcome:
    a = np.asarray(actions, dtype=float)
    q, p, pi = ms.evaluate(a)
    return Outcome(a.copy(), q, p, pi, ms.firm_sum(pi))


# --------------------------------------------------------------------------------------------------
# Scalar maximisation used by every numeric best response
# --------------------------------------------------------------------------------------------------


def _maximize_scalar(f, lo: float, hi: float, n_grid: int = 65, xtol: float = 1e-13):
    """Global maximum of a scalar function on ``[lo, hi]``: a grid, then Brent's bounded search
    between the neighbours of the best grid point. ``f`` takes an array and returns an array."""
    if hi <= lo:
        return lo, float(f(np.array([lo]))[0])
    x = np.linspace(lo, hi, n_grid)
    y = f(x)
    k = int(np.argmax(y))
    a, b = x[max(k - 1, 0)], x[min(k + 1, n_grid - 1)]
    res = optimize.minimize_scalar(
        lambda t: -f(np.array([t]))[0], bounds=(a, b), method="bounded",
        options={"xatol": xtol * max(1.0, abs(hi)), "maxiter": 500},
    )
    if -res.fun >= y[k]:
        return float(res.x), float(-res.fun)
    return float(x[k]), float(y[k])


# --------------------------------------------------------------------------------------------------
# Best responses
# --------------------------------------------------------------------------------------------------


def best_response(market, i: int, actions) -> tuple[np.ndarray, np.ndarray]:
    """Firm ``i``'s best response to its rivals' actions in each profile.

    Parameters
    ----------
    market : Market or MarketSpec
    i : int
        Index (0-based) of the responding firm.
    actions : array_like of shape (..., n_products)
        Profiles; the entries of firm ``i``'s products are ignored.

    Returns
    -------
    profiles : ndarray of shape (..., n_products)
        The profiles with firm ``i``'s products set to its best response.
    profits : ndarray of shape (...,)
        Firm ``i``'s profit. For homogeneous Bertrand with continuous prices this is the supremum
        reached by undercutting by an arbitrarily small amount (see :mod:`sim.models.market`).
    """
    ms = _spec(market)
    a = np.array(actions, dtype=float)
    shape = a.shape[:-1]
    A = a.reshape(-1, ms.n_products)
    own = ms.products_of(i)
    out = A.copy()
    if own.size == 1:
        x, v = _br_single(ms, int(own[0]), A)
        out[:, own[0]] = x
    else:
        v = np.empty(A.shape[0])
        for r, row in enumerate(A):
            out[r], v[r] = _br_multi(ms, i, own, row)
    return out.reshape(a.shape), v.reshape(shape)


def _br_single(ms: MarketSpec, i: int, A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Best response of single product ``i`` (its owner sells nothing else) in each row of ``A``."""
    kind = ms.demand.kind
    if ms.homogeneous_bertrand:
        x, v = _br_homogeneous_bertrand(ms, i, A)
    elif kind == "linear":
        a0, b = ms.demand.scalars[0], ms.demand.scalars[1]
        rest = A.sum(axis=1) - A[:, i]
        rest = np.clip(rest, 0, None)
        x = np.clip((a0 - ms.cost[i] - b * rest) / (2 * b), 0.0, ms.capacity[i])
        v = _profit_i(ms, i, A, x)
    elif kind == "differentiated" and ms.quantity_setting:
        b, g = ms.demand.scalars[0], ms.demand.scalars[1]
        rest = np.clip(A, 0, ms.capacity).sum(axis=1) - np.clip(A[:, i], 0, ms.capacity[i])
        x = np.clip((ms.demand.vector[i] - ms.cost[i] - b * g * rest) / (2 * b), 0.0, ms.capacity[i])
        v = _profit_i(ms, i, A, x)
    elif kind == "isoelastic":
        x = np.array([_br_isoelastic(ms, i, row) for row in A])
        v = _profit_i(ms, i, A, x)
    elif kind == "logit":
        x = np.array([_br_logit(ms, i, row) for row in A])
        v = _profit_i(ms, i, A, x)
    else:  # differentiated Bertrand: piecewise-quadratic profit, maximised exactly piece by piece
        x = np.empty(A.shape[0])
        v = np.empty(A.shape[0])
        firm = int(ms.owner[i])
        for r, row in enumerate(A):
            x[r], _ = _sweep_price(ms, firm, i, row)
            prof = row.copy()
            prof[i] = x[r]
            v[r] = float(ms.profits(prof[None, :])[0, i])
    return x, v


def _br_multi(ms: MarketSpec, i: int, own: np.ndarray, row: np.ndarray) -> tuple[np.ndarray, float]:
    """Best response of multi-product firm ``i`` (products ``own``) setting its actions jointly."""
    kind = ms.demand.kind
    if kind == "logit":
        prof = _br_logit_multi(ms, own, row)
    elif ms.quantity_setting:  # differentiated Cournot
        prof = _br_diff_cournot_multi(ms, own, row)
    else:
        prof = _br_diff_bertrand_multi(ms, i, own, row)
    return prof, float(ms.firm_profits(prof[None, :])[0, i])


def _br_logit_multi(ms: MarketSpec, own: np.ndarray, row: np.ndarray) -> np.ndarray:
    """A multi-product logit firm sets one common markup m on its products, solving
    ``m = mu / (1 - S_f)`` with ``S_f`` the firm's total share (Anderson, de Palma and Thisse,
    1992, "Discrete Choice Theory of Product Differentiation", ch. 7); the root is unique because
    ``S_f`` falls as ``m`` rises."""
    mu = ms.demand.scalars[1]
    c = ms.cost[own]

    def prof_at(m):
        p = row.copy()
        p[own] = c + m
        return p

    def h(m):
        return m - mu / logit_share_complement(ms.demand, prof_at(m), own)

    hi = mu / logit_share_complement(ms.demand, prof_at(0.0), own)
    m = hi if h(hi) <= 0 else optimize.brentq(h, 0.0, hi, xtol=1e-15 * max(1.0, mu), rtol=1e-15, maxiter=1000)
    return prof_at(m)


def _br_diff_cournot_multi(ms: MarketSpec, own: np.ndarray, row: np.ndarray) -> np.ndarray:
    """Quantities of a multi-product firm under differentiated linear demand: a concave quadratic
    programme in its own quantities (first-order conditions
    ``a_k - c_k - b((1-g) q_k + g Q) - b((1-g) q_k + g Q_f) = 0``) over ``[0, capacity]``, solved
    exactly as bounded least squares."""
    d = ms.demand
    b, g = d.scalars[0], d.scalars[1]
    k = own.size
    rivals = np.clip(np.delete(row, own), 0, np.delete(ms.capacity, own)).sum()
    H = 2 * b * ((1 - g) * np.eye(k) + g * np.ones((k, k)))
    r = d.vector[own] - ms.cost[own] - b * g * rivals
    q = _box_qp(H, r, ms.capacity[own])
    out = row.copy()
    out[own] = q
    return out


def _box_qp(H: np.ndarray, r: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """Maximise ``r'q - q'Hq/2`` over ``0 <= q <= upper`` for positive definite ``H``: rewritten as
    bounded least squares and solved exactly by the bounded-variable least-squares method (Stark and
    Parker, 1995) in :func:`scipy.optimize.lsq_linear`."""
    L = np.linalg.cholesky(H)
    rhs = np.linalg.solve(L, r)
    res = optimize.lsq_linear(L.T, rhs, bounds=(np.zeros(r.size), upper), method="bvls", tol=1e-15)
    q = np.clip(res.x, 0, upper)
    q[q < 1e-12 * max(1.0, float(q.max()))] = 0.0
    return q


def _br_diff_bertrand_multi(ms: MarketSpec, i: int, own: np.ndarray, row: np.ndarray) -> np.ndarray:
    """Prices of a multi-product firm under differentiated linear demand.

    On a fixed set S of products with positive demand, ``q_S = M (a_S - p_S)`` with ``M`` the inverse
    of ``b((1-g)I + g11')`` on S, the firm's profit is concave quadratic in its own prices and the
    first-order conditions give ``p_f = (a_f + c_f)/2 + M_ff^{-1} M_fr (a_r - p_r) / 2``. We iterate
    on S until it is consistent with the demand it produces and certify the candidate by an exact
    search over each own price (:func:`_sweep_price`); if that finds a better price, coordinate ascent
    with the same exact searches takes over, and the closed form is tried again from where it stops."""

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
        _, v = _sweep_price(ms, i, int(k), p)
        if v > base + rtol * max(1.0, abs(base)):
            return False
    return True


def _coordinate_ascent(ms, i, own, p, firm_profit, max_sweeps=500):
    p = np.array(p, dtype=float)
    for _ in range(max_sweeps):
        before = firm_profit(p)
        for k in own:
            p[int(k)], _ = _sweep_price(ms, i, int(k), p)
        if firm_profit(p) - before <= 1e-14 * max(1.0, abs(before)):
            break
    return p


def _sweep_price(ms: MarketSpec, firm: int, k: int, row: np.ndarray) -> tuple[float, float]:
    """Exact maximum of firm ``firm``'s profit over the price of its product ``k`` (the other prices
    fixed), under differentiated linear demand.

    Raising ``p_k`` from ``c_k`` lowers product k's demand and raises every rival product's; inactive
    products enter at kinks where their price reaches their choke price, and product k leaves at its
    own choke price. Between kinks all demands are linear in ``p_k`` (closed form on the active set),
    so the firm's profit is a concave quadratic there; we walk the pieces and take the best vertex or
    endpoint. Returns the price and the firm's profit."""
    d = ms.demand
    b, g = d.scalars[0], d.scalars[1]
    a = d.vector
    c = ms.cost
    own_mask = ms.owner == firm
    p = np.array(row, dtype=float)
    p[k] = c[k]
    q = direct_demand(d, p[None, :])[0]
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
        ends = [p0 + q[k] / -dq[k]]
        dtot = dq.sum()
        entering = []
        if g > 0:
            tot = q.sum()
            for j in np.flatnonzero(~S):
                w = p[j] - a[j] + b * g * tot  # >= 0 while j sells nothing
                dw = b * g * dtot
                if dw < 0:
                    t = p0 + w / -dw
                    ends.append(t)
                    entering.append((t, j))
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


def _diff_bertrand_active_set(ms, own, row):
    """Iterate the stationary prices of products ``own`` over active sets until the set is
    consistent with the demand it produces; None if it does not settle."""
    S = np.ones(ms.n_products, bool)
    for _ in range(2 * ms.n_products + 2):
        trial = _diff_bertrand_firm_candidate(ms, own, row, S)
        S_new = direct_demand(ms.demand, trial[None, :])[0] > 0
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
        q = direct_demand(d, out[None, :])[0]
        q[idle] = 0.0
        out[idle] = np.maximum(ms.cost[idle], d.vector[idle] - b * g * q.sum())
    return out


def _profit_i(ms: MarketSpec, i: int, A: np.ndarray, x: np.ndarray) -> np.ndarray:
    B = A.copy()
    B[:, i] = x
    return ms.profits(B)[:, i]


def _br_isoelastic(ms: MarketSpec, i: int, row: np.ndarray) -> float:
    A, eps = ms.demand.scalars[0], ms.demand.scalars[1]
    c = ms.cost[i]
    R = float(np.clip(row, 0, ms.capacity).sum() - min(max(row[i], 0.0), ms.capacity[i]))
    if R <= 0:
        q = (A * (1 - 1 / eps) / c) ** eps
        return float(min(q, ms.capacity[i]))
    if A * R ** (-1 / eps) <= c:
        return 0.0

    def g(q):
        Q = q + R
        return A * Q ** (-1 / eps) * (1 - q / (eps * Q)) - c

    hi = (A / c) ** eps - R
    if hi <= 0.0 or g(hi) >= 0.0:
        # the rivals' output already drives the price to the firm's cost (to rounding): it sells nothing
        return 0.0
    q = optimize.brentq(g, 0.0, hi, xtol=1e-15 * max(1.0, hi), rtol=1e-15, maxiter=500)
    return float(min(q, ms.capacity[i]))


def _br_logit(ms: MarketSpec, i: int, row: np.ndarray) -> float:
    """The first-order condition ``p - c = mu / (1 - s_i(p))`` has a unique root because ``s_i``
    falls in ``p``; ``1 - s_i`` is computed directly as the share of the other options, so that a
    dominant product does not lose it to cancellation."""
    mu = ms.demand.scalars[1]
    c = ms.cost[i]
    prof = row.copy()

    def rest(p):
        prof[i] = p
        return logit_share_complement(ms.demand, prof, [i])

    def h(p):
        return p - c - mu / rest(p)

    hi = c + mu / rest(c)
    if h(hi) <= 0:
        return hi
    # the bracket can be astronomically wide for a dominant product: tolerances relative to the cost
    # and mu, not to the bracket
    return float(optimize.brentq(h, c, hi, xtol=1e-15 * max(1.0, c, mu), rtol=1e-15, maxiter=1000))


def _br_homogeneous_bertrand(ms: MarketSpec, i: int, A: np.ndarray):
    """Best response in homogeneous Bertrand: the monopoly price if it undercuts every rival;
    otherwise undercut the lowest rival price by one step or tie with it, whichever pays more; price
    at cost (selling nothing) when the rivals are at or below cost."""
    a0, b = ms.demand.scalars[0], ms.demand.scalars[1]
    c = ms.cost[i]
    step = ms.price_step
    w = ms.demand.vector
    rivals = np.delete(A, i, axis=1)
    w_rivals = np.delete(w, i)
    r = rivals.min(axis=1)
    pm = 0.5 * (a0 + c)
    D = lambda p: max(0.0, (a0 - p) / b)  # noqa: E731
    x = np.empty(A.shape[0])
    v = np.empty(A.shape[0])
    for k, rk in enumerate(r):
        if pm < rk:
            x[k], v[k] = pm, (pm - c) * D(pm)
        elif rk > c:
            under = rk - step
            v_under = (under - c) * D(under) if under > c else 0.0
            tied = rivals[k] == rk
            v_tie = (rk - c) * D(rk) * w[i] / (w[i] + w_rivals[tied].sum())
            if v_under >= v_tie:
                x[k], v[k] = under, v_under
            else:
                x[k], v[k] = rk, v_tie
        else:
            x[k], v[k] = c, 0.0
    return x, v


# --------------------------------------------------------------------------------------------------
# Static Nash equilibrium
# --------------------------------------------------------------------------------------------------


def static_nash(market, tol: float = 1e-13, max_iter: int = 20_000) -> Outcome:
    """The static (one-shot) Nash equilibrium of the stage game.

    Closed forms are used for homogeneous Bertrand, linear and differentiated Cournot without
    binding capacities, differentiated Bertrand with every firm active, and isoelastic Cournot
    without capacities. Otherwise (and to certify the closed forms' assumptions), a Gauss-Seidel
    best-response iteration runs from the closed-form or a neutral start until no action moves by
    more than ``tol`` (relative); a damped iteration is tried if it does not settle. The result is
    certified by checking that no firm's global best response improves its profit by more than a
    relative ``1e-9``; otherwise :class:`~sim.core.errors.SolverError` is raised.

    Returns
    -------
    Outcome
    """
    ms = _spec(market)
    if "nash" in ms._cache:
        return ms._cache["nash"]
    if ms.homogeneous_bertrand:
        out = _nash_homogeneous_bertrand(ms)
        ms._cache["nash"] = out
        return out
    start = _nash_candidate(ms)
    if _is_fixed_point(ms, start):
        try:
            _certify(ms, start, "static Nash")
        except SolverError:
            pass
        else:
            out = outcome_of(ms, start)
            ms._cache["nash"] = out
            return out
    a = _gauss_seidel(ms, start, tol, max_iter, damping=1.0)
    if a is None:
        a = _gauss_seidel(ms, start, tol, max_iter, damping=0.5)
    if a is None:
        raise SolverError(
            f"static Nash: best-response iteration did not settle within {max_iter} sweeps "
            f"(market {ms.demand.kind} {ms.model}, {ms.n_firms} firms)"
        )
    _certify(ms, a, "static Nash")
    out = outcome_of(ms, a)
    ms._cache["nash"] = out
    return out


def _is_fixed_point(ms: MarketSpec, a: np.ndarray, rtol: float = 1e-10) -> bool:
    scale = max(1.0, float(np.abs(a).max()))
    for i in range(ms.n_firms):
        prof, _ = best_response(ms, i, a[None, :])
        if np.abs(prof[0] - a).max() > rtol * scale:
            return False
    return True


def _gauss_seidel(ms, start, tol, max_iter, damping):
    a = np.array(start, dtype=float)
    scale = max(1.0, float(np.abs(a).max()))
    for _ in range(max_iter):
        biggest = 0.0
        for i in range(ms.n_firms):
            prof, _ = best_response(ms, i, a[None, :])
            new = (1 - damping) * a + damping * prof[0]
            biggest = max(biggest, float(np.abs(new - a).max()))
            a = new
        if biggest <= tol * scale:
            return a
    return None


def _certify(ms: MarketSpec, a: np.ndarray, what: str, rtol: float = 1e-9) -> None:
    """Raise SolverError unless no firm can gain more than ``rtol`` (relative) by deviating: each
    firm's best response is compared with, and each of its products is also searched on a fine grid
    (which guards against a closed form used outside its domain)."""
    pi = ms.firm_profits(a[None, :])[0]
    _, hi = ms.action_bounds()
    scale = max(1e-12, float(np.abs(pi).max()))
    for i in range(ms.n_firms):
        _, v = best_response(ms, i, a[None, :])
        best = float(v[0])
        for k in ms.products_of(i):
            def f(t, i=i, k=k):
                prof = np.repeat(a[None, :], t.size, axis=0)
                prof[:, k] = t
                return ms.firm_profits(prof)[:, i]
            best = max(best, _maximize_scalar(f, 0.0, hi[k], n_grid=257)[1])
        if best - pi[i] > rtol * scale:
            raise SolverError(
                f"{what}: firm {i + 1} can gain {best - pi[i]:.3g} by deviating; the solution is not certified"
            )


def _nash_candidate(ms: MarketSpec) -> np.ndarray:
    """Closed-form equilibrium of single-product firms (exits handled by shrinking the active set).
    With multi-product firms it only starts the best-response iteration."""
    n, c, d = ms.n_products, ms.cost, ms.demand
    if d.kind == "linear":  # homogeneous Cournot, with exits
        a0, b = d.scalars[0], d.scalars[1]
        active = np.ones(n, bool)
        for _ in range(n):
            k = active.sum()
            q = np.where(active, (a0 - (k + 1) * c + c[active].sum()) / ((k + 1) * b), 0.0)
            if (q[active] > 0).all():
                break
            active &= q > 0
        return np.clip(q, 0, ms.capacity)
    if d.kind == "differentiated":
        b, g = d.scalars[0], d.scalars[1]
        av = d.vector
        active = np.ones(n, bool)
        for _ in range(n):
            k = active.sum()
            if ms.quantity_setting:
                # (2 - g) q_i + g Q = (a_i - c_i) / b on the active set
                r = (av - c) / b
                Q = r[active].sum() / (2 - g + g * k)
                x = np.where(active, (r - g * Q) / (2 - g), 0.0)
                ok = x > 0
            else:
                x = _diff_bertrand_interior_nash(av, c, b, g, active)
                q = direct_demand(d, x[None, :])[0]
                ok = q > 0
            if ok[active].all():
                break
            active &= ok
        if ms.quantity_setting:
            return np.clip(x, 0, ms.capacity)
        return np.where(active, x, np.maximum(c, x))
    if d.kind == "isoelastic":
        A, eps = d.scalars[0], d.scalars[1]
        active = np.ones(n, bool)
        for _ in range(n):
            k = active.sum()
            P = c[active].sum() / (k - 1 / eps)
            s = np.where(active, eps * (1 - c / P), 0.0)
            if (s[active] > 0).all():
                break
            active &= s > 0
        Q = (A / P) ** eps
        return np.clip(s * Q, 0, ms.capacity)
    if d.kind == "logit":
        mu = d.scalars[1]
        return c + mu * (1.0 + 1.0 / n)
    raise ValueError(d.kind)  # pragma: no cover


def _diff_bertrand_interior_nash(av, c, b, g, active):
    """Interior Bertrand equilibrium of the differentiated linear system on the active set.

    Direct demand on the active set S (k products): ``q_i = (d_i - g/(1+(k-1)g) sum_S d) / (b(1-g))``
    with ``d = a - p``. Each firm's first-order condition ``q_i + (p_i - c_i) dq_i/dp_i = 0`` is
    linear in prices; we solve the k x k system directly.
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


def _nash_homogeneous_bertrand(ms: MarketSpec) -> Outcome:
    """Static equilibrium of homogeneous Bertrand (the selection is documented in :mod:`sim.models.market`)."""
    a0 = ms.demand.scalars[0]
    c = ms.cost
    order = np.argsort(c, kind="stable")
    c1, c2 = c[order[0]], c[order[1]]
    prices = c.copy()
    if c1 < c2:
        winner = order[0]
        pm = 0.5 * (a0 + c1)
        under = c2 - ms.price_step
        if pm < c2:
            prices[winner] = min(pm, under) if under > c1 else pm
        elif under > c1:
            prices[winner] = under
        else:  # one step below the rival's cost is at or below the own cost: tie at c2
            prices[winner] = c2
    return outcome_of(ms, prices)


# --------------------------------------------------------------------------------------------------
# Collusive outcomes
# --------------------------------------------------------------------------------------------------


def collusive_outcome(market, agreement: str = "joint", actions=None) -> Outcome:
    """The outcome the firms agree to sustain.

    Parameters
    ----------
    market : Market or MarketSpec
    agreement : {"joint", "symmetric", "proportional", "given"}
        ``joint``: maximise the sum of profits. ``symmetric``: maximise the sum of profits over a
        common quantity (Cournot) or a common price (Bertrand), each firm's quantity capped at its
        capacity. ``proportional``: quantities proportional to the static-Nash quantities (a common
        scale factor, prices from inverse demand under Bertrand; Schmalensee, 1987, "Competitive
        advantage and collusive optima"), scale chosen to maximise the sum of profits. ``given``: the
        action vector ``actions``.
    actions : array_like of shape (n_products,), optional
        Required with ``agreement="given"``.
    """
    ms = _spec(market)
    if agreement not in AGREEMENTS:
        raise InputError("collusion.agreement", f"must be one of {', '.join(map(repr, AGREEMENTS))}, got {agreement!r}")
    if agreement == "given":
        if actions is None:
            raise InputError("collusion.actions", "an action per firm is needed with agreement = 'given'")
        a = np.asarray(actions, dtype=float)
        if a.shape != (ms.n_products,) or not np.all(np.isfinite(a)):
            raise InputError(
                "collusion.actions", f"must have one finite value per product ({ms.n_products}), got {actions!r}"
            )
        if np.any(a < 0):
            raise InputError("collusion.actions", f"actions must be >= 0, got {a.tolist()}")
        if ms.quantity_setting and np.any(a > ms.capacity):
            raise InputError("collusion.actions", "a quantity exceeds its firm's capacity")
        return outcome_of(ms, a)
    if actions is not None:
        raise InputError("collusion.actions", f"only used with agreement = 'given', not {agreement!r}")
    key = f"collusive:{agreement}"
    if key in ms._cache:
        return ms._cache[key]
    if agreement == "joint":
        a = _joint_maximum(ms)
    elif agreement == "symmetric":
        a = _symmetric_maximum(ms)
    else:
        a = _proportional_maximum(ms)
    out = outcome_of(ms, a)
    ms._cache[key] = out
    return out


def _joint(ms, A):
    return ms.profits(A).sum(axis=-1)


def _merit_order_quantities(ms: MarketSpec) -> np.ndarray:
    """Joint-profit maximum for a homogeneous good under quantity competition.

    The cartel produces total Q where marginal revenue meets the merit-order marginal cost (cheapest
    capacity first, equal-cost firms sharing equally up to their capacities)."""
    d, c, cap = ms.demand, ms.cost, ms.capacity
    if d.kind == "linear":
        a0, b = d.scalars[0], d.scalars[1]
        mr = lambda Q: a0 - 2 * b * Q  # noqa: E731
        q_of_mr = lambda m: (a0 - m) / (2 * b)  # noqa: E731
    else:
        A, eps = d.scalars[0], d.scalars[1]
        mr = lambda Q: A * Q ** (-1 / eps) * (1 - 1 / eps) if Q > 0 else np.inf  # noqa: E731
        q_of_mr = lambda m: (A * (1 - 1 / eps) / m) ** eps  # noqa: E731
    levels = np.unique(c)
    q = np.zeros(ms.n_products)
    Q = 0.0
    for lev in levels:
        group = np.flatnonzero(c == lev)
        if mr(Q) <= lev:
            break
        target = q_of_mr(lev)  # total output where MR equals this cost level
        room = cap[group].sum()
        add = min(target - Q, room)
        _waterfill(q, group, cap, add)
        Q += add
        if add < room:
            break
    return q


def _waterfill(q, group, cap, amount):
    """Share ``amount`` equally among ``group``, respecting capacities."""
    left = list(group)
    while amount > 1e-300 and left:
        each = amount / len(left)
        full = [j for j in left if cap[j] - q[j] <= each]
        if not full:
            for j in left:
                q[j] += each
            return
        for j in full:
            amount -= cap[j] - q[j]
            q[j] = cap[j]
            left.remove(j)


def _joint_maximum(ms: MarketSpec) -> np.ndarray:
    d, c = ms.demand, ms.cost
    if ms.homogeneous_bertrand:
        a0 = d.scalars[0]
        cmin = c.min()
        pm = 0.5 * (a0 + cmin)
        # firms with higher costs price at the choke price and sell nothing
        return np.where(c == cmin, pm, a0)
    if d.kind in ("linear", "isoelastic"):
        return _merit_order_quantities(ms)
    if d.kind == "logit":
        # multi-product logit monopolist: equal markups m solving m * s_0(m) = mu
        mu = d.scalars[1]
        f = lambda m: m * logit_outside_share(d, (c + m)[None, :])[0] - mu  # noqa: E731
        hi = mu
        while f(hi) < 0:
            hi *= 2
        m = optimize.brentq(f, 0.0, hi, xtol=1e-15, rtol=1e-15, maxiter=500)
        return c + m
    # differentiated linear: concave quadratic in quantities, box [0, cap]
    return _actions_for_quantities(ms, _diff_joint_quantities(ms))


def _diff_joint_quantities(ms: MarketSpec) -> np.ndarray:
    """Joint-profit quantities of the differentiated linear system: a concave quadratic programme
    ``max (a - c).q - (1/2) q'Hq`` with ``H = 2b((1-g)I + g11')`` over the box ``[0, capacity]``.

    With ``g < 1`` the Hessian is positive definite and the programme is rewritten as a bounded
    least-squares problem solved exactly by the bounded-variable least-squares active-set method
    (Stark and Parker, 1995) of :func:`scipy.optimize.lsq_linear`."""
    d, c = ms.demand, ms.cost
    b, g = d.scalars[0], d.scalars[1]
    n = ms.n_products
    cap = ms.capacity if ms.quantity_setting else np.full(n, np.inf)
    H = 2 * b * ((1 - g) * np.eye(n) + g * np.ones((n, n)))
    r = d.vector - c
    if g < 1:
        L = np.linalg.cholesky(H)  # H = L L'
        rhs = np.linalg.solve(L, r)  # 0.5 q'Hq - r'q = 0.5 |L'q - L^-1 r|^2 + const
        res = optimize.lsq_linear(L.T, rhs, bounds=(np.zeros(n), cap), method="bvls", tol=1e-15)
        q = np.clip(res.x, 0, cap)
        q[q < 1e-12 * max(1.0, float(q.max()))] = 0.0  # round-off at the zero bound
        return q
    res = optimize.minimize(
        lambda q: (0.5 * q @ H @ q - r @ q, H @ q - r), np.zeros(n), jac=True, method="L-BFGS-B",
        bounds=[(0, cap[j] if np.isfinite(cap[j]) else None) for j in range(n)],
        options={"ftol": 1e-16, "gtol": 1e-14, "maxiter": 10_000},
    )
    return np.clip(res.x, 0, cap)


def _common_level(ms: MarketSpec, x: np.ndarray) -> np.ndarray:
    """Profiles in which every firm plays the common level x (quantities capped at capacity)."""
    A = np.repeat(np.asarray(x, float)[:, None], ms.n_products, axis=1)
    if ms.quantity_setting:
        A = np.minimum(A, ms.capacity)
    return A


def _symmetric_maximum(ms: MarketSpec) -> np.ndarray:
    if ms.homogeneous_bertrand:
        # a common price p shared by the split weights: joint profit (p - c_w) D(p), with c_w the
        # weighted mean cost, is maximal at p = (a + c_w) / 2
        w = ms.demand.vector
        return np.full(ms.n_products, 0.5 * (ms.demand.scalars[0] + float(w @ ms.cost / w.sum())))
    _lo, hi = ms.action_bounds()
    if ms.quantity_setting:
        lo_, hi_ = 0.0, float(hi.max())
    else:
        lo_, hi_ = float(ms.cost.min()), float(hi.max())

    def slope(x):
        g = _joint_gradient(ms, _common_level(ms, np.array([x]))[0])
        if ms.quantity_setting:
            g = np.where(x < ms.capacity, g, 0.0)
        return float(g.sum())

    f = lambda t: _joint(ms, _common_level(ms, t))  # noqa: E731
    x, _ = _maximize_scalar(f, lo_, hi_, n_grid=401)
    x = _polish_maximum(f, slope, x, lo_, hi_)
    return _common_level(ms, np.array([x]))[0]


def _proportional_maximum(ms: MarketSpec) -> np.ndarray:
    if ms.homogeneous_bertrand:
        raise InputError(
            "collusion.agreement",
            "'proportional' needs per-product demand; with homogeneous Bertrand write the agreed "
            "shares as the demand's split weights and use 'joint' or 'symmetric'",
        )
    qn = static_nash(ms).quantities
    d = ms.demand
    if ms.quantity_setting:
        with np.errstate(divide="ignore"):
            room = np.where(qn > 0, ms.capacity / np.where(qn > 0, qn, 1.0), np.inf)
        lam_hi = min(1.0, float(room.min()))
    elif d.kind == "logit":
        lam_hi = min(1.0, (1.0 - 1e-12) * d.scalars[2] / qn.sum())
    else:
        lam_hi = 1.0

    def profile(lam: np.ndarray) -> np.ndarray:
        return _actions_for_quantities(ms, lam[:, None] * qn[None, :])

    def slope(lam):
        a = profile(np.array([lam]))[0]
        g = _joint_gradient(ms, a)
        if ms.quantity_setting:
            return float(g @ qn)
        if d.kind == "logit":  # p_i = a_i - a_0 - mu (log(lam s_i) - log(1 - lam S))
            S = qn.sum() / d.scalars[2]
            da = np.full(ms.n_products, -d.scalars[1] * (1.0 / lam + S / (1.0 - lam * S)))
            return float(g @ da)
        b, gg = d.scalars[0], d.scalars[1]
        return float(g @ (-b * ((1 - gg) * qn + gg * qn.sum())))

    f = lambda t: _joint(ms, profile(t))  # noqa: E731
    lam, _ = _maximize_scalar(f, 1e-9, lam_hi, n_grid=401)
    lam = _polish_maximum(f, slope, lam, 1e-9, lam_hi)
    return profile(np.array([lam]))[0]


def _polish_maximum(f, slope, x0: float, lo: float, hi: float) -> float:
    """Refine a maximiser found by bracketing search by solving the first-order condition
    ``slope(x) = 0`` with Brent's root finder on the analytic derivative: the bracketing search alone
    locates a smooth maximum only to about the square root of machine precision."""
    s0 = slope(x0)
    if s0 == 0:
        return x0
    step = 1e-7 * max(1.0, abs(x0))
    direction = 1.0 if s0 > 0 else -1.0
    a, b = x0, x0
    for _ in range(60):
        b = min(hi, max(lo, x0 + direction * step))
        if slope(b) * s0 <= 0 or b in (lo, hi):
            break
        step *= 2
    if slope(b) * s0 > 0:
        return x0
    lo_, hi_ = (a, b) if a < b else (b, a)
    try:
        x = optimize.brentq(slope, lo_, hi_, xtol=1e-15 * max(1.0, abs(x0)), rtol=1e-15, maxiter=500)
    except ValueError:
        return x0
    return float(x) if f(np.array([x]))[0] >= f(np.array([x0]))[0] - 1e-14 * max(1.0, abs(f(np.array([x0]))[0])) else x0


def _joint_gradient(ms: MarketSpec, a: np.ndarray) -> np.ndarray:
    """Gradient of total (joint) profit with respect to the actions at profile ``a``, shape
    (n_products,): quantities under Cournot (zero beyond capacity), prices under Bertrand."""
    d, c = ms.demand, ms.cost
    q, p, _ = ms.evaluate(a[None, :])
    q, p = q[0], p[0]
    if ms.quantity_setting:
        Q = q.sum()
        if d.kind == "linear":
            P = p[0]
            g = P - c - d.scalars[1] * Q if P > 0 else -c
        elif d.kind == "isoelastic":
            g = p[0] * (1 - 1 / d.scalars[1]) - c
        else:  # differentiated: dp_i/dq_k = -b((1-g) delta_ik + g) where p_i > 0
            b, gg = d.scalars[0], d.scalars[1]
            live = p > 0
            qs = np.where(live, q, 0.0)
            g = p - c - b * ((1 - gg) * qs + gg * qs.sum())
        return np.where(a < ms.capacity, g, 0.0)
    if d.kind == "logit":
        mu, size = d.scalars[1], d.scalars[2]
        s = q / size
        m = p - c
        return q - (m * q - s * float(m @ q)) / mu
    # differentiated Bertrand on the active set
    b, gg = d.scalars[0], d.scalars[1]
    S = q > 0
    idx = np.flatnonzero(S)
    out = np.zeros(ms.n_products)
    if idx.size:
        theta = gg / (1 + (idx.size - 1) * gg)
        m = (p - c)[idx]
        # M = (I - theta J) / (b (1 - g)) on S
        out[idx] = q[idx] - (m - theta * m.sum()) / (b * (1 - gg))
    return out


def _actions_for_quantities(ms: MarketSpec, q: np.ndarray) -> np.ndarray:
    """Actions that produce quantities ``q`` (shape (..., n)): the quantities themselves under
    Cournot, prices from inverse demand under Bertrand."""
    if ms.quantity_setting:
        return q
    d = ms.demand
    if d.kind == "logit":
        # inverse logit demand: p_i = a_i - a_0 - mu (log s_i - log s_0)
        a0, mu, size = d.scalars[0], d.scalars[1], d.scalars[2]
        s = q / size
        s0 = 1.0 - s.sum(axis=-1, keepdims=True)
        return d.vector - a0 - mu * (np.log(s) - np.log(s0))
    b, g = d.scalars[0], d.scalars[1]
    return d.vector - b * ((1 - g) * q + g * q.sum(axis=-1, keepdims=True))


# --------------------------------------------------------------------------------------------------
# Deviations and minmax
# --------------------------------------------------------------------------------------------------


def best_deviation(market, actions) -> tuple[np.ndarray, np.ndarray]:
    """Each firm's best one-shot deviation against the others' actions.

    Returns
    -------
    profiles : ndarray of shape (n_firms, n_products)
        Row i: the profile when firm i deviates and the others keep ``actions``.
    profits : ndarray of shape (n_firms,)
        The deviating firm's profit (a supremum for homogeneous Bertrand with continuous prices).
    """
    ms = _spec(market)
    a = np.asarray(actions, dtype=float)
    rows = np.empty((ms.n_firms, ms.n_products))
    dev_p = np.empty(ms.n_firms)
    own_profit = ms.firm_profits(a[None, :])[0]
    for i in range(ms.n_firms):
        prof, v = best_response(ms, i, a[None, :])
        rows[i], dev_p[i] = prof[0], v[0]
        # never report a deviation worse than complying (rounding at a best response)
        if not ms.homogeneous_bertrand and dev_p[i] < own_profit[i]:
            rows[i], dev_p[i] = a, own_profit[i]
    return rows, dev_p


def deviation_actions(ms: MarketSpec, profiles: np.ndarray) -> np.ndarray:
    """Per product, its action when its owner deviates: ``profiles[owner[k], k]``."""
    return profiles[ms.owner, np.arange(ms.n_products)]


def minmax(market) -> tuple[np.ndarray, np.ndarray]:
    """Each firm's minmax payoff: the rivals choose actions to minimise the firm's best-response
    profit. For every shipped demand system a firm's best-response profit falls as rivals produce
    more (Cournot) or price lower (Bertrand), so the rivals' minimising actions are their largest
    quantities (capacity, or enough to drive the price to zero) or a zero price.

    Returns
    -------
    profiles : ndarray of shape (n_firms, n_products)
        Row i: the profile that holds firm i down (its own products at its best response).
    payoffs : ndarray of shape (n_firms,)
    """
    ms = _spec(market)
    _, hi = ms.action_bounds()
    rows = np.empty((ms.n_firms, ms.n_products))
    vals = np.empty(ms.n_firms)
    for i in range(ms.n_firms):
        own = ms.products_of(i)
        others = np.setdiff1d(np.arange(ms.n_products), own)
        if ms.quantity_setting:
            if ms.demand.kind == "isoelastic" and not np.all(np.isfinite(ms.capacity[others])):
                # unbounded rival output drives the price, and the firm's profit, to zero in the limit
                row = np.where(np.isfinite(ms.capacity), ms.capacity, hi)
                row[own] = 0.0
                rows[i], vals[i] = row, 0.0
                continue
            flood = hi.max() * 2
            if ms.demand.kind == "differentiated" and ms.demand.scalars[1] > 0:
                flood = ms.demand.vector.max() / (ms.demand.scalars[0] * ms.demand.scalars[1]) * 2
            row = np.where(np.isfinite(ms.capacity), ms.capacity, flood)
        else:
            row = np.zeros(ms.n_products)
        prof, v = best_response(ms, i, row[None, :])
        rows[i], vals[i] = prof[0], max(0.0, float(v[0]))
    return rows, vals


# --------------------------------------------------------------------------------------------------
# The stage game
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StageGame:
    """The stage game's key outcomes.

    Attributes
    ----------
    market : MarketSpec
    agreement : str
    nash, collusive : Outcome
    deviation_profiles : ndarray of shape (n_firms, n_products)
        Row i: firm i's best deviation against the others' collusive actions.
    deviation_actions : ndarray of shape (n_products,)
        Each product's action when its owner deviates.
    deviation_profits : ndarray of shape (n_firms,)
    minmax_profits : ndarray of shape (n_firms,)
    """

    market: MarketSpec
    agreement: str
    nash: Outcome
    collusive: Outcome
    deviation_profiles: np.ndarray
    deviation_actions: np.ndarray
    deviation_profits: np.ndarray
    minmax_profits: np.ndarray

    @property
    def n_firms(self) -> int:
        return self.market.n_firms

    def to_dict(self) -> dict:
        """Profits per firm; actions, prices and quantities per product."""
        return {
            "agreement": self.agreement,
            "profits": {
                "collusive": self.collusive.firm_profits.tolist(),
                "deviation": self.deviation_profits.tolist(),
                "nash": self.nash.firm_profits.tolist(),
                "minmax": self.minmax_profits.tolist(),
            },
            "actions": {
                "collusive": self.collusive.actions.tolist(),
                "deviation": self.deviation_actions.tolist(),
                "nash": self.nash.actions.tolist(),
            },
            "prices": {"collusive": self.collusive.prices.tolist(), "nash": self.nash.prices.tolist()},
            "quantities": {
                "collusive": self.collusive.quantities.tolist(),
                "nash": self.nash.quantities.tolist(),
            },
            "owner": (self.market.owner + 1).tolist(),
        }


def stage_game(market, agreement: str = "joint", actions=None) -> StageGame:
    """Solve the stage game: static Nash, the agreed collusive outcome, best deviations, minmax."""
    ms = _spec(market)
    nash = static_nash(ms)
    coll = collusive_outcome(ms, agreement, actions)
    dev_rows, dev_p = best_deviation(ms, coll.actions)
    _, mm = minmax(ms)
    return StageGame(ms, agreement, nash, coll, dev_rows, deviation_actions(ms, dev_rows), dev_p, mm)
