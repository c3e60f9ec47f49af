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

from dataclasses import dataclass, field

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Parametrized, PerFirm, Real, optional
from sim.models.demand import (
    CODE_DIFF_BERTRAND,
    CODE_DIFF_COURNOT,
    CODE_ISO_COURNOT,
    CODE_LINEAR_BERTRAND,
    CODE_LINEAR_COURNOT,
    CODE_LOGIT_BERTRAND,
    DEMAND_TYPES,
    MAX_MAGNITUDE,
    Demand,
    DemandSpec,
    DifferentiatedDemand,
    IsoelasticDemand,
    LinearDemand,
    LogitDemand,
    consumer_surplus,
    direct_demand,
    inverse_demand,
)

__all__ = ["MAX_FIRMS", "MODELS", "Market", "MarketSpec", "market_from_dict"]

MODELS = ("cournot", "bertrand")
#: Largest number of firms (or products): oligopoly analysis, not atomistic markets.
MAX_FIRMS = 1000

_CODES = {
    ("linear", "cournot"): CODE_LINEAR_COURNOT,
    ("linear", "bertrand"): CODE_LINEAR_BERTRAND,
    ("differentiated", "cournot"): CODE_DIFF_COURNOT,
    ("differentiated", "bertrand"): CODE_DIFF_BERTRAND,
    ("logit", "bertrand"): CODE_LOGIT_BERTRAND,
    ("isoelastic", "cournot"): CODE_ISO_COURNOT,
}


@dataclass(frozen=True, eq=False)
class MarketSpec:
    """Validated numeric form of a market.

    Attributes
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
    code : int
        Identifier of the (demand, model) pair for the numba core.
    """

    n_products: int
    n_firms: int
    owner: np.ndarray
    model: str
    demand: DemandSpec
    cost: np.ndarray
    capacity: np.ndarray
    tick: float
    code: int
    _cache: dict = field(default_factory=dict, repr=False)

    # ---- classification -----------------------------------------------------------------------
    @property
    def quantity_setting(self) -> bool:
        return self.model == "cournot"

    @property
    def homogeneous_bertrand(self) -> bool:
        return self.code == CODE_LINEAR_BERTRAND

    @property
    def price_step(self) -> float:
        """Undercutting step of homogeneous Bertrand: ``tick`` if positive, else 1e-9 of the choke price."""
        if self.tick > 0:
            return float(self.tick)
        return 1e-9 * float(self.demand.scalars[0])

    @property
    def homogeneous_good(self) -> bool:
        return self.demand.kind in ("linear", "isoelastic")

    @property
    def multi_product(self) -> bool:
        return self.n_products != self.n_firms

    def products_of(self, i: int) -> np.ndarray:
        """Indices of firm ``i``'s products."""
        return np.flatnonzero(self.owner == i)

    def firm_sum(self, per_product: np.ndarray) -> np.ndarray:
        """Aggregate a per-product array of shape (..., n_products) to firms, shape (..., n_firms)."""
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
            p = inverse_demand(self.demand, q) * shock
            with np.errstate(invalid="ignore"):
                pi = np.where(q > 0, (p - self.cost) * q, 0.0)
        else:
            p = a
            q = direct_demand(self.demand, p) * shock
            pi = (p - self.cost) * q
        return q, p, pi

    def profits(self, actions, shock=1.0) -> np.ndarray:
        """Per-product profits of action profiles, shape (..., n_products)."""
        return self.evaluate(actions, shock)[2]

    def firm_profits(self, actions, shock=1.0) -> np.ndarray:
        """Per-firm profits of action profiles, shape (..., n_firms)."""
        return self.firm_sum(self.evaluate(actions, shock)[2])

    def consumer_surplus(self, actions) -> np.ndarray:
        """Consumer surplus of action profiles, shape (...,)."""
        q, p, _ = self.evaluate(actions)
        return consumer_surplus(self.demand, q, p)

    def action_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Per-firm interval searched by best responses and punishments.

        Cournot: ``[0, min(capacity, q_max)]`` where ``q_max`` is a quantity beyond which extra output
        cannot raise the firm's profit. Bertrand: ``[0, p_max]``, ``p_max`` a price at which the firm
        sells nothing or a price above every candidate optimum (logit).
        """
        if "bounds" in self._cache:
            return self._cache["bounds"]
        n, d, c = self.n_products, self.demand, self.cost
        if d.kind == "linear":
            hi = np.full(n, d.scalars[0] / d.scalars[1]) if self.quantity_setting else np.full(n, d.scalars[0])
        elif d.kind == "differentiated":
            hi = d.vector / d.scalars[0] if self.quantity_setting else d.vector.copy()
        elif d.kind == "logit":
            # a firm's optimal markup never exceeds mu / s_0 evaluated with every price at cost, and
            # the joint-profit markup is mu / s_0 as well; twice that bounds every candidate.
            p = c[None, :]
            s = direct_demand(d, p)[0] / d.scalars[2]
            hi = c + 2.0 * d.scalars[1] / max(1e-300, 1.0 - s.sum()) + 10.0 * d.scalars[1]
        elif d.kind == "isoelastic":
            A, eps = d.scalars[0], d.scalars[1]
            # the market price falls below the lowest cost beyond this total quantity
            hi = np.full(n, (A / c.min()) ** eps)
        else:  # pragma: no cover
            raise ValueError(d.kind)
        if self.quantity_setting:
            hi = np.minimum(hi, self.capacity)
        out = (np.zeros(n), hi)
        self._cache["bounds"] = out
        return out


class Market(Parametrized):
    """An oligopoly market.

    Parameters
    ----------
    demand : Demand
        A demand system (:class:`~sim.models.demand.LinearDemand`, :class:`~sim.models.demand.DifferentiatedDemand`,
        :class:`~sim.models.demand.LogitDemand`, :class:`~sim.models.demand.IsoelasticDemand`).
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

    def clone(self, **changes):
        params = self.get_params()
        if "demand" not in changes:
            params["demand"] = self.demand.clone()
        params.update(changes)
        return type(self)(**params)

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
        key0, n0 = candidates[0]
        for key, n in candidates[1:]:
            if n != n0:
                raise InputError(f"{prefix}.{key}", f"must have one value per firm ({n0}, as {key0}), got {n} values")
        if not 2 <= n0 <= MAX_FIRMS:
            raise InputError(f"{prefix}.n_firms", f"must be an integer in [2, {MAX_FIRMS}], got {n0}")
        return n0

    def spec(self, prefix: str = "market") -> MarketSpec:
        """Validate the market and return its numeric form (cached until a parameter changes)."""
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
                "with capacity constraints is out of scope",
            )
        cap = p["capacity"] if p["capacity"] is not None else np.full(n, np.inf)
        if dspec.kind == "differentiated" and model == "bertrand" and dspec.scalars[1] >= 1.0:
            raise InputError(
                f"{prefix}.substitution",
                "price competition needs substitution < 1; use demand = 'linear' for a homogeneous good",
            )
        _check_costs(prefix, dspec, cost)
        if p["tick"] > 0 and not (dspec.kind == "linear" and model == "bertrand"):
            raise InputError(f"{prefix}.tick", "a price tick applies to homogeneous Bertrand only")
        owner, n_owners = _check_owner(prefix, self.owner, n, self.n_firms, dspec.kind)
        ms = MarketSpec(n, n_owners, owner, model, dspec, cost, cap, p["tick"], _CODES[(dspec.kind, model)])
        object.__setattr__(self, "_spec_cache", (prefix, ms))
        return ms

    # thin conveniences so that users need not touch the spec
    def profits(self, actions, shock=1.0):
        """Per-product profits of action profiles of shape (..., n_products)."""
        return self.spec().profits(actions, shock)

    def firm_profits(self, actions, shock=1.0):
        """Per-firm profits of action profiles of shape (..., n_products)."""
        return self.spec().firm_profits(actions, shock)

    def evaluate(self, actions, shock=1.0):
        """Quantities, prices and profits of action profiles of shape (..., n_firms)."""
        return self.spec().evaluate(actions, shock)

    def to_dict(self) -> dict:
        """Flat description in the layout of an experiment file's ``[market]`` table."""
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


def _check_owner(prefix, owner, n_products, n_firms, kind):
    """Validate an owner map (firm numbers 1..F, each used); returns 0-based owners and F."""
    if owner is None:
        return np.arange(n_products), n_products
    key = f"{prefix}.owner"
    vals = []
    for k, v in enumerate(owner):
        if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < 1:
            raise InputError(key, f"entry {k + 1} must be a firm number 1, 2, ..., got {v!r}")
        vals.append(int(v))
    F = max(vals)
    missing = sorted(set(range(1, F + 1)) - set(vals))
    if missing:
        raise InputError(key, f"firm numbers must run from 1 without gaps; firm {missing[0]} owns no product")
    if F < 2:
        raise InputError(key, "a market needs at least two firms")
    if n_firms is not None and n_firms != F:
        raise InputError(f"{prefix}.n_firms", f"is {n_firms} but the owner map names {F} firms")
    if kind in ("linear", "isoelastic") and F != n_products:
        raise InputError(
            key, f"multi-product firms need differentiated products; with {kind} demand a firm with several "
            "plants is one firm (combine them)",
        )
    return np.array(vals, dtype=np.int64) - 1, F


def _check_costs(prefix: str, d: DemandSpec, cost: np.ndarray) -> None:
    key = f"{prefix}.cost"
    if d.kind == "linear":
        a = d.scalars[0]
        bad = np.flatnonzero(cost >= a)
        if bad.size:
            i = bad[0]
            raise InputError(key, f"firm {i + 1}'s cost {cost[i]:g} is at or above the choke price {a:g}")
    elif d.kind == "differentiated":
        bad = np.flatnonzero(cost >= d.vector)
        if bad.size:
            i = bad[0]
            raise InputError(
                key, f"firm {i + 1}'s cost {cost[i]:g} is at or above its choke price (intercept {d.vector[i]:g})"
            )
    elif d.kind == "isoelastic":
        bad = np.flatnonzero(cost <= 0)
        if bad.size:
            raise InputError(key, f"isoelastic demand needs positive costs, firm {bad[0] + 1} has {cost[bad[0]]:g}")
        # with a tiny cost relative to the demand scale the monopoly output (scale/cost)^elasticity
        # overflows; a millionth of the scale is far below any calibrated market
        low = np.flatnonzero(cost < 1e-6 * d.scalars[0])
        if low.size:
            raise InputError(key, f"isoelastic demand needs costs of at least 1e-6 of the scale "
                                  f"({1e-6 * d.scalars[0]:g}); firm {low[0] + 1} has {cost[low[0]]:g}")


# keys of the flat [market] table, by demand system
DEMAND_KEYS = {
    "linear": ("intercept", "slope", "split"),
    "differentiated": ("intercept", "slope", "substitution"),
    "logit": ("quality", "outside", "mu", "size"),
    "isoelastic": ("scale", "elasticity"),
}
_MARKET_KEYS = ("model", "demand", "n_firms", "cost", "capacity", "tick", "owner")


def market_from_dict(table: dict, prefix: str = "market") -> Market:
    """Build a :class:`Market` from a flat table (an experiment file's ``[market]``).

    Unknown keys raise :class:`InputError` naming the key and the keys allowed for the chosen demand
    system. The market is validated before it is returned.
    """
    if not isinstance(table, dict):
        raise InputError(prefix, f"must be a table, got {table!r}")
    demand_name = table.get("demand", "linear")
    if demand_name not in DEMAND_TYPES:
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
    cls = {"linear": LinearDemand, "differentiated": DifferentiatedDemand, "logit": LogitDemand,
           "isoelastic": IsoelasticDemand}[demand_name]
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
