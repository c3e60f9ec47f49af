"""Linear demand for differentiated products (representative consumer, quadratic utility).

Utility ``U(q) = sum_i a_i q_i - (b/2) (sum_i q_i^2 + g sum_{i != j} q_i q_j)`` (Shubik and Levitan,
1980; Singh and Vives, 1984, for two goods) gives inverse demand ``p_i = a_i - b (q_i + g sum_{j != i}
q_j)``. Under price competition, direct demand respects ``q >= 0``: a product priced above its choke
price sells nothing and drops out of the others' demand (the consumer's utility maximisation over
``q >= 0``, solved as a linear complementarity problem). The price-competition solvers live in
:mod:`sim.models.differentiated_bertrand`.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from sim.core.docs import doc_sections
from sim.core.errors import InputError, SolverError
from sim.core.params import PerFirm, Real
from sim.models.codes import CODE_DIFF_BERTRAND, CODE_DIFF_COURNOT
from sim.models.demand_base import MAX_MAGNITUDE, Demand
from sim.models.demand_spec import DemandSpec, profit_with
from sim.models.differentiated_bertrand import bertrand_multi_response, interior_nash, sweep_price

__all__ = ["DifferentiatedDemand", "DifferentiatedDemandSpec"]


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
        competition needs ``g < 1``: use :class:`~sim.models.linear.LinearDemand` for a homogeneous good.
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

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters for ``n_firms`` products: ``scalars = (slope, substitution, 0, 0)``,
        ``vector`` the intercepts."""
        p = self._check_params(prefix, n_firms)
        return DifferentiatedDemandSpec(
            type(self), np.array([p["slope"], p["substitution"], 0.0, 0.0]), p["intercept"]
        )


@doc_sections(DemandSpec)
class DifferentiatedDemandSpec(DemandSpec):
    """Numeric differentiated linear demand (see :class:`DifferentiatedDemand`), its ``scalars`` and
    ``vector`` in the layout given by :meth:`DifferentiatedDemand.spec`."""

    stage_codes = {"cournot": CODE_DIFF_COURNOT, "bertrand": CODE_DIFF_BERTRAND}
    price_reaches_zero = True

    @doc_sections(DemandSpec.check_market)
    def check_market(self, model, cost, prefix):
        """Price competition needs ``substitution < 1``; every cost below its product's intercept."""
        if model == "bertrand" and self.scalars[1] >= 1.0:
            raise InputError(
                f"{prefix}.substitution",
                "price competition needs substitution < 1; use demand = 'linear' for a homogeneous good",
            )
        bad = np.flatnonzero(cost >= self.vector)
        if bad.size:
            i = bad[0]
            raise InputError(
                f"{prefix}.cost",
                f"firm {i + 1}'s cost {cost[i]:g} is at or above its choke price (intercept {self.vector[i]:g})",
            )

    @doc_sections(DemandSpec.inverse_demand)
    def inverse_demand(self, q):
        """``p_i = max(0, a_i - b ((1-g) q_i + g Q))``."""
        q = np.asarray(q, dtype=float)
        b, g = self.scalars[0], self.scalars[1]
        tot = q.sum(axis=-1, keepdims=True)
        return np.maximum(0.0, self.vector - b * ((1.0 - g) * q + g * tot))

    @doc_sections(DemandSpec.direct_demand)
    def direct_demand(self, p):
        """Quantities with ``q >= 0`` (see :func:`_lcp_demand`)."""
        p = np.asarray(p, dtype=float)
        return _lcp_demand(self.vector, self.scalars[0], self.scalars[1], p)

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """``U(q) - p.q`` of the representative consumer."""
        q = np.asarray(q, dtype=float)
        p = np.asarray(p, dtype=float)
        b, g = self.scalars[0], self.scalars[1]
        tot = q.sum(axis=-1)
        sq = (q * q).sum(axis=-1)
        util = (self.vector * q).sum(axis=-1) - 0.5 * b * ((1.0 - g) * sq + g * tot * tot)
        return util - (p * q).sum(axis=-1)

    @doc_sections(DemandSpec.prices_for_quantities)
    def prices_for_quantities(self, q):
        """Inverse demand without the floor at zero: ``a - b ((1-g) q + g Q)``."""
        b, g = self.scalars[0], self.scalars[1]
        return self.vector - b * ((1 - g) * q + g * q.sum(axis=-1, keepdims=True))

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """A product's own choke quantity ``a_i / b`` (quantities) or its intercept (prices)."""
        return self.vector / self.scalars[0] if ms.quantity_setting else self.vector.copy()

    @doc_sections(DemandSpec.flooding_quantity)
    def flooding_quantity(self, ms, hi):
        """With ``g > 0``, rivals selling ``2 max(a) / (b g)`` each drive every price to zero."""
        if self.scalars[1] > 0:
            with np.errstate(over="ignore", divide="ignore"):  # a vanishing g: no finite output floods the market (inf)
                return self.vector.max() / (self.scalars[0] * self.scalars[1]) * 2
        return hi.max() * 2

    @doc_sections(DemandSpec.best_response)
    def best_response(self, ms, i, A):
        """Cournot: ``(a_i - c_i - b g R) / (2 b)`` within ``[0, capacity]``. Bertrand: the exact
        piecewise search :func:`~sim.models.differentiated_bertrand.sweep_price`."""
        if ms.quantity_setting:
            b, g = self.scalars[0], self.scalars[1]
            rest = np.clip(A, 0, ms.capacity).sum(axis=1) - np.clip(A[:, i], 0, ms.capacity[i])
            x = np.clip((self.vector[i] - ms.cost[i] - b * g * rest) / (2 * b), 0.0, ms.capacity[i])
            return x, profit_with(ms, i, A, x)
        # piecewise-quadratic profit, maximised exactly piece by piece
        x = np.empty(A.shape[0])
        v = np.empty(A.shape[0])
        firm = int(ms.owner[i])
        for r, row in enumerate(A):
            x[r], _ = sweep_price(ms, firm, i, row)
            prof = row.copy()
            prof[i] = x[r]
            v[r] = float(ms.profits(prof[None, :])[0, i])
        return x, v

    @doc_sections(DemandSpec.best_response_multi)
    def best_response_multi(self, ms, i, own, row):
        """Cournot: a concave quadratic programme in the firm's quantities (first-order conditions
        ``a_k - c_k - b((1-g) q_k + g Q) - b((1-g) q_k + g Q_f) = 0``) over ``[0, capacity]``, solved
        exactly as bounded least squares. Bertrand:
        :func:`~sim.models.differentiated_bertrand.bertrand_multi_response`."""
        if not ms.quantity_setting:
            return bertrand_multi_response(ms, i, own, row)
        b, g = self.scalars[0], self.scalars[1]
        k = own.size
        rivals = np.clip(np.delete(row, own), 0, np.delete(ms.capacity, own)).sum()
        H = 2 * b * ((1 - g) * np.eye(k) + g * np.ones((k, k)))
        r = self.vector[own] - ms.cost[own] - b * g * rivals
        q = _box_qp(H, r, ms.capacity[own])
        out = row.copy()
        out[own] = q
        return out

    @doc_sections(DemandSpec.nash_start)
    def nash_start(self, ms):
        """The interior equilibrium of single-product firms on the active set, dropping products that
        would not sell: Cournot ``(2 - g) q_i + g Q = (a_i - c_i) / b``; Bertrand
        :func:`~sim.models.differentiated_bertrand.interior_nash`."""
        n, c = ms.n_products, ms.cost
        b, g = self.scalars[0], self.scalars[1]
        av = self.vector
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
                x = interior_nash(av, c, b, g, active)
                q = self.direct_demand(x[None, :])[0]
                ok = q > 0
            if ok[active].all():
                break
            active &= ok
        if ms.quantity_setting:
            return np.clip(x, 0, ms.capacity)
        return np.where(active, x, np.maximum(c, x))

    @doc_sections(DemandSpec.joint_maximum)
    def joint_maximum(self, ms):
        """The joint-profit quantities (:func:`_joint_quantities`), as prices under Bertrand."""
        q = _joint_quantities(ms)
        return q if ms.quantity_setting else self.prices_for_quantities(q)

    @doc_sections(DemandSpec.joint_gradient)
    def joint_gradient(self, ms, a, q, p):
        """Cournot: ``p_i - c_i - b((1-g) q_i + g Q)`` over the products with a positive price
        (``dp_i/dq_k = -b((1-g) delta_ik + g)`` there). Bertrand, on the active set S:
        ``q_S - M (p - c)_S`` with ``M = (I - theta J) / (b (1-g))``, ``theta = g / (1 + (k-1) g)``."""
        c = ms.cost
        b, gg = self.scalars[0], self.scalars[1]
        if ms.quantity_setting:
            live = p > 0
            qs = np.where(live, q, 0.0)
            return p - c - b * ((1 - gg) * qs + gg * qs.sum())
        S = q > 0
        idx = np.flatnonzero(S)
        out = np.zeros(ms.n_products)
        if idx.size:
            theta = gg / (1 + (idx.size - 1) * gg)
            m = (p - c)[idx]
            out[idx] = q[idx] - (m - theta * m.sum()) / (b * (1 - gg))
        return out

    @doc_sections(DemandSpec.proportional_slope)
    def proportional_slope(self, qn, lam):
        """``d p / d lam = -b ((1-g) qn + g sum(qn))``."""
        b, gg = self.scalars[0], self.scalars[1]
        return -b * ((1 - gg) * qn + gg * qn.sum())


def _box_qp(H: np.ndarray, r: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """Maximise ``r'q - q'Hq/2`` over ``0 <= q <= upper`` for positive definite ``H``: rewritten as
    bounded least squares and solved exactly by the bounded-variable least-squares method (Stark and
    Parker, 1995) in :func:`scipy.optimize.lsq_linear`."""
    try:
        L = np.linalg.cholesky(H)
    except np.linalg.LinAlgError:
        # substitution 1 makes a multi-product firm's own products perfect substitutes: H is singular
        raise SolverError("differentiated demand: a multi-product firm's quantity problem is singular (its products "
                          "are perfect substitutes, substitution = 1)") from None
    rhs = np.linalg.solve(L, r)
    res = optimize.lsq_linear(L.T, rhs, bounds=(np.zeros(r.size), upper), method="bvls", tol=1e-15)
    q = np.clip(res.x, 0, upper)
    q[q < 1e-12 * max(1.0, float(q.max()))] = 0.0
    return q


def _joint_quantities(ms) -> np.ndarray:
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
