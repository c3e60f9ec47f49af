"""Constant-elasticity demand for a homogeneous good: ``P(Q) = scale * Q**(-1/elasticity)``.

Quantity competition only. With ``n`` active firms and costs ``c_i`` the Cournot equilibrium satisfies
the Lerner condition ``(P - c_i) / P = s_i / elasticity``, so ``P = sum_active c / (k - 1/elasticity)``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Real
from sim.models.codes import CODE_ISO_COURNOT
from sim.models.demand_base import MAX_MAGNITUDE, Demand
from sim.models.demand_spec import DemandSpec, profit_with

__all__ = ["IsoelasticDemand", "IsoelasticDemandSpec"]


#: the largest monopoly output the model accepts, as a power of ten
_LOG10_MAX_OUTPUT = 100


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
    homogeneous = True
    _constraints = {
        "scale": Real(0, MAX_MAGNITUDE, closed="right"),
        "elasticity": Real(1, 100, closed="right"),
    }

    def __init__(self, scale=1.0, elasticity=2.0):
        self.scale = scale
        self.elasticity = elasticity

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters for ``n_firms`` firms: ``scalars = (scale, elasticity, 0, 0)``, ``vector`` ones."""
        if isinstance(self.elasticity, int | float) and not isinstance(self.elasticity, bool):
            if self.elasticity < 0:
                raise InputError(
                    f"{prefix}.elasticity",
                    f"give the absolute value of the price elasticity (a number > 1), got {self.elasticity!r}",
                )
        p = self._check_params(prefix, n_firms)
        return IsoelasticDemandSpec(type(self), np.array([p["scale"], p["elasticity"], 0.0, 0.0]), np.ones(n_firms))


@doc_sections(DemandSpec)
class IsoelasticDemandSpec(DemandSpec):
    """Numeric constant-elasticity demand (see :class:`IsoelasticDemand`), its ``scalars`` and ``vector`` in the layout
    given by :meth:`IsoelasticDemand.spec`."""

    stage_codes = {"cournot": CODE_ISO_COURNOT}

    @doc_sections(DemandSpec.check_market)
    def check_market(self, model, cost, prefix):
        """Positive costs of at least a millionth of the scale, and high enough that the monopoly output
        ``(scale/cost)^elasticity`` stays below ``1e100``."""
        key = f"{prefix}.cost"
        bad = np.flatnonzero(cost <= 0)
        if bad.size:
            raise InputError(key, f"isoelastic demand needs positive costs, firm {bad[0] + 1} has {cost[bad[0]]:g}")
        # with a tiny cost relative to the demand scale the monopoly output (scale/cost)^elasticity
        # overflows; a millionth of the scale is far below any calibrated market
        low = np.flatnonzero(cost < 1e-6 * self.scalars[0])
        if low.size:
            raise InputError(key, f"isoelastic demand needs costs of at least 1e-6 of the scale "
                                  f"({1e-6 * self.scalars[0]:g}); firm {low[0] + 1} has {cost[low[0]]:g}")
        # a steep demand magnifies the ratio: (scale/cost)^elasticity must stay far inside the floating-point range
        # (outputs up to 1e100, so that profits and their differences stay finite too)
        A, eps = self.scalars[0], self.scalars[1]
        floor = A * 10.0 ** (-_LOG10_MAX_OUTPUT / eps)
        low = np.flatnonzero(cost < floor)
        if low.size:
            raise InputError(key, f"with elasticity {eps:g} isoelastic demand needs costs of at least {floor:g} (the "
                                  f"monopoly output (scale/cost)^elasticity at most 1e{_LOG10_MAX_OUTPUT}); firm "
                                  f"{low[0] + 1} has {cost[low[0]]:g}")

    @doc_sections(DemandSpec.inverse_demand)
    def inverse_demand(self, q):
        """The common price ``scale * Q^(-1/elasticity)`` (infinite at ``Q = 0``)."""
        q = np.asarray(q, dtype=float)
        A, eps = self.scalars[0], self.scalars[1]
        Q = q.sum(axis=-1, keepdims=True)
        with np.errstate(divide="ignore"):
            p = np.where(Q > 0, A * np.power(np.where(Q > 0, Q, 1.0), -1.0 / eps), np.inf)
        return np.broadcast_to(p, q.shape).copy()

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """``P Q / (elasticity - 1)``, finite because the elasticity exceeds one."""
        q = np.asarray(q, dtype=float)
        p = np.asarray(p, dtype=float)
        eps = self.scalars[1]
        Q = q.sum(axis=-1)
        P = np.where(Q > 0, p[..., 0], 0.0)
        return np.where(Q > 0, P * Q / (eps - 1.0), 0.0)

    @doc_sections(DemandSpec.price_signal)
    def price_signal(self, Q):
        """``scale * Q^(-1/elasticity)``."""
        Q = np.asarray(Q, dtype=float)
        return self.scalars[0] * np.power(Q, -1.0 / self.scalars[1])

    @doc_sections(DemandSpec.price_signal_slope)
    def price_signal_slope(self, Q):
        """``-(scale / elasticity) Q^(-1/elasticity - 1)``."""
        return -self.scalars[0] / self.scalars[1] * np.power(Q, -1.0 / self.scalars[1] - 1.0)

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """The total quantity beyond which the price falls below the lowest cost."""
        A, eps = self.scalars[0], self.scalars[1]
        return np.full(ms.n_products, (A / ms.cost.min()) ** eps)

    @doc_sections(DemandSpec.flooding_quantity)
    def flooding_quantity(self, ms, hi):
        """Infinite: the price tends to zero as the rivals' output grows, but never reaches it."""
        return math.inf

    @doc_sections(DemandSpec.best_response)
    def best_response(self, ms, i, A):
        """Root of the first-order condition ``P(Q) (1 - q / (elasticity Q)) = c_i`` in each row."""
        x = np.array([self._response(ms, i, row) for row in A])
        return x, profit_with(ms, i, A, x)

    def _response(self, ms, i, row):
        A, eps = self.scalars[0], self.scalars[1]
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

    @doc_sections(DemandSpec.nash_start)
    def nash_start(self, ms):
        """The Lerner solution on the active set, dropping firms whose cost exceeds the price."""
        n, c = ms.n_products, ms.cost
        A, eps = self.scalars[0], self.scalars[1]
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

    @doc_sections(DemandSpec.marginal_revenue)
    def marginal_revenue(self, Q):
        """``scale * Q^(-1/elasticity) (1 - 1/elasticity)`` (infinite at zero)."""
        A, eps = self.scalars[0], self.scalars[1]
        return A * Q ** (-1 / eps) * (1 - 1 / eps) if Q > 0 else np.inf

    @doc_sections(DemandSpec.quantity_at_marginal_revenue)
    def quantity_at_marginal_revenue(self, m):
        """``(scale (1 - 1/elasticity) / m)^elasticity``."""
        A, eps = self.scalars[0], self.scalars[1]
        return (A * (1 - 1 / eps) / m) ** eps

    @doc_sections(DemandSpec.joint_gradient)
    def joint_gradient(self, ms, a, q, p):
        """``P (1 - 1/elasticity) - c``: the marginal revenue less the marginal cost."""
        return p[0] * (1 - 1 / self.scalars[1]) - ms.cost


