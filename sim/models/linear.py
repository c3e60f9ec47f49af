"""Linear demand for a homogeneous good: ``P(Q) = max(0, intercept - slope * Q)``.

Quantity competition (Cournot) and price competition (homogeneous Bertrand: the lowest price takes
the market, ties share it by the ``split`` weights; see :mod:`sim.models.market` for the price step
of undercutting and the equilibrium selected).
"""

from __future__ import annotations

import numpy as np

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import PerFirm, Real, optional
from sim.models.codes import CODE_LINEAR_BERTRAND, CODE_LINEAR_COURNOT
from sim.models.demand_base import MAX_MAGNITUDE, Demand
from sim.models.demand_spec import DemandSpec, profit_with

__all__ = ["LinearDemand", "LinearDemandSpec"]


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
    homogeneous = True
    _constraints = {
        "intercept": Real(0, MAX_MAGNITUDE, closed="right"),
        "slope": Real(0, MAX_MAGNITUDE, closed="right"),
        "split": optional(PerFirm(Real(0, MAX_MAGNITUDE, closed="right"), broadcast=False)),
    }

    def __init__(self, intercept=10.0, slope=1.0, split=None):
        self.intercept = intercept
        self.slope = slope
        self.split = split

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters for ``n_firms`` firms: ``scalars = (intercept, slope, 0, 0)``, ``vector`` the split
        weights (ones by default)."""
        p = self._check_params(prefix, n_firms)
        split = p["split"] if p["split"] is not None else np.ones(n_firms)
        return LinearDemandSpec(type(self), np.array([p["intercept"], p["slope"], 0.0, 0.0]), split)

    @doc_sections(Demand.merge_firms)
    def merge_firms(self, ms, merging, firm_map, n_after):
        """Under price competition the merged firm's split weight is the sum of the merging firms'."""
        if ms.quantity_setting:
            return self.clone()
        w = np.asarray(ms.demand.vector, dtype=float)
        split = np.empty(n_after)
        for i in range(ms.n_firms):
            if i not in merging:
                split[firm_map[i]] = w[i]
        split[firm_map[merging[0]]] = float(w[merging].sum())
        return self.clone(split=split.tolist())


@doc_sections(DemandSpec)
class LinearDemandSpec(DemandSpec):
    """Numeric linear demand for a homogeneous good (see :class:`LinearDemand`), its ``scalars`` and
    ``vector`` in the layout given by :meth:`LinearDemand.spec`."""

    stage_codes = {"cournot": CODE_LINEAR_COURNOT, "bertrand": CODE_LINEAR_BERTRAND}
    price_reaches_zero = True
    linear_homogeneous = True

    @doc_sections(DemandSpec.check_market)
    def check_market(self, model, cost, prefix):
        """Every cost below the choke price."""
        a = self.scalars[0]
        bad = np.flatnonzero(cost >= a)
        if bad.size:
            i = bad[0]
            raise InputError(f"{prefix}.cost", f"firm {i + 1}'s cost {cost[i]:g} is at or above the choke price {a:g}")

    @doc_sections(DemandSpec.inverse_demand)
    def inverse_demand(self, q):
        """The common price ``max(0, a - b Q)`` for every firm."""
        q = np.asarray(q, dtype=float)
        a, b = self.scalars[0], self.scalars[1]
        p = np.maximum(0.0, a - b * q.sum(axis=-1, keepdims=True))
        return np.broadcast_to(p, q.shape).copy()

    @doc_sections(DemandSpec.direct_demand)
    def direct_demand(self, p):
        """The lowest price sells ``max(0, (a - p) / b)``, shared among the firms tied there by the
        split weights."""
        p = np.asarray(p, dtype=float)
        a, b = self.scalars[0], self.scalars[1]
        pmin = p.min(axis=-1, keepdims=True)
        at_min = p == pmin
        w = np.where(at_min, self.vector, 0.0)
        share = w / w.sum(axis=-1, keepdims=True)
        return share * np.maximum(0.0, (a - pmin) / b)

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """Area under demand above the (lowest) price, for the quantity sold."""
        q = np.asarray(q, dtype=float)
        p = np.asarray(p, dtype=float)
        a, b = self.scalars[0], self.scalars[1]
        Q = q.sum(axis=-1)
        pm = np.minimum(p.min(axis=-1), a)
        return 0.5 * (a - pm) * np.minimum(Q, np.maximum(0.0, (a - pm) / b))

    @property
    def choke_price(self):
        """The intercept ``a``."""
        return self.scalars[0]

    @doc_sections(DemandSpec.price_signal)
    def price_signal(self, Q):
        """``max(0, a - b Q)``."""
        Q = np.asarray(Q, dtype=float)
        return np.maximum(0.0, self.scalars[0] - self.scalars[1] * Q)

    @doc_sections(DemandSpec.price_signal_slope)
    def price_signal_slope(self, Q):
        """``-b`` where the price is positive, 0 beyond the choke quantity."""
        return np.where(self.scalars[0] - self.scalars[1] * Q > 0, -self.scalars[1], 0.0)

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """The choke quantity ``a / b`` (quantities) or the choke price ``a`` (prices)."""
        n = ms.n_products
        return np.full(n, self.scalars[0] / self.scalars[1]) if ms.quantity_setting else np.full(n, self.scalars[0])

    @doc_sections(DemandSpec.best_response)
    def best_response(self, ms, i, A):
        """Cournot: ``(a - c_i - b R) / (2 b)`` within ``[0, capacity]``, ``R`` the rivals' output.
        Bertrand: see :meth:`_bertrand_response`."""
        if not ms.quantity_setting:
            return self._bertrand_response(ms, i, A)
        a0, b = self.scalars[0], self.scalars[1]
        rest = A.sum(axis=1) - A[:, i]
        rest = np.clip(rest, 0, None)
        x = np.clip((a0 - ms.cost[i] - b * rest) / (2 * b), 0.0, ms.capacity[i])
        return x, profit_with(ms, i, A, x)

    def _bertrand_response(self, ms, i, A):
        """Best response in homogeneous Bertrand: the monopoly price if it undercuts every rival;
        otherwise undercut the lowest rival price by one step or tie with it, whichever pays more; price
        at cost (selling nothing) when the rivals are at or below cost."""
        a0, b = self.scalars[0], self.scalars[1]
        c = ms.cost[i]
        step = ms.price_step
        w = self.vector
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

    @doc_sections(DemandSpec.nash_equilibrium)
    def nash_equilibrium(self, ms):
        """Homogeneous Bertrand: the equilibrium selected in :mod:`sim.models.market` (None under Cournot)."""
        if ms.quantity_setting:
            return None
        a0 = self.scalars[0]
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
        return prices

    @doc_sections(DemandSpec.nash_start)
    def nash_start(self, ms):
        """Cournot equilibrium of the active firms, ``q_i = (a - (k+1) c_i + sum_active c) / ((k+1) b)``,
        dropping firms with a non-positive quantity until every active firm produces."""
        n, c = ms.n_products, ms.cost
        a0, b = self.scalars[0], self.scalars[1]
        active = np.ones(n, bool)
        for _ in range(n):
            k = active.sum()
            q = np.where(active, (a0 - (k + 1) * c + c[active].sum()) / ((k + 1) * b), 0.0)
            if (q[active] > 0).all():
                break
            active &= q > 0
        return np.clip(q, 0, ms.capacity)

    @doc_sections(DemandSpec.joint_maximum)
    def joint_maximum(self, ms):
        """Bertrand: the lowest-cost firms at the monopoly price ``(a + c_min) / 2``, the others at the
        choke price (selling nothing). Cournot: the merit order."""
        if ms.quantity_setting:
            return super().joint_maximum(ms)
        c = ms.cost
        a0 = self.scalars[0]
        cmin = c.min()
        pm = 0.5 * (a0 + cmin)
        return np.where(c == cmin, pm, a0)

    @doc_sections(DemandSpec.marginal_revenue)
    def marginal_revenue(self, Q):
        """``a - 2 b Q``."""
        return self.scalars[0] - 2 * self.scalars[1] * Q

    @doc_sections(DemandSpec.quantity_at_marginal_revenue)
    def quantity_at_marginal_revenue(self, m):
        """``(a - m) / (2 b)``."""
        return (self.scalars[0] - m) / (2 * self.scalars[1])

    @doc_sections(DemandSpec.symmetric_maximum)
    def symmetric_maximum(self, ms):
        """Bertrand: a common price shared by the split weights; the joint profit ``(p - c_w) D(p)``,
        ``c_w`` the weighted mean cost, is maximal at ``p = (a + c_w) / 2``. None under Cournot."""
        if ms.quantity_setting:
            return None
        w = self.vector
        return np.full(ms.n_products, 0.5 * (self.scalars[0] + float(w @ ms.cost / w.sum())))

    @doc_sections(DemandSpec.joint_gradient)
    def joint_gradient(self, ms, a, q, p):
        """Cournot: ``P - c - b Q`` while the price is positive, ``-c`` beyond (None under Bertrand)."""
        if not ms.quantity_setting:
            return None
        c = ms.cost
        Q = q.sum()
        P = p[0]
        return P - c - self.scalars[1] * Q if P > 0 else -c


