"""Markets: a demand system, per-firm marginal costs and capacities, and a mode of competition.

A :class:`Market` is a store-only description. :meth:`Market.spec` validates it once and returns a
:class:`MarketSpec`, the numeric form every computation uses. Profits are vectorised over action
profiles of shape ``(..., n_products)``: quantities under Cournot competition, prices under Bertrand.

Products and firms: by default each firm sells one product and the two words are interchangeable.
An ``owner`` map (product -> firm) describes multi-product firms, as after a merger of
differentiated-product sellers; a firm's profit is the sum over its products, and it sets its
products' actions jointly. Per-product arrays (costs, qualities, intercepts) have one entry per
product.

Conventions
-----------
* Quantities are clipped to ``[0, capacity]``: a firm never produces above its capacity.
* Prices are floored at zero by the demand systems that can reach zero (linear demands).
* Homogeneous Bertrand (linear demand, price competition): the lowest price takes the market; firms
  tied at the lowest price share it in proportion to the demand's ``split`` weights (equally by
  default). Undercutting a rival price ``r`` means pricing one step below it, at ``r - s`` with the
  step ``s`` = :attr:`MarketSpec.price_step`: the market's ``tick`` when it is positive, otherwise
  (continuous prices, ``tick = 0``, the default) ``1e-9`` times the choke price, so that every
  reported profile is attainable and evaluates to the profits reported with it; the continuous-price
  limits (the whole market at ``r``) are approached to that relative order. With asymmetric costs
  ``c_1 < c_2`` the static equilibrium has the lowest-cost firm at ``c_2 - s`` (or at its monopoly
  price if that is lower) serving the whole market and the other firms at their own costs; when
  ``c_2 - s <= c_1`` the two lowest-cost firms tie at ``c_2``. With equal lowest costs the
  equilibrium reported is the competitive one (price at cost; with a positive tick, pricing one tick
  above cost is an equilibrium too).
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Integer, Options, Parametrized, PerFirm, Real, agreeing_length, optional
from sim.models.demand import DEMAND_TYPES, MAX_MAGNITUDE, Demand
from sim.models.demand_spec import DemandSpec

__all__ = ["DEFAULT_DEMAND", "DEMAND_KEYS", "MAX_FIRMS", "MODELS", "Market", "MarketSpec", "market_from_dict",
           "owning_firms"]

MODELS = ("cournot", "bertrand")
#: Largest number of firms (or products): oligopoly analysis, not atomistic markets.
MAX_FIRMS = 1000


@dataclass(frozen=True, eq=False)
class MarketSpec:
    """Validated numeric form of a market (made by :meth:`Market.spec`).

    Parameters
    ----------
    n_products : int
        Length of action profiles.
    n_firms : int
        Number of firms (owners); equal to ``n_products`` without multi-product firms.
    owner : ndarray of int, shape (n_products,)
        Firm index (0-based) of each product.
    model : {"cournot", "bertrand"}
    demand : DemandSpec
    cost : ndarray of shape (n_products,)
    capacity : ndarray of shape (n_products,)
        ``inf`` where a product is unconstrained.
    tick : float
        Price step of homogeneous Bertrand (0: continuous prices).
    """

    n_products: int
    n_firms: int
    owner: np.ndarray
    model: str
    demand: DemandSpec
    cost: np.ndarray
    capacity: np.ndarray
    tick: float
    _cache: dict = field(default_factory=dict, repr=False)

    # ---- classification -----------------------------------------------------------------------
    @property
    def quantity_setting(self) -> bool:
        """Whether firms choose quantities (Cournot) rather than prices."""
        return self.model == "cournot"

    @property
    def code(self) -> int:
        """The stage-core code of the (demand, mode) pair (:meth:`DemandSpec.stage_code`)."""
        return self.demand.stage_code(self.model)

    @property
    def homogeneous_bertrand(self) -> bool:
        """Price competition with a homogeneous good (the lowest price takes the market)."""
        return self.demand.homogeneous and not self.quantity_setting

    @property
    def price_step(self) -> float:
        """Undercutting step of homogeneous Bertrand: ``tick`` if positive, else 1e-9 of the choke price."""
        if self.tick > 0:
            return float(self.tick)
        return 1e-9 * float(self.demand.choke_price)

    @property
    def homogeneous_good(self) -> bool:
        """Whether every firm sells the same good."""
        return self.demand.homogeneous

    @property
    def multi_product(self) -> bool:
        """Whether some firm sells several products."""
        return self.n_products != self.n_firms

    def products_of(self, i: int) -> np.ndarray:
        """Indices of firm ``i``'s products.

        Parameters
        ----------
        i : int
            The firm (0-based).

        Returns
        -------
        ndarray of int
        """
        return np.flatnonzero(self.owner == i)

    def firm_sum(self, per_product: np.ndarray) -> np.ndarray:
        """Aggregate a per-product array to firms.

        Parameters
        ----------
        per_product : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (..., n_firms)
        """
        x = np.asarray(per_product, dtype=float)
        if not self.multi_product:
            return x
        out = np.zeros(x.shape[:-1] + (self.n_firms,))
        for k in range(self.n_products):
            out[..., self.owner[k]] += x[..., k]
        return out

    @property
    def symmetric(self) -> bool:
        """True when firms are single-product and share costs, capacities and demand parameters."""
        return bool(
            not self.multi_product
            and np.all(self.cost == self.cost[0])
            and np.all(self.capacity == self.capacity[0])
            and np.all(self.demand.vector == self.demand.vector[0])
        )

    # ---- evaluation ---------------------------------------------------------------------------
    def evaluate(self, actions, shock=1.0):
        """Quantities, prices and profits of action profiles.

        Parameters
        ----------
        actions : array_like of shape (..., n_products)
            Quantities (Cournot) or prices (Bertrand).
        shock : float or array_like broadcastable to (..., 1)
            Multiplicative demand shock: it scales the price under Cournot competition and the
            quantity under Bertrand competition.

        Returns
        -------
        quantities, prices, profits : ndarray of shape (..., n_products)
            Profits per product; :meth:`firm_profits` aggregates them to firms.
        """
        a = np.asarray(actions, dtype=float)
        if a.shape[-1] != self.n_products:
            raise ValueError(f"actions must have last dimension {self.n_products}, got shape {a.shape}")
        if self.quantity_setting:
            q = np.clip(a, 0.0, self.capacity)
            p = self.demand.inverse_demand(q) * shock
            with np.errstate(invalid="ignore"):
                pi = np.where(q > 0, (p - self.cost) * q, 0.0)
        else:
            p = a
            q = self.demand.direct_demand(p) * shock
            pi = (p - self.cost) * q
        return q, p, pi

    def profits(self, actions, shock=1.0) -> np.ndarray:
        """Per-product profits of action profiles.

        Parameters
        ----------
        actions : array_like of shape (..., n_products)
        shock : float or array_like broadcastable to (..., 1)

        Returns
        -------
        ndarray of shape (..., n_products)
        """
        return self.evaluate(actions, shock)[2]

    def firm_profits(self, actions, shock=1.0) -> np.ndarray:
        """Per-firm profits of action profiles.

        Parameters
        ----------
        actions : array_like of shape (..., n_products)
        shock : float or array_like broadcastable to (..., 1)

        Returns
        -------
        ndarray of shape (..., n_firms)
        """
        return self.firm_sum(self.evaluate(actions, shock)[2])

    def consumer_surplus(self, actions) -> np.ndarray:
        """Consumer surplus of action profiles.

        Parameters
        ----------
        actions : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (...,)
        """
        q, p, _ = self.evaluate(actions)
        return self.demand.consumer_surplus(q, p)

    def action_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Per-product interval searched by best responses and punishments.

        Cournot: ``[0, min(capacity, q_max)]`` where ``q_max`` is a quantity beyond which extra output
        cannot raise the firm's profit. Bertrand: ``[0, p_max]``, ``p_max`` a price at which the firm
        sells nothing or a price above every candidate optimum. The demand system gives ``q_max`` and
        ``p_max`` (:meth:`DemandSpec.action_upper`).

        Returns
        -------
        lo, hi : ndarray of shape (n_products,)
        """
        if "bounds" in self._cache:
            return self._cache["bounds"]
        hi = self.demand.action_upper(self)
        if self.quantity_setting:
            hi = np.minimum(hi, self.capacity)
        out = (np.zeros(self.n_products), hi)
        self._cache["bounds"] = out
        return out


class Market(Parametrized):
    """An oligopoly market.

    Parameters
    ----------
    demand : Demand
        A demand system (:class:`~sim.models.linear.LinearDemand`,
        :class:`~sim.models.differentiated.DifferentiatedDemand`, :class:`~sim.models.logit.LogitDemand`,
        :class:`~sim.models.isoelastic.IsoelasticDemand`, or a registered model of a plugin).
    cost : float or list of float
        Constant marginal cost of each firm (>= 0; a single value applies to every firm).
    model : {"cournot", "bertrand"}
        Competition in quantities or in prices.
    n_firms : int, optional
        Number of firms; inferred from the per-firm lists when omitted.
    capacity : float or list of float, optional
        Per-firm capacity (> 0), quantity competition only.
    tick : float
        Price step for homogeneous Bertrand; 0 means continuous prices (see the module notes).
    owner : list of int, optional
        Multi-product firms: the firm number (1, 2, ...) that owns each product. Per-product lists
        (cost, intercept, quality) then have one entry per product. Differentiated and logit demand
        only; with a homogeneous good a firm with several plants is one firm (combine them).

    Examples
    --------
    >>> m = Market(LinearDemand(intercept=10, slope=1), cost=1.0, n_firms=3)
    >>> m.spec().n_firms
    3
    """

    _constraints = {
        "model": Options(*MODELS),
        "n_firms": optional(Integer(2, MAX_FIRMS)),
        "cost": PerFirm(Real(0, MAX_MAGNITUDE)),
        "capacity": optional(PerFirm(Real(0, MAX_MAGNITUDE, closed="right"))),
        "tick": Real(0, MAX_MAGNITUDE),
    }

    def __init__(self, demand, cost, model="cournot", n_firms=None, capacity=None, tick=0.0, owner=None):
        self.demand = demand
        self.cost = cost
        self.model = model
        self.n_firms = n_firms
        self.capacity = capacity
        self.tick = tick
        self.owner = owner

    @classmethod
    def _param_names(cls):
        return ["demand", "cost", "model", "n_firms", "capacity", "tick", "owner"]

    def __setattr__(self, name, value):
        object.__setattr__(self, name, value)
        if name != "_spec_cache":
            object.__setattr__(self, "_spec_cache", None)

    def _infer_n(self, prefix: str) -> int:
        """Number of products (= firms without an owner map)."""
        if self.owner is not None:
            if not isinstance(self.owner, list | tuple | np.ndarray) or len(self.owner) < 2:
                raise InputError(f"{prefix}.owner", f"must list the owning firm of each product, got {self.owner!r}")
            return len(self.owner)
        if self.n_firms is not None:
            return Integer(2, MAX_FIRMS).check(f"{prefix}.n_firms", self.n_firms)
        candidates = []
        for key, value in (("cost", self.cost), ("capacity", self.capacity)):
            if isinstance(value, list | tuple | np.ndarray):
                candidates.append((key, len(value)))
        if isinstance(self.demand, Demand):
            for name, value in self.demand.get_params().items():
                if isinstance(value, list | tuple | np.ndarray):
                    candidates.append((name, len(value)))
        if not candidates:
            raise InputError(f"{prefix}.n_firms", "give the number of firms (every per-firm value is a single number)")
        _, n0 = agreeing_length(prefix, candidates, "firm")
        if not 2 <= n0 <= MAX_FIRMS:
            raise InputError(f"{prefix}.n_firms", f"must be an integer in [2, {MAX_FIRMS}], got {n0}")
        return n0

    def spec(self, prefix: str = "market") -> MarketSpec:
        """Validate the market and return its numeric form (cached until a parameter changes).

        Parameters
        ----------
        prefix : str
            Key path of the market in error messages.

        Returns
        -------
        MarketSpec
        """
        cached = getattr(self, "_spec_cache", None)
        if cached is not None and cached[0] == prefix:
            return cached[1]
        if not isinstance(self.demand, Demand):
            raise InputError(
                f"{prefix}.demand", f"must be one of {', '.join(DEMAND_TYPES)}, got {self.demand!r}"
            )
        model = Options(*MODELS).check(f"{prefix}.model", self.model)
        if model not in self.demand.models:
            raise InputError(
                f"{prefix}.model",
                f"{self.demand.name} demand supports {' or '.join(self.demand.models)} competition, got {model!r}",
            )
        n = self._infer_n(prefix)
        p = self._check_params(prefix, n)
        dspec: DemandSpec = self.demand.spec(n, prefix)
        cost = p["cost"]
        if p["capacity"] is not None and model == "bertrand":
            raise InputError(
                f"{prefix}.capacity",
                "capacities are supported with quantity (cournot) competition only; price competition "
                "with capacity constraints is the market model 'capacity' (model = 'capacity')",
            )
        cap = p["capacity"] if p["capacity"] is not None else np.full(n, np.inf)
        dspec.check_market(model, cost, prefix)
        if p["tick"] > 0 and not (dspec.homogeneous and model == "bertrand"):
            raise InputError(f"{prefix}.tick", "a price tick applies to homogeneous Bertrand only")
        owner, n_owners = _check_owner(prefix, self.owner, n, self.n_firms, dspec)
        ms = MarketSpec(n, n_owners, owner, model, dspec, cost, cap, p["tick"])
        object.__setattr__(self, "_spec_cache", (prefix, ms))
        return ms

    # thin conveniences so that users need not touch the spec
    @doc_sections(MarketSpec.profits)
    def profits(self, actions, shock=1.0):
        """Per-product profits of action profiles (:meth:`MarketSpec.profits`)."""
        return self.spec().profits(actions, shock)

    @doc_sections(MarketSpec.firm_profits)
    def firm_profits(self, actions, shock=1.0):
        """Per-firm profits of action profiles (:meth:`MarketSpec.firm_profits`)."""
        return self.spec().firm_profits(actions, shock)

    @doc_sections(MarketSpec.evaluate)
    def evaluate(self, actions, shock=1.0):
        """Quantities, prices and profits of action profiles (:meth:`MarketSpec.evaluate`)."""
        return self.spec().evaluate(actions, shock)

    def clone(self, **changes):
        """A new market with the same parameters (and a copy of the demand), optionally changed.

        Parameters
        ----------
        **changes
            Constructor arguments to replace.

        Returns
        -------
        Market
        """
        params = self.get_params()
        if "demand" not in changes:
            params["demand"] = self.demand.clone()
        params.update(changes)
        return type(self)(**params)

    def to_dict(self) -> dict:
        """Flat description in the layout of an experiment file's ``[market]`` table.

        Returns
        -------
        dict
        """
        out = {"model": self.model, "demand": self.demand.name}
        for k, v in self.demand.get_params().items():
            if v is not None:
                out[k] = _plain(v)
        out["cost"] = _plain(self.cost)
        if self.n_firms is not None:
            out["n_firms"] = self.n_firms
        if self.capacity is not None:
            out["capacity"] = _plain(self.capacity)
        if self.tick:
            out["tick"] = self.tick
        if self.owner is not None:
            out["owner"] = _plain(self.owner)
        return out


def _plain(v):
    if isinstance(v, np.ndarray):
        return v.tolist()
    if isinstance(v, tuple):
        return list(v)
    return v


def owning_firms(key: str, owner, n_products: int | None = None) -> np.ndarray:
    """Check an owner map -- the firm number (1, 2, ...) of each product -- and count the firms from 0.

    Parameters
    ----------
    key : str
        Key path of the map in error messages.
    owner : sequence of int
        The firm number of each product.
    n_products : int, optional
        The number of products the map must cover (not checked when None).

    Returns
    -------
    int64 ndarray of shape (n_products,)
        The owning firm of each product, counted from 0.

    Raises
    ------
    InputError
        An entry is not a whole number >= 1, the map does not have ``n_products`` entries, a firm number is
        skipped, or fewer than two firms own the products.
    """
    vals = []
    for k, v in enumerate(owner):
        if isinstance(v, bool) or not isinstance(v, numbers.Integral) or v < 1:
            raise InputError(key, f"entry {k + 1} must be a firm number 1, 2, ..., got {v!r}")
        vals.append(int(v))
    if n_products is not None and len(vals) != n_products:
        raise InputError(key, f"must have one firm number per product ({n_products}), got {len(vals)}")
    F = max(vals)
    missing = sorted(set(range(1, F + 1)) - set(vals))
    if missing:
        raise InputError(key, f"firm numbers must run from 1 without gaps; firm {missing[0]} owns no product")
    if F < 2:
        raise InputError(key, "a market needs at least two firms")
    return np.array(vals, dtype=np.int64) - 1


def _check_owner(prefix, owner, n_products, n_firms, dspec: DemandSpec):
    """Validate an owner map (firm numbers 1..F, each used); returns 0-based owners and F."""
    if owner is None:
        return np.arange(n_products), n_products
    key = f"{prefix}.owner"
    owners = owning_firms(key, owner)
    F = int(owners.max()) + 1
    if n_firms is not None and n_firms != F:
        raise InputError(f"{prefix}.n_firms", f"is {n_firms} but the owner map names {F} firms")
    if dspec.homogeneous and F != n_products:
        raise InputError(
            key, f"multi-product firms need differentiated products; with {dspec.kind} demand a firm with several "
            "plants is one firm (combine them)",
        )
    return owners, F


class _DemandKeys(Mapping):
    """Keys of the flat ``[market]`` table of each registered demand system (its constructor arguments)."""

    def __getitem__(self, name):
        return tuple(DEMAND_TYPES[name]._param_names())

    def __iter__(self):
        return iter(DEMAND_TYPES)

    def __len__(self):
        return len(DEMAND_TYPES)


#: demand name -> keys of the flat ``[market]`` table for that system (follows the registry)
DEMAND_KEYS: Mapping[str, tuple[str, ...]] = _DemandKeys()
#: the demand system of a ``[market]`` table that names none
DEFAULT_DEMAND = "linear"
_MARKET_KEYS = ("model", "demand", "n_firms", "cost", "capacity", "tick", "owner")


def market_from_dict(table: dict, prefix: str = "market") -> Market:
    """Build a :class:`Market` from a flat table (an experiment file's ``[market]``).

    Unknown keys raise :class:`InputError` naming the key and the keys allowed for the chosen demand
    system. The market is validated before it is returned.

    Parameters
    ----------
    table : dict
        ``demand`` (a registered name, default ``"linear"``), ``model``, ``cost``, ``n_firms``,
        ``capacity``, ``tick``, ``owner`` and the demand system's own parameters.
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    Market
    """
    if not isinstance(table, dict):
        raise InputError(prefix, f"must be a table, got {table!r}")
    if table.get("model") == "capacity":
        raise InputError(f"{prefix}.model", "price competition with capacity constraints (model = 'capacity') is "
                                            "analysed by the experiment kind 'capacity' ([experiment] kind = "
                                            "'capacity'; supergame thresholds FILE) and simulated by the kind "
                                            "'simulate' (supergame simulate FILE)")
    demand_name = table.get("demand", DEFAULT_DEMAND)
    if not isinstance(demand_name, str) or demand_name not in DEMAND_TYPES:
        allowed = ", ".join(map(repr, DEMAND_TYPES))
        raise InputError(f"{prefix}.demand", f"must be one of {allowed}, got {demand_name!r}")
    allowed = set(_MARKET_KEYS) | set(DEMAND_KEYS[demand_name])
    for key in table:
        if key not in allowed:
            raise InputError(
                f"{prefix}.{key}",
                f"unknown key for {demand_name} demand; allowed: {', '.join(sorted(allowed))}",
            )
    if "cost" not in table:
        raise InputError(f"{prefix}.cost", "missing (marginal cost of each firm)")
    dparams = {k: table[k] for k in DEMAND_KEYS[demand_name] if k in table}
    cls = DEMAND_TYPES[demand_name]
    default_model = cls.models[0]
    m = Market(
        demand=cls(**dparams),
        cost=table["cost"],
        model=table.get("model", default_model),
        n_firms=table.get("n_firms"),
        capacity=table.get("capacity"),
        tick=table.get("tick", 0.0),
        owner=table.get("owner"),
    )
    m.spec(prefix)
    return m
