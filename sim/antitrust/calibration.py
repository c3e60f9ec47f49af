"""Calibration of a market model from observed data.

A merger review starts from what can be observed: prices, quantities or shares, perhaps one
price-cost margin or one elasticity. :func:`calibrate` turns such data into a :class:`~sim.models.market.Market`
whose static equilibrium, under a stated conduct assumption, is exactly the observed market: the
demand parameters come from the data and the identifying input, and the marginal costs are those
that make the observed prices (or quantities) the firms' profit-maximising choices.

Conduct: static Nash equilibrium (``conduct = "static_nash"``, the only assumption offered) -- in
prices for Bertrand markets, in quantities for Cournot markets, each firm choosing all of its
products' actions jointly when it owns several.

Demand systems and what identifies them
---------------------------------------
logit (price competition)
    Werden and Froeb (1994, "The effects of mergers in differentiated products industries: logit
    demand and merger policy", Journal of Law, Economics and Organization 10(2), 407-426). Shares
    ``s_i`` of the potential market (the outside good takes ``s_0 = 1 - sum s_i``) and prices give
    the qualities relative to the outside good, ``a_i = p_i + mu (ln s_i - ln s_0)`` (outside good
    normalised to 0). One further input gives the price parameter ``alpha = 1 / mu``:

    * a margin ``m_k = (p_k - c_k) / p_k`` of product ``k``: the first-order condition of its owner
      ``f``, whose products all carry the markup ``mu / (1 - S_f)`` with ``S_f`` the firm's total share,
      gives ``mu = m_k p_k (1 - S_f)``;
    * an own-price elasticity ``e_kk = -alpha p_k (1 - s_k)``;
    * the market (aggregate) elasticity, ``eta = -alpha pbar s_0`` with ``pbar`` the share-weighted
      mean price (the percentage change of inside-good sales when every price rises by one percent).

    Costs follow from the first-order conditions: ``c_i = p_i - mu / (1 - S_f(i))``.
linear (homogeneous good)
    ``P = a - b Q``. Quantity competition: the market elasticity ``eta = -P / (b Q)`` gives ``b``
    (or a margin, through the Cournot condition ``(P - c_i) / P = s_i / |eta|``, i.e. ``P - c_i = b q_i``);
    costs ``c_i = P - b q_i``. Price competition (homogeneous Bertrand): static Nash prices equal
    costs, so margins are zero and costs equal the price; the market elasticity gives the demand and
    the observed shares become the tie-sharing weights (``split``).
differentiated (linear, representative consumer)
    ``p_i = a_i - b ((1 - g) q_i + g Q)``. The market elasticity fixes ``b (1 + (n - 1) g)``; a margin or
    own-price elasticity (one product, or one per product fitted by least squares) fixes the
    substitutability ``g``; the intercepts follow from inverse demand and the costs from the
    first-order conditions (prices: ``q_f + D_ff (p_f - c_f) = 0`` with ``D = dq/dp``; quantities:
    ``p_k - c_k = b ((1 - g) q_k + g Q_f)``).
isoelastic (homogeneous good, quantity competition)
    ``P = A Q^(-1/epsilon)``. The market elasticity gives ``epsilon`` directly; margins give it through
    the Lerner condition of Cournot competition, ``(P - c_i) / P = s_i / epsilon`` (Cowling and
    Waterson, 1976, "Price-cost margins and market structure", Economica 43, 267-274). Costs
    ``c_i = P (1 - s_i / epsilon)``.

With one value per product (a list of margins or own-price elasticities) the model is
over-identified; the parameter is then fitted by least squares on that input and the fit's residuals
are reported. Whatever the input, the calibrated model's static Nash equilibrium
(:func:`sim.theory.equilibrium.static_nash`) is computed and compared with the observed prices and
quantities: :attr:`Calibration.residuals` and :attr:`Calibration.reproduced` say, with numbers,
whether the model reproduces the data.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize

from sim.core.errors import InputError, SolverError
from sim.core.params import Constraint, Integer, Options, Parametrized, PerFirm, Real, optional
from sim.core.tables import refuse_unknown
from sim.models.demand import DEMAND_TYPES, DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand
from sim.models.market import Market
from sim.theory.equilibrium import static_nash

__all__ = ["CALIBRATION_DEMANDS", "Calibration", "MarketData", "calibrate", "data_from_dict"]

CALIBRATION_DEMANDS = ("logit", "linear", "differentiated", "isoelastic")
#: relative residual below which the calibrated model is said to reproduce the data
REPRODUCTION_TOL = 1e-8
_IDENTIFYING = ("margin", "elasticity", "market_elasticity")


# --------------------------------------------------------------------------------------------------
# Constraints of the data table
# --------------------------------------------------------------------------------------------------


class Negative(Real):
    """A finite negative number: a price elasticity of demand (the usual sign)."""

    def __init__(self):
        super().__init__(None, 0, closed="neither")

    def describe(self) -> str:
        return "a negative number (a price elasticity of demand is negative)"


class OneOrPerProduct(Constraint):
    """One value (observed for the reference product) or one value per product.

    ``check`` returns a float or an ndarray of shape (n_products,).
    """

    def __init__(self, element: Real):
        self.element = element

    def describe(self) -> str:
        return f"{self.element.describe()}, or a list of them (one per product)"

    def check(self, key: str, value: Any, n: int | None = None):
        if isinstance(value, numbers.Real) and not isinstance(value, bool):
            return self.element.check(key, value)
        return PerFirm(self.element, broadcast=False).check(key, value, n)

    def example_bad(self) -> Any:
        return self.element.example_bad()


class OwnerMap(Constraint):
    """Firm number (1, 2, ...) of each product; checked in full by :class:`~sim.models.market.Market`."""

    def describe(self) -> str:
        return "a list of firm numbers 1, 2, ..., one per product"

    def check(self, key: str, value: Any, n: int | None = None):
        if not isinstance(value, Sequence) or isinstance(value, str) or len(value) < 2:
            raise InputError(key, f"must be {self.describe()}, got {value!r}")
        out = []
        for k, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, numbers.Integral) or v < 1:
                raise InputError(key, f"entry {k + 1} must be a firm number 1, 2, ..., got {v!r}")
            out.append(int(v))
        if n is not None and len(out) != n:
            raise InputError(key, f"must have one firm number per product ({n}), got {len(out)}")
        F = max(out)
        missing = sorted(set(range(1, F + 1)) - set(out))
        if missing:
            raise InputError(key, f"firm numbers must run from 1 without gaps; firm {missing[0]} owns no product")
        if F < 2:
            raise InputError(key, "a market needs at least two firms")
        return np.array(out, dtype=np.int64) - 1

    def example_bad(self) -> Any:
        return [0, 1]


class MarketData(Parametrized):
    """Observed market data and the conduct assumed, ready for :func:`calibrate`.

    Parameters
    ----------
    demand : {"logit", "linear", "differentiated", "isoelastic"}
        Demand system to calibrate.
    prices : float or list of float
        Observed price of each product (> 0); one number for a homogeneous good.
    shares : list of float, optional
        Logit: each product's share of the potential market (each in (0, 1), summing to less than
        one: the outside good takes the rest).
    quantities : list of float, optional
        Quantity sold of each product (> 0). Logit: with ``size``, instead of ``shares``.
    size : float, optional
        Logit: the potential market (quantities are ``size`` times shares; default 1 with shares).
    margin : float or list of float, optional
        Price-cost margin ``(p - c) / p`` in (0, 1) of the reference product, or one per product.
    elasticity : float or list of float, optional
        Own-price elasticity of demand (negative) of the reference product, or one per product.
    market_elasticity : float, optional
        Market (aggregate) price elasticity of demand (negative).
    reference : int
        Product (1, 2, ...) whose margin or elasticity is observed when a single value is given.
    owner : list of int, optional
        Firm number of each product when firms sell several (differentiated and logit demand).
    capacity : float or list of float, optional
        Capacity of each firm (quantity competition only).
    model : {"cournot", "bertrand"}, optional
        Mode of competition; default: the demand system's first (logit: bertrand; others: cournot).
    conduct : {"static_nash"}
        The conduct assumption behind the calibration: observed prices and quantities are a static
        Nash equilibrium of the model.
    """

    _constraints = {
        "demand": Options(*CALIBRATION_DEMANDS),
        "prices": PerFirm(Real(0, None, closed="neither")),
        "shares": optional(PerFirm(Real(0, 1, closed="neither"), broadcast=False)),
        "quantities": optional(PerFirm(Real(0, None, closed="neither"), broadcast=False)),
        "size": optional(Real(0, None, closed="neither")),
        "margin": optional(OneOrPerProduct(Real(0, 1, closed="neither"))),
        "elasticity": optional(OneOrPerProduct(Negative())),
        "market_elasticity": optional(Negative()),
        "reference": Integer(1, 100_000),
        "owner": optional(OwnerMap()),
        "capacity": optional(PerFirm(Real(0, None, closed="neither"))),
        "model": optional(Options("cournot", "bertrand")),
        "conduct": Options("static_nash"),
    }

    def __init__(self, demand="logit", prices=None, shares=None, quantities=None, size=None, margin=None,
                 elasticity=None, market_elasticity=None, reference=1, owner=None, capacity=None, model=None,
                 conduct="static_nash"):
        self.demand = demand
        self.prices = prices
        self.shares = shares
        self.quantities = quantities
        self.size = size
        self.margin = margin
        self.elasticity = elasticity
        self.market_elasticity = market_elasticity
        self.reference = reference
        self.owner = owner
        self.capacity = capacity
        self.model = model
        self.conduct = conduct

    # ---- validation ---------------------------------------------------------------------------
    def _n_products(self, prefix: str) -> int:
        sizes = []
        for name in ("prices", "shares", "quantities", "owner", "margin", "elasticity"):
            v = getattr(self, name)
            if isinstance(v, Sequence | np.ndarray) and not isinstance(v, str):
                sizes.append((name, len(v)))
        if not sizes:
            raise InputError(f"{prefix}.quantities", "give the observed quantities (or shares) of each product")
        k0, n0 = sizes[0]
        for k, n in sizes[1:]:
            if n != n0:
                raise InputError(f"{prefix}.{k}", f"must have one value per product ({n0}, as {k0}), got {n}")
        if n0 < 2:
            raise InputError(f"{prefix}.{k0}", f"a market needs at least two products, got {n0}")
        return n0

    def validated(self, prefix: str = "data") -> dict:
        """Checked and normalised inputs (arrays of shape (n_products,)); raises InputError."""
        demand = self._constraints["demand"].check(f"{prefix}.demand", self.demand)
        conduct = self._constraints["conduct"].check(f"{prefix}.conduct", self.conduct)
        if self.prices is None:
            raise InputError(f"{prefix}.prices", "missing (the observed price of each product)")
        n = self._n_products(prefix)
        out = {"demand": demand, "conduct": conduct, "n": n}
        for name, c in self._constraints.items():
            if name in ("demand", "conduct"):
                continue
            key = f"{prefix}.{name}"
            value = getattr(self, name)
            inner = c.inner if isinstance(c, optional) else c
            if isinstance(inner, PerFirm | OneOrPerProduct | OwnerMap):
                out[name] = c.check(key, value, n)
            else:
                out[name] = c.check(key, value)

        models = DEMAND_TYPES[demand].models
        model = out["model"] if out["model"] is not None else models[0]
        if model not in models:
            raise InputError(f"{prefix}.model", f"{demand} demand supports {' and '.join(models)} only, got {model!r}")
        out["model"] = model
        if out["reference"] > n:
            raise InputError(f"{prefix}.reference", f"must be a product number in [1, {n}], got {out['reference']}")
        out["reference"] -= 1
        if out["owner"] is not None and demand in ("linear", "isoelastic"):
            raise InputError(f"{prefix}.owner", f"multi-product firms need differentiated products; with {demand} "
                                                "demand a firm with several plants is one firm (combine them)")
        if out["capacity"] is not None and model != "cournot":
            raise InputError(f"{prefix}.capacity", "capacities are used with quantity competition (cournot) only")
        self._check_volumes(out, prefix)
        if demand in ("linear", "isoelastic"):
            p = out["prices"]
            if not np.allclose(p, p[0], rtol=1e-12, atol=0):
                raise InputError(f"{prefix}.prices", f"a homogeneous good has one market price, got {p.tolist()}; "
                                                     "use differentiated or logit demand for different prices")
        self._check_identifying(out, prefix)
        if out["capacity"] is not None:
            over = np.flatnonzero(out["quantities"] >= out["capacity"] * (1 - 1e-12))
            if over.size:
                i = int(over[0])
                raise InputError(f"{prefix}.capacity", f"firm {i + 1} produces at or above its capacity "
                                 f"({out['quantities'][i]:g} of {out['capacity'][i]:g}): its cost is not identified "
                                 "by the first-order condition")
        return out

    def _check_volumes(self, out: dict, prefix: str) -> None:
        demand = out["demand"]
        if demand == "logit":
            if out["shares"] is not None and out["quantities"] is not None:
                raise InputError(f"{prefix}.quantities", "give shares or quantities (with size), not both")
            if out["shares"] is None:
                if out["quantities"] is None:
                    raise InputError(f"{prefix}.shares", "missing: the share of each product in the potential market")
                if out["size"] is None:
                    raise InputError(f"{prefix}.size", "missing: the potential market that the quantities are "
                                                       "shares of")
                q = out["quantities"]
                if q.sum() >= out["size"]:
                    raise InputError(f"{prefix}.quantities", f"must sum to less than {prefix}.size "
                                     f"({out['size']:g}; the outside good takes the rest), got {q.sum():g}")
                out["shares"] = q / out["size"]
            else:
                s = out["shares"]
                if s.sum() >= 1.0:
                    raise InputError(f"{prefix}.shares", f"must sum to less than one (the outside good takes the "
                                                         f"rest), got {s.sum():.6g}")
                if out["size"] is None:
                    out["size"] = 1.0
                out["quantities"] = s * out["size"]
        else:
            if out["shares"] is not None:
                raise InputError(f"{prefix}.shares", f"not used with {demand} demand; give quantities")
            if out["size"] is not None:
                raise InputError(f"{prefix}.size", "only used with logit demand")
            if out["quantities"] is None:
                raise InputError(f"{prefix}.quantities", "missing: the quantity sold of each product")
            out["shares"] = out["quantities"] / out["quantities"].sum()

    def _check_identifying(self, out: dict, prefix: str) -> None:
        demand, model = out["demand"], out["model"]
        given = [k for k in _IDENTIFYING if out[k] is not None]

        def only(allowed: tuple, what: str):
            extra = [k for k in given if k not in allowed]
            if extra:
                raise InputError(f"{prefix}.{extra[0]}", f"not used with {what}; give {' or '.join(allowed)}")

        if demand == "logit":
            if len(given) != 1:
                key = f"{prefix}.{given[1]}" if given else f"{prefix}.margin"
                raise InputError(key, "give exactly one of margin, elasticity, market_elasticity (logit demand has "
                                      "one price parameter)" + (f"; got {', '.join(given)}" if given else ""))
        elif demand == "linear" and model == "bertrand":
            if out["margin"] is not None:
                raise InputError(f"{prefix}.margin", "static Nash in a homogeneous-good price game has zero margins "
                                                     "(price equals cost); the data's margin contradicts the conduct "
                                                     "assumption")
            only(("market_elasticity",), "homogeneous Bertrand")
            if out["market_elasticity"] is None:
                raise InputError(f"{prefix}.market_elasticity", "missing: homogeneous Bertrand demand is calibrated "
                                                                "from the market elasticity")
        elif demand in ("linear", "isoelastic"):
            only(("market_elasticity", "margin"), f"{demand} demand (a homogeneous good has one market elasticity)")
            if len(given) != 1:
                key = f"{prefix}.{given[1]}" if given else f"{prefix}.market_elasticity"
                raise InputError(key, "give exactly one of market_elasticity, margin"
                                      + (f"; got {', '.join(given)}" if given else ""))
        else:  # differentiated
            if out["market_elasticity"] is None:
                raise InputError(f"{prefix}.market_elasticity", "missing: differentiated linear demand needs the "
                                                                "market elasticity plus a margin or an own-price "
                                                                "elasticity")
            rest = [k for k in given if k != "market_elasticity"]
            if len(rest) != 1:
                key = f"{prefix}.{rest[1]}" if rest else f"{prefix}.margin"
                raise InputError(key, "give exactly one of margin, elasticity besides market_elasticity"
                                      + (f"; got {', '.join(rest)}" if rest else ""))

    def with_input(self, name: str, value: float, prefix: str = "data") -> MarketData:
        """A copy in which the uncertain input ``name`` takes ``value``.

        ``name`` is an identifying input (``margin`` or ``elasticity`` of the reference product, or
        ``market_elasticity``) or, for logit demand, ``size`` (the potential market, with the
        quantities sold held at their observed values, so that the shares and the outside good's share
        change). An identifying input replaces the ones it stands in for: for logit, isoelastic and
        homogeneous linear demand any of ``margin``, ``elasticity``, ``market_elasticity`` identifies
        the model alone; for differentiated demand ``market_elasticity`` is always kept and
        ``margin`` and ``elasticity`` replace each other.
        """
        if name == "size":
            if self.demand != "logit":
                raise InputError(name, "the potential market size is an input of logit demand only")
            v = self.validated(prefix)
            return self.clone(quantities=v["quantities"].tolist(), shares=None, size=value)
        if name not in _IDENTIFYING:
            raise InputError(name, f"must be one of {', '.join(_IDENTIFYING)} or size")
        changes = {name: value}
        if self.demand == "differentiated":
            if name != "market_elasticity":
                changes.update({k: None for k in ("margin", "elasticity") if k != name})
        elif not (self.demand == "linear" and (self.model or "cournot") == "bertrand"):
            changes.update({k: None for k in _IDENTIFYING if k != name})
        return self.clone(**changes)


def data_from_dict(table: dict, prefix: str = "data") -> MarketData:
    """Build :class:`MarketData` from an experiment file's ``[data]`` table (unknown keys refused)."""
    refuse_unknown(table, prefix, MarketData._param_names())
    if "demand" not in table:
        raise InputError(f"{prefix}.demand", f"missing; one of {', '.join(map(repr, CALIBRATION_DEMANDS))}")
    d = MarketData(**table)
    d.validated(prefix)
    return d


# --------------------------------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Calibration:
    """A calibrated market and how well it reproduces the data.

    Attributes
    ----------
    market : Market
        The calibrated (pre-merger) market.
    demand, model : str
    conduct : str
        The conduct assumption, in words.
    identified_by : str
        What pinned down the price parameter, in words.
    parameters : dict
        Demand parameters of the calibrated model.
    costs : ndarray of shape (n_products,)
        Implied marginal costs.
    margins : ndarray of shape (n_products,)
        Implied price-cost margins ``(p - c) / p`` at the observed prices.
    elasticities : ndarray of shape (n_products, n_products) or None
        Own- and cross-price elasticities of demand at the observed point (row: the product whose
        quantity responds; column: the product whose price changes). None for a homogeneous good.
    market_elasticity : float
        Market (aggregate) price elasticity at the observed point.
    diversion : ndarray of shape (n_products, n_products) or None
        Diversion ratios: share of the sales product ``i`` (row) loses to a price rise that go to
        product ``j`` (column). None for a homogeneous good.
    observed : dict
        ``prices``, ``quantities``, ``shares`` (arrays of shape (n_products,)).
    equilibrium : dict
        The same quantities at the calibrated model's static Nash equilibrium.
    residuals : dict
        ``equilibrium - observed`` for prices, quantities and shares.
    max_relative_residual : float
        Largest of ``|model - observed| / observed`` over prices and quantities.
    reproduced : bool
        Whether that largest relative residual is at most :data:`REPRODUCTION_TOL`.
    fit : dict or None
        Over-identified input (one value per product): the input, observed and fitted values and
        the fit's residuals.
    assumptions : list of str
    data : dict
        The validated inputs.
    """

    market: Any
    demand: str
    model: str
    conduct: str
    identified_by: str
    parameters: dict
    costs: np.ndarray
    margins: np.ndarray
    elasticities: np.ndarray | None
    market_elasticity: float
    diversion: np.ndarray | None
    observed: dict
    equilibrium: dict
    residuals: dict
    max_relative_residual: float
    reproduced: bool
    fit: dict | None
    assumptions: list = field(default_factory=list)
    data: dict = field(default_factory=dict, repr=False)

    def to_dict(self) -> dict:
        def arr(x):
            return None if x is None else np.asarray(x).tolist()

        return {
            "demand": self.demand, "model": self.model, "conduct": self.conduct,
            "identified_by": self.identified_by, "parameters": self.parameters,
            "costs": arr(self.costs), "margins": arr(self.margins), "elasticities": arr(self.elasticities),
            "market_elasticity": self.market_elasticity, "diversion": arr(self.diversion),
            "observed": {k: arr(v) for k, v in self.observed.items()},
            "equilibrium": {k: arr(v) for k, v in self.equilibrium.items()},
            "residuals": {k: arr(v) for k, v in self.residuals.items()},
            "max_relative_residual": self.max_relative_residual, "reproduced": self.reproduced,
            "reproduction_tolerance": REPRODUCTION_TOL,
            "fit": None if self.fit is None else {k: arr(v) if isinstance(v, np.ndarray) else v
                                                  for k, v in self.fit.items()},
            "assumptions": list(self.assumptions),
            "market": self.market.to_dict(),
        }


# --------------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------------


def calibrate(data: MarketData, prefix: str = "data") -> Calibration:
    """Calibrate a market to observed data (see the module notes for each demand system).

    Parameters
    ----------
    data : MarketData
    prefix : str
        Key path used in error messages (``data.margin``).

    Returns
    -------
    Calibration

    Raises
    ------
    InputError
        Invalid data, or data the model cannot reproduce under the conduct assumption (for example
        a margin that implies a negative marginal cost); the message names the field.
    """
    if not isinstance(data, MarketData):
        raise InputError(prefix, f"must be MarketData, got {type(data).__name__}")
    v = data.validated(prefix)
    fn = {"logit": _logit, "linear": _linear, "differentiated": _differentiated, "isoelastic": _isoelastic}
    parts = fn[v["demand"]](v, prefix)
    return _finish(v, parts, prefix)


def _owner(v: dict) -> tuple[np.ndarray, int]:
    if v["owner"] is None:
        return np.arange(v["n"]), v["n"]
    return v["owner"], int(v["owner"].max()) + 1


def _firm_total(x: np.ndarray, owner: np.ndarray) -> np.ndarray:
    """For each product, the sum of ``x`` over the products of its owner."""
    tot = np.bincount(owner, weights=x)
    return tot[owner]


def _identifying(v: dict) -> tuple[str, Any]:
    for k in ("margin", "elasticity"):
        if v[k] is not None:
            return k, v[k]
    return "market_elasticity", v["market_elasticity"]


def _describe_input(name: str, value, v: dict) -> str:
    if name == "market_elasticity":
        return f"the market elasticity ({value:g})"
    word = "margin" if name == "margin" else "own-price elasticity"
    if np.ndim(value):
        return f"the {word} of every product (least squares)"
    return f"the {word} of product {v['reference'] + 1} ({value:g})"


def _least_squares_slope(y: np.ndarray, x: np.ndarray) -> float:
    """``argmin_t sum (y - t x)^2``."""
    return float(y @ x / (x @ x))


def _check_costs(c: np.ndarray, key: str, what: str) -> None:
    bad = np.flatnonzero(c < 0)
    if bad.size:
        i = int(bad[0])
        raise InputError(key, f"implies a negative marginal cost for product {i + 1} ({c[i]:.6g}): {what}")


def _logit(v: dict, prefix: str) -> dict:
    p, s, size = v["prices"], v["shares"], v["size"]
    owner, F = _owner(v)
    if F < 2:  # pragma: no cover - OwnerMap refuses it
        raise InputError(f"{prefix}.owner", "a market needs at least two firms")
    s0 = 1.0 - s.sum()
    S_f = _firm_total(s, owner)
    name, val = _identifying(v)
    fit = None
    k = v["reference"]
    if name == "margin":
        if np.ndim(val) == 0:
            mu = val * p[k] * (1.0 - S_f[k])
        else:
            x = 1.0 / (p * (1.0 - S_f))
            mu = _least_squares_slope(val, x)
            fit = {"input": "margin", "observed": val, "fitted": mu * x, "residuals": mu * x - val}
    elif name == "elasticity":
        x = p * (1.0 - s)
        if np.ndim(val) == 0:
            alpha = -val / x[k]
        else:
            alpha = _least_squares_slope(-val, x)
            fit = {"input": "elasticity", "observed": val, "fitted": -alpha * x, "residuals": -alpha * x - val}
        mu = 1.0 / alpha
    else:
        pbar = float(s @ p / s.sum())
        mu = pbar * s0 / -val
    costs = p - mu / (1.0 - S_f)
    _check_costs(costs, f"{prefix}.{name}", "the data are not a static Nash equilibrium of logit demand with this "
                                           f"{name.replace('_', ' ')}")
    quality = p + mu * (np.log(s) - math.log(s0))

    market = Market(LogitDemand(quality=quality.tolist(), outside=0.0, mu=float(mu), size=float(size)),
                    cost=costs.tolist(), model="bertrand",
                    owner=None if v["owner"] is None else (owner + 1).tolist())
    alpha = 1.0 / mu
    n = v["n"]
    # elasticity of q_i with respect to p_j: -alpha p_i (1 - s_i) own, alpha p_j s_j cross
    E = np.tile(alpha * p * s, (n, 1))
    E[np.diag_indices(n)] = -alpha * p * (1.0 - s)
    D = np.tile(s, (n, 1)) / (1.0 - s)[:, None]
    np.fill_diagonal(D, 0.0)
    pbar = float(s @ p / s.sum())
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"quality": quality.tolist(), "outside": 0.0, "mu": float(mu), "alpha": alpha,
                       "size": float(size)},
        "elasticities": E, "market_elasticity": -alpha * pbar * s0, "diversion": D,
        "assumptions": ["logit demand with an outside good (Werden and Froeb, 1994); qualities are measured "
                        "relative to the outside good, whose quality is 0",
                        f"potential market size {size:g}; the outside good's share is {s0:.6g}"],
    }


def _linear(v: dict, prefix: str) -> dict:
    P = float(v["prices"][0])
    q = v["quantities"]
    Q = float(q.sum())
    s = q / Q
    name, val = _identifying(v)
    fit = None

    if v["model"] == "bertrand":
        b = P / (-val * Q)
        a = P + b * Q
        costs = np.full(v["n"], P)
        market = Market(LinearDemand(intercept=a, slope=b, split=s.tolist()), cost=costs.tolist(), model="bertrand")
        assumptions = ["homogeneous good with linear demand; price competition",
                       "static Nash with equal costs: every firm prices at its marginal cost, which therefore "
                       "equals the observed price; the observed shares are how tied firms share the market "
                       "(the demand's split weights)"]
    else:
        k = v["reference"]
        if name == "market_elasticity":
            b = P / (-val * Q)
        elif np.ndim(val) == 0:
            b = val * P / q[k]
        else:
            b = _least_squares_slope(val * P, q)
            fit = {"input": "margin", "observed": val, "fitted": b * q / P, "residuals": b * q / P - val}
        a = P + b * Q
        costs = P - b * q
        _check_costs(costs, f"{prefix}.{name}", "the quantities are not a Cournot equilibrium with this "
                                                f"{name.replace('_', ' ')}")
        market = Market(LinearDemand(intercept=a, slope=b), cost=costs.tolist(), model="cournot",
                        capacity=None if v["capacity"] is None else v["capacity"].tolist())
        assumptions = ["homogeneous good with linear demand; quantity competition (Cournot)"]
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"intercept": float(a), "slope": float(b)} | ({"split": s.tolist()}
                                                                  if v["model"] == "bertrand" else {}),
        "elasticities": None, "market_elasticity": -P / (b * Q), "diversion": None, "assumptions": assumptions,
    }


def _isoelastic(v: dict, prefix: str) -> dict:
    P = float(v["prices"][0])
    q = v["quantities"]
    Q = float(q.sum())
    s = q / Q
    name, val = _identifying(v)
    fit = None
    if name == "market_elasticity":
        eps = -val
    elif np.ndim(val) == 0:
        eps = s[v["reference"]] / val
    else:
        inv = _least_squares_slope(val, s)
        eps = 1.0 / inv
        fit = {"input": "margin", "observed": val, "fitted": s * inv, "residuals": s * inv - val}
    if eps <= 1.0:
        what = "" if name == "market_elasticity" else f" (the Lerner condition implies an elasticity of {-eps:.6g})"
        raise InputError(f"{prefix}.{name}", f"isoelastic demand needs a market elasticity below -1 (the joint-profit "
                                             f"maximum does not exist otherwise){what}")
    A = P * Q ** (1.0 / eps)
    costs = P * (1.0 - s / eps)

    market = Market(IsoelasticDemand(scale=A, elasticity=eps), cost=costs.tolist(), model="cournot",
                    capacity=None if v["capacity"] is None else v["capacity"].tolist())
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"scale": float(A), "elasticity": float(eps)},
        "elasticities": None, "market_elasticity": -eps, "diversion": None,
        "assumptions": ["homogeneous good with constant-elasticity demand; quantity competition (Cournot): "
                        "margins follow the Lerner condition (P - c_i) / P = s_i / elasticity"],
    }


def _diff_jacobian(b: float, g: float, n: int) -> np.ndarray:
    """``dq/dp`` of the differentiated linear system with every product selling: ``-(1/b) B^-1`` with
    ``B = (1 - g) I + g 11'`` (inverse by the Sherman-Morrison formula)."""
    theta = g / (1.0 + (n - 1) * g)
    return -(np.eye(n) - theta * np.ones((n, n))) / (b * (1.0 - g))


def _diff_markups(b: float, g: float, v: dict, owner: np.ndarray) -> np.ndarray:
    """Markups ``p - c`` implied by the first-order conditions at the observed point."""
    q, n = v["quantities"], v["n"]
    if v["model"] == "cournot":
        Q_f = _firm_total(q, owner)
        return b * ((1.0 - g) * q + g * Q_f)
    D = _diff_jacobian(b, g, n)
    m = np.empty(n)
    for f in np.unique(owner):
        idx = np.flatnonzero(owner == f)
        m[idx] = -np.linalg.solve(D[np.ix_(idx, idx)], q[idx])
    return m


def _differentiated(v: dict, prefix: str) -> dict:
    p, q, n = v["prices"], v["quantities"], v["n"]
    Q = float(q.sum())
    owner, _F = _owner(v)
    eta = v["market_elasticity"]
    # a uniform one-percent price rise changes total sales by sum_ij D_ij p_j / Q percent, and every
    # column of D sums to -1 / (b (1 + (n-1) g)): the market elasticity pins b (1 + (n-1) g)
    K = float(p.sum()) / (-eta * Q)
    name = "margin" if v["margin"] is not None else "elasticity"
    val = v[name]
    k = v["reference"]

    def b_of(g):
        return K / (1.0 + (n - 1) * g)

    def predicted(g):
        b = b_of(g)
        if name == "margin":
            return _diff_markups(b, g, v, owner) / p
        return np.diag(_diff_jacobian(b, g, n)) * p / q

    g_hi = 1.0 - 1e-12
    grid = np.unique(np.concatenate([np.linspace(0.0, 0.99, 100), 1.0 - np.logspace(-2, -12, 60)]))
    fit = None
    if np.ndim(val) == 0:
        r = np.array([predicted(g)[k] - val for g in grid])
        sign = np.flatnonzero(np.sign(r[:-1]) * np.sign(r[1:]) <= 0)
        if sign.size == 0:
            lo, hi = np.min(r + val), np.max(r + val)
            raise InputError(f"{prefix}.{name}", f"no substitutability in [0, 1) reproduces {val:g} with market "
                             f"elasticity {eta:g}: the model implies values between {lo:.6g} and {hi:.6g} for "
                             f"product {k + 1}")
        j = int(sign[0])
        if r[j] == 0:
            g = float(grid[j])
        else:
            g = float(optimize.brentq(lambda t: predicted(t)[k] - val, grid[j], grid[j + 1], xtol=1e-15,
                                      rtol=4 * np.finfo(float).eps, maxiter=500))
    else:
        def sse(t):
            res = predicted(t) - val
            return float(res @ res)

        vals = np.array([sse(t) for t in grid])
        j = int(np.argmin(vals))
        lo, hi = grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]
        res = optimize.minimize_scalar(sse, bounds=(lo, min(hi, g_hi)), method="bounded",
                                       options={"xatol": 1e-14, "maxiter": 500})
        g = float(res.x) if res.fun <= vals[j] else float(grid[j])
        pred = predicted(g)
        fit = {"input": name, "observed": val, "fitted": pred, "residuals": pred - val}
    b = b_of(g)
    a = p + b * ((1.0 - g) * q + g * Q)
    costs = p - _diff_markups(b, g, v, owner)
    _check_costs(costs, f"{prefix}.{name}", "the data are not a static Nash equilibrium of differentiated linear "
                                           f"demand with this {name}")

    market = Market(DifferentiatedDemand(intercept=a.tolist(), slope=float(b), substitution=float(g)),
                    cost=costs.tolist(), model=v["model"],
                    capacity=None if v["capacity"] is None else v["capacity"].tolist(),
                    owner=None if v["owner"] is None else (owner + 1).tolist())
    Dj = _diff_jacobian(b, g, n)
    E = Dj * p[None, :] / q[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        div = -Dj / np.diag(Dj)[:, None]
    np.fill_diagonal(div, 0.0)
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"intercept": a.tolist(), "slope": float(b), "substitution": float(g)},
        "elasticities": E, "market_elasticity": float(Dj.sum(axis=0) @ p / Q), "diversion": div,
        "assumptions": ["differentiated products with linear demand from a representative consumer with quadratic "
                        f"utility; {'price' if v['model'] == 'bertrand' else 'quantity'} competition",
                        "the market elasticity is the response of total sales to a uniform one-percent price rise"],
    }


def _finish(v: dict, parts: dict, prefix: str) -> Calibration:

    market = parts["market"]
    try:
        market.spec(prefix)
    except InputError as exc:
        name = parts["input"][0]
        raise InputError(f"{prefix}.{name}", f"the calibrated market is invalid ({exc})") from None
    try:
        nash = static_nash(market)
    except SolverError as exc:
        raise SolverError(f"calibration: the calibrated model's static Nash equilibrium was not found "
                          f"({exc})") from None
    p_obs, q_obs = v["prices"], v["quantities"]
    s_obs = v["shares"]
    p_mod, q_mod = np.asarray(nash.prices, float), np.asarray(nash.quantities, float)
    if v["demand"] == "logit":
        s_mod = q_mod / v["size"]
    else:
        s_mod = q_mod / q_mod.sum()
    resid = {"prices": p_mod - p_obs, "quantities": q_mod - q_obs, "shares": s_mod - s_obs}
    rel = max(float(np.max(np.abs(resid["prices"]) / p_obs)), float(np.max(np.abs(resid["quantities"]) / q_obs)))
    name, val = parts["input"]
    conduct = ("static Nash equilibrium in prices (Bertrand): each firm sets its products' prices to maximise its "
               "own profit given the rivals' prices" if v["model"] == "bertrand" else
               "static Nash equilibrium in quantities (Cournot): each firm sets its output to maximise its own "
               "profit given the rivals' outputs")
    assumptions = [f"conduct: {conduct}", *parts["assumptions"], "constant marginal costs"]
    return Calibration(
        market=market, demand=v["demand"], model=v["model"], conduct=conduct,
        identified_by=_describe_input(name, val, v), parameters=parts["parameters"],
        costs=np.asarray(parts["costs"], float), margins=(p_obs - parts["costs"]) / p_obs,
        elasticities=parts["elasticities"], market_elasticity=float(parts["market_elasticity"]),
        diversion=parts["diversion"],
        observed={"prices": p_obs, "quantities": q_obs, "shares": s_obs},
        equilibrium={"prices": p_mod, "quantities": q_mod, "shares": s_mod},
        residuals=resid, max_relative_residual=rel, reproduced=bool(rel <= REPRODUCTION_TOL), fit=parts["fit"],
        assumptions=assumptions, data={k: (x.tolist() if isinstance(x, np.ndarray) else x) for k, x in v.items()},
    )
