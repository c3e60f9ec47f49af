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

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from sim.antitrust.calibrated import REPRODUCTION_TOL, Calibration
from sim.antitrust.data_constraints import Negative, OneOrPerProduct, OwnerMap
from sim.antitrust.demand_fits import _differentiated, _isoelastic, _linear, _logit  # the calibrators below
from sim.core.errors import InputError, SolverError
from sim.core.params import Integer, Options, Parametrized, PerFirm, Real, agreeing_length, optional
from sim.core.tables import refuse_unknown
from sim.models.demand import DEMAND_TYPES, DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand
from sim.theory.equilibrium import static_nash

__all__ = ["CALIBRATION_DEMANDS", "REPRODUCTION_TOL", "Calibration", "MarketData", "calibrate", "data_from_dict"]

#: names of the demand systems with a calibration here (see ``_CALIBRATORS`` at the end of the module)
CALIBRATION_DEMANDS = tuple(cls.name for cls in (LogitDemand, LinearDemand, DifferentiatedDemand, IsoelasticDemand))
_IDENTIFYING = ("margin", "elasticity", "market_elasticity")


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
        k0, n0 = agreeing_length(prefix, sizes, "product")
        if n0 < 2:
            raise InputError(f"{prefix}.{k0}", f"a market needs at least two products, got {n0}")
        return n0

    def validated(self, prefix: str = "data") -> dict:
        """Checked and normalised inputs.

        Parameters
        ----------
        prefix : str
            Key path of the data table in error messages.

        Returns
        -------
        dict
            Every input, per-product values as ndarrays of shape (n_products,); ``n`` (the number of products),
            ``model`` (the mode of competition), ``reference`` counted from 0, ``quantities`` and ``shares`` both
            filled in.

        Raises
        ------
        InputError
            Naming the key path of the first input that is wrong.
        """
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
        homogeneous = DEMAND_TYPES[demand].homogeneous
        if out["owner"] is not None and homogeneous:
            raise InputError(f"{prefix}.owner", f"multi-product firms need differentiated products; with {demand} "
                                                "demand a firm with several plants is one firm (combine them)")
        if out["capacity"] is not None and model != "cournot":
            raise InputError(f"{prefix}.capacity", "capacities are used with quantity competition (cournot) only")
        self._check_volumes(out, prefix)
        if homogeneous:
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
        if _calibrator(demand).potential_market:
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
        given = [k for k in _IDENTIFYING if out[k] is not None]
        _calibrator(out["demand"]).identify(out, given, prefix)

    @property
    def has_potential_market(self) -> bool:
        """Whether the demand system's quantities are shares of a potential market (an outside good
        takes the rest), so that ``size`` is one of its inputs."""
        return _calibrator(self.demand).potential_market

    def with_input(self, name: str, value: float, prefix: str = "data") -> MarketData:
        """A copy in which the uncertain input ``name`` takes ``value``.

        ``name`` is an identifying input (``margin`` or ``elasticity`` of the reference product, or
        ``market_elasticity``) or, for logit demand, ``size`` (the potential market, with the
        quantities sold held at their observed values, so that the shares and the outside good's share
        change). An identifying input replaces the ones it stands in for: for logit, isoelastic and
        homogeneous linear demand any of ``margin``, ``elasticity``, ``market_elasticity`` identifies
        the model alone; for differentiated demand ``market_elasticity`` is always kept and
        ``margin`` and ``elasticity`` replace each other.

        Parameters
        ----------
        name : str
            ``margin``, ``elasticity``, ``market_elasticity`` or ``size``.
        value : float
        prefix : str
            Key path of the data table in error messages.

        Returns
        -------
        MarketData
        """
        if name == "size":
            if not self.has_potential_market:
                raise InputError(name, "the potential market size is an input of logit demand only")
            v = self.validated(prefix)
            return self.clone(quantities=v["quantities"].tolist(), shares=None, size=value)
        if name not in _IDENTIFYING:
            raise InputError(name, f"must be one of {', '.join(_IDENTIFYING)} or size")
        changes = {name: value}
        calibrator = _calibrator(self.demand)
        model = self.model or DEMAND_TYPES[self.demand].models[0]
        exclusive = calibrator.exclusive.get(model, _IDENTIFYING)
        if name in exclusive:
            changes.update({k: None for k in exclusive if k != name})
        return self.clone(**changes)


def data_from_dict(table: dict, prefix: str = "data") -> MarketData:
    """Build :class:`MarketData` from an experiment file's ``[data]`` table (unknown keys refused).

    Parameters
    ----------
    table : dict
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    MarketData
    """
    refuse_unknown(table, prefix, MarketData._param_names())
    if "demand" not in table:
        raise InputError(f"{prefix}.demand", f"missing; one of {', '.join(map(repr, CALIBRATION_DEMANDS))}")
    d = MarketData(**table)
    d.validated(prefix)
    return d


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
    parts = _calibrator(v["demand"]).fit(v, prefix)
    return _finish(v, parts, prefix)


def _describe_input(name: str, value, v: dict) -> str:
    if name == "market_elasticity":
        return f"the market elasticity ({value:g})"
    word = "margin" if name == "margin" else "own-price elasticity"
    if np.ndim(value):
        return f"the {word} of every product (least squares)"
    return f"the {word} of product {v['reference'] + 1} ({value:g})"


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
    if _calibrator(v["demand"]).potential_market:
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


# --------------------------------------------------------------------------------------------------
# What identifies each demand system, and the registry of calibrations
# --------------------------------------------------------------------------------------------------


def _only(given: list, allowed: tuple, what: str, prefix: str) -> None:
    extra = [k for k in given if k not in allowed]
    if extra:
        raise InputError(f"{prefix}.{extra[0]}", f"not used with {what}; give {' or '.join(allowed)}")


def _identify_logit(out: dict, given: list, prefix: str) -> None:
    if len(given) != 1:
        key = f"{prefix}.{given[1]}" if given else f"{prefix}.margin"
        raise InputError(key, "give exactly one of margin, elasticity, market_elasticity (logit demand has "
                              "one price parameter)" + (f"; got {', '.join(given)}" if given else ""))


def _identify_homogeneous(out: dict, given: list, prefix: str) -> None:
    demand, model = out["demand"], out["model"]
    if model == "bertrand":
        if out["margin"] is not None:
            raise InputError(f"{prefix}.margin", "static Nash in a homogeneous-good price game has zero margins "
                                                 "(price equals cost); the data's margin contradicts the conduct "
                                                 "assumption")
        _only(given, ("market_elasticity",), "homogeneous Bertrand", prefix)
        if out["market_elasticity"] is None:
            raise InputError(f"{prefix}.market_elasticity", "missing: homogeneous Bertrand demand is calibrated "
                                                            "from the market elasticity")
        return
    _only(given, ("market_elasticity", "margin"), f"{demand} demand (a homogeneous good has one market elasticity)",
          prefix)
    if len(given) != 1:
        key = f"{prefix}.{given[1]}" if given else f"{prefix}.market_elasticity"
        raise InputError(key, "give exactly one of market_elasticity, margin"
                              + (f"; got {', '.join(given)}" if given else ""))


def _identify_differentiated(out: dict, given: list, prefix: str) -> None:
    if out["market_elasticity"] is None:
        raise InputError(f"{prefix}.market_elasticity", "missing: differentiated linear demand needs the "
                                                        "market elasticity plus a margin or an own-price "
                                                        "elasticity")
    rest = [k for k in given if k != "market_elasticity"]
    if len(rest) != 1:
        key = f"{prefix}.{rest[1]}" if rest else f"{prefix}.margin"
        raise InputError(key, "give exactly one of margin, elasticity besides market_elasticity"
                              + (f"; got {', '.join(rest)}" if rest else ""))


@dataclass(frozen=True)
class _Calibrator:
    """How one demand system is calibrated.

    ``fit(validated inputs, prefix)`` returns the calibrated parts; ``identify(inputs, given, prefix)``
    refuses a set of identifying inputs that does not pin the model down; ``exclusive`` maps a mode of
    competition to the identifying inputs that replace each other (:meth:`MarketData.with_input`);
    ``potential_market``: volumes are shares of a potential market that an outside good completes.
    """

    fit: Callable
    identify: Callable
    exclusive: dict
    potential_market: bool = False


#: the calibration of each demand system, by its class (a system without one is refused by name)
_CALIBRATORS = {
    LogitDemand: _Calibrator(_logit, _identify_logit, {"bertrand": _IDENTIFYING}, potential_market=True),
    LinearDemand: _Calibrator(_linear, _identify_homogeneous, {"cournot": _IDENTIFYING, "bertrand": ()}),
    DifferentiatedDemand: _Calibrator(_differentiated, _identify_differentiated,
                                      {"cournot": ("margin", "elasticity"), "bertrand": ("margin", "elasticity")}),
    IsoelasticDemand: _Calibrator(_isoelastic, _identify_homogeneous, {"cournot": _IDENTIFYING}),
}


def _calibrator(demand: str) -> _Calibrator:
    found = _CALIBRATORS.get(DEMAND_TYPES.get(demand)) if isinstance(demand, str) else None
    if found is None:
        raise InputError("data.demand", f"calibration from market data is not available for the demand model "
                                        f"{demand!r}; calibrated models: {', '.join(CALIBRATION_DEMANDS)}")
    return found
