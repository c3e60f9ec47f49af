"""Two demand models added from outside the package, the way a user's plugin adds them.

Loaded with :func:`sim.runner.kinds.load_plugin_file` (``supergame run --plugin FILE``), this file
touches nothing in ``sim/``: it subclasses :class:`sim.models.Demand` and
:class:`sim.models.DemandSpec` and calls :func:`sim.models.register_demand`, the extension points of
the "Adding a market model" checklist of DEVELOPERS.md; each method takes the numpydoc sections of the
contract it fulfils with :func:`sim.core.docs.doc_sections`. ``tests/models/test_demand_plugin.py`` checks
the theory and the simulations on them against the closed forms below.

Exponential demand (``demand = "exponential"``)
------------------------------------------------
A homogeneous good with ``Q(p) = size * exp(-p / scale)``, so ``P(Q) = scale * ln(size / Q)`` (floored
at zero beyond ``Q = size``), quantity competition. The model gives only its inverse demand and its
slope ``P'(Q) = -scale / Q``, its marginal revenue ``MR(Q) = P(Q) - scale`` and the inverse of that,
consumer surplus and the range of outputs worth searching: best responses, the Nash equilibrium and
the punishments come from the generic solvers of :mod:`sim.theory`. It has no price signal (so the
trigger-price equilibrium must refuse it) and no stage-core code (so the simulations must refuse it).

Closed forms, with ``b = scale``, ``A = size``, cost ``c`` and ``K = A exp(-c / b)`` (derived here; the
first-order conditions are those of any Cournot oligopoly, Vives, 1999, "Oligopoly Pricing", ch. 4):

* Cournot-Nash, n symmetric firms: ``b ln(A/Q) - c - b q / Q = 0`` with ``q = Q / n`` gives
  ``P_N = c + b / n``, ``Q_N = K exp(-1/n)`` and ``pi_N = b K exp(-1/n) / n^2``.
* Joint-profit maximum: ``MR(Q) = c`` gives ``P_M = c + b``, ``Q_M = K / e`` and the per-firm share
  ``pi_C = b K / (e n)``.
* Best deviation against rivals producing ``R = (n - 1) Q_M / n``: the first-order condition
  ``ln(K / Q) = 1 - R / Q`` with ``w = R / Q`` reads ``w e^w = e R / K = (n - 1) / n``, so
  ``w = W((n - 1) / n)`` (Lambert's W), the deviator sells ``q_D = R (1 - w) / w`` at the margin
  ``P - c = b (1 - w)`` and earns ``pi_D = b R (1 - w)^2 / w``.

Linear demand written by market size (``demand = "sized_linear"``)
-------------------------------------------------------------------
``Q(p) = size * (1 - p / choke)``, i.e. ``P(Q) = choke - (choke / size) Q``: the shipped linear demand
in other parameters, written here from scratch. Its closed forms are the textbook Cournot ones with
``a = choke``, ``b = choke / size``: ``q_N = (a - c) / (b (n + 1))``, ``pi_N = (a - c)^2 / (b (n + 1)^2)``,
``pi_C = (a - c)^2 / (4 b n)``, and with two firms ``q_D = 3 (a - c) / (8 b)``, ``pi_D = 9 (a - c)^2 /
(64 b)``, the victim of the deviation earning ``3 (a - c)^2 / (32 b)``.

Why the second model: the numba kernels evaluate a fixed set of stage games (codes of
:mod:`sim.models.codes`), because a kernel cannot call back into Python without losing its speed. A
model whose formula is one of them reuses its code with its own parameter arrays (here
``CODE_LINEAR_COURNOT`` with ``scalars = (choke, choke / size, 0, 0)``), and simulates; a model with a
new formula (the exponential one) needs a new code written into ``sim/models/stagecore.py``, and until
then its theory works and the simulations refuse it by name.
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Real
from sim.models import Demand, DemandSpec, register_demand
from sim.models.codes import CODE_LINEAR_COURNOT


class ExponentialDemand(Demand):
    """``Q(p) = size * exp(-p / scale)`` for a homogeneous good.

    Parameters
    ----------
    size : float
        Quantity demanded at a zero price (> 0).
    scale : float
        Price scale (> 0): each unit of price divides demand by ``e ** (1 / scale)``.
    """

    name = "exponential"
    models = ("cournot",)
    homogeneous = True
    _constraints = {"size": Real(0, 1e9, closed="right"), "scale": Real(0, 1e9, closed="right")}

    def __init__(self, size=100.0, scale=10.0):
        self.size = size
        self.scale = scale

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters."""
        p = self._check_params(prefix, n_firms)
        return ExponentialDemandSpec(type(self), np.array([p["size"], p["scale"], 0.0, 0.0]), np.ones(n_firms))


class ExponentialDemandSpec(DemandSpec):
    """Numeric exponential demand."""

    @doc_sections(DemandSpec.inverse_demand)
    def inverse_demand(self, q):
        """``max(0, scale * ln(size / Q))`` for every firm (infinite at ``Q = 0``)."""
        q = np.asarray(q, dtype=float)
        A, b = self.scalars[0], self.scalars[1]
        Q = q.sum(axis=-1, keepdims=True)
        with np.errstate(divide="ignore"):
            p = np.where(Q > 0, np.maximum(0.0, b * np.log(A / np.where(Q > 0, Q, 1.0))), np.inf)
        return np.broadcast_to(p, q.shape).copy()

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """``int_P^inf Q(x) dx = scale * Q`` at a positive price."""
        Q = np.asarray(q, dtype=float).sum(axis=-1)
        return self.scalars[1] * np.minimum(Q, self.scalars[0])

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """The total output ``size * exp(-c_min / scale)`` beyond which the price is below every cost."""
        return np.full(ms.n_products, self.scalars[0] * math.exp(-float(ms.cost.min()) / self.scalars[1]))

    @doc_sections(DemandSpec.own_slope)
    def own_slope(self, ms, A, q, p):
        """``dP/dq_i = -scale / Q`` while the price is positive, 0 beyond ``size``."""
        Q = q.sum(axis=-1, keepdims=True)
        with np.errstate(divide="ignore"):
            slope = np.where(p > 0, -self.scalars[1] / np.where(Q > 0, Q, 1.0), 0.0)
        return np.broadcast_to(slope, q.shape)

    @doc_sections(DemandSpec.marginal_revenue)
    def marginal_revenue(self, Q):
        """``scale * (ln(size / Q) - 1)`` below ``size`` (infinite at zero, zero beyond)."""
        A, b = self.scalars[0], self.scalars[1]
        if Q <= 0:
            return math.inf
        return b * (math.log(A / Q) - 1.0) if Q < A else 0.0

    @doc_sections(DemandSpec.quantity_at_marginal_revenue)
    def quantity_at_marginal_revenue(self, m):
        """``size * exp(-m / scale - 1)``."""
        return self.scalars[0] * math.exp(-m / self.scalars[1] - 1.0)


class SizedLinearDemand(Demand):
    """``Q(p) = size * (1 - p / choke)`` for a homogeneous good.

    Parameters
    ----------
    choke : float
        Price at which nothing sells (> 0).
    size : float
        Quantity demanded at a zero price (> 0).
    """

    name = "sized_linear"
    models = ("cournot",)
    homogeneous = True
    _constraints = {"choke": Real(0, 1e9, closed="right"), "size": Real(0, 1e9, closed="right")}

    def __init__(self, choke=10.0, size=10.0):
        self.choke = choke
        self.size = size

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters; the kernel arrays are those of the linear Cournot code."""
        p = self._check_params(prefix, n_firms)
        return SizedLinearDemandSpec(type(self), np.array([p["choke"], p["choke"] / p["size"], 0.0, 0.0]),
                                     np.ones(n_firms))


class SizedLinearDemandSpec(DemandSpec):
    """Numeric linear demand by market size; simulates through ``CODE_LINEAR_COURNOT``."""

    stage_codes = {"cournot": CODE_LINEAR_COURNOT}

    @property
    def choke(self) -> float:
        """The choke price."""
        return float(self.scalars[0])

    @property
    def size(self) -> float:
        """The quantity demanded at a zero price."""
        return float(self.scalars[0] / self.scalars[1])

    @doc_sections(DemandSpec.check_market)
    def check_market(self, model, cost, prefix):
        """Every cost below the choke price."""
        if np.any(cost >= self.choke):
            raise InputError(f"{prefix}.cost", f"must be below the choke price {self.choke:g}")

    @doc_sections(DemandSpec.inverse_demand)
    def inverse_demand(self, q):
        """``max(0, choke * (1 - Q / size))`` for every firm."""
        q = np.asarray(q, dtype=float)
        p = np.maximum(0.0, self.choke * (1.0 - q.sum(axis=-1, keepdims=True) / self.size))
        return np.broadcast_to(p, q.shape).copy()

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """Triangle under demand above the price."""
        Q = np.minimum(np.asarray(q, dtype=float).sum(axis=-1), self.size)
        return 0.5 * Q * (self.choke - self.choke * (1.0 - Q / self.size))

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """The market size (the price is zero beyond it)."""
        return np.full(ms.n_products, self.size)

    @doc_sections(DemandSpec.own_slope)
    def own_slope(self, ms, A, q, p):
        """``dP/dq_i = -choke / size`` while the price is positive, 0 beyond the market size."""
        return np.where(p > 0, -self.choke / self.size, 0.0)

    @doc_sections(DemandSpec.marginal_revenue)
    def marginal_revenue(self, Q):
        """``choke * (1 - 2 Q / size)``."""
        return self.choke * (1.0 - 2.0 * Q / self.size)

    @doc_sections(DemandSpec.quantity_at_marginal_revenue)
    def quantity_at_marginal_revenue(self, m):
        """``size * (1 - m / choke) / 2``."""
        return self.size * (1.0 - m / self.choke) / 2.0


register_demand(ExponentialDemand)
register_demand(SizedLinearDemand)
