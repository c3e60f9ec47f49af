"""Price competition with capacity constraints for a homogeneous good (Bertrand-Edgeworth).

:class:`CapacityPricing` describes the market (capacities, demand, cost, rationing); its methods give
sales and profits at price profiles, the static equilibrium (pure where it exists, the mixed
Bertrand-Edgeworth equilibrium otherwise), minmax payoffs, collusive agreements and best deviations,
critical discount factors, partial cartels, and capacity changes in mergers. Conventions (demand,
rationing, ties) are in :mod:`sim.models._capacity_core`, the static equilibrium in
:mod:`sim.models._capacity_static`, collusion in :mod:`sim.models._capacity_collusion`, capacity
changes in :mod:`sim.models._capacity_changes` and the one-period play a stage core can compile in
:mod:`sim.models._capacity_reference`.

Model results are evidence under the stated assumptions, not proof of conduct; their use in a case
is a matter for the applicable law and qualified practitioners.

Examples
--------
>>> m = CapacityPricing([60.0, 40.0], reservation_price=10.0, market_size=80.0)
>>> round(m.critical_discount_factors().grim_market, 12)  # the largest capacity share, 60 / 100
0.6
"""

from __future__ import annotations

import numbers
from collections.abc import Sequence
from typing import Any

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Constraint, Options, Parametrized, PerFirm, Real, optional
from sim.models._capacity_changes import CapacityChange, capacity_symmetry, compare_capacity_change, firm_index
from sim.models._capacity_collusion import (
    RULES,
    Agreement,
    CollusionAnalysis,
    agreement,
    best_deviations,
    collusion_analysis,
    minmax_payoffs,
    partial_cartels,
    threshold,
)
from sim.models._capacity_core import (
    DEMAND_CODES,
    DEMANDS,
    RATIONING,
    RATIONING_CODES,
    CapacitySpec,
    profits,
    residual_demand,
    sales,
)
from sim.models._capacity_reference import play_period
from sim.models._capacity_static import StaticEquilibrium, residual_monopoly, static_equilibrium

__all__ = [
    "DEMANDS",
    "DEMAND_CODES",
    "RATIONING",
    "RATIONING_CODES",
    "RULES",
    "Agreement",
    "CapacityChange",
    "CapacityPricing",
    "CapacitySpec",
    "CollusionAnalysis",
    "StaticEquilibrium",
    "capacity_symmetry",
    "play_period",
    "threshold",
]

#: largest magnitude of capacities, prices and sizes (the bound of the other market models)
MAX_MAGNITUDE = 1e9


class _FirmNames(Constraint):
    """Distinct, non-empty firm names, one per firm."""

    def describe(self) -> str:
        return "a list of distinct firm names, one per firm"

    def check(self, key: str, value: Any, n: int | None = None):
        if not isinstance(value, Sequence) or isinstance(value, str):
            raise InputError(key, f"must be {self.describe()}, got {value!r}")
        if n is not None and len(value) != n:
            raise InputError(key, f"must name every firm ({n}), got {len(value)} names")
        for k, v in enumerate(value):
            if not isinstance(v, str) or not v.strip():
                raise InputError(key, f"entry {k + 1} must be a non-empty name, got {v!r}")
        if len(set(value)) != len(value):
            raise InputError(key, f"names must be distinct, got {list(value)!r}")
        return tuple(str(v) for v in value)

    def example_bad(self) -> Any:
        return ["A", "A"]


class CapacityPricing(Parametrized):
    """Price competition with capacity constraints for a homogeneous good.

    Parameters
    ----------
    capacity : list of float
        Each firm's capacity (> 0); at least two firms.
    reservation_price : float
        ``v``: the highest price at which anything sells (> cost).
    market_size : float
        ``M``: quantity demanded at price zero (inelastic demand: at every price up to ``v``).
    cost : float
        Common constant marginal cost (>= 0).
    demand : {"inelastic", "linear"}
        ``D(p) = M`` for ``p <= v`` (inelastic) or ``M (1 - p / v)`` (linear); 0 above ``v``.
    rationing : {"efficient", "proportional"}
        Who is served by a higher-priced firm (see :mod:`sim.models._capacity_core`).
    names : list of str, optional
        Firm names (default ``Firm 1``, ``Firm 2``, ...).
    """

    _constraints = {
        "capacity": PerFirm(Real(0, MAX_MAGNITUDE, closed="right"), broadcast=False),
        "reservation_price": Real(0, MAX_MAGNITUDE, closed="right"),
        "market_size": Real(0, MAX_MAGNITUDE, closed="right"),
        "cost": Real(0, MAX_MAGNITUDE),
        "demand": Options(*DEMANDS),
        "rationing": Options(*RATIONING),
        "names": optional(_FirmNames()),
    }

    def __init__(self, capacity, reservation_price=1.0, market_size=1.0, cost=0.0, demand="inelastic",
                 rationing="efficient", names=None):
        self.capacity = capacity
        self.reservation_price = reservation_price
        self.market_size = market_size
        self.cost = cost
        self.demand = demand
        self.rationing = rationing
        self.names = names

    def __setattr__(self, name, value):
        object.__setattr__(self, name, value)
        if name != "_spec_cache":
            object.__setattr__(self, "_spec_cache", None)

    # ---- validation -----------------------------------------------------------------------------
    def spec(self, prefix: str = "market") -> CapacitySpec:
        """Validate every parameter and return the numeric form (cached until a parameter changes).

        Parameters
        ----------
        prefix : str
            Key path of the market in error messages.

        Returns
        -------
        CapacitySpec

        Raises
        ------
        InputError
            Naming the key path (``market.capacity``, ``market.reservation_price``,
            ``market.rationing``, ...), the allowed values and what was given.
        """
        cached = getattr(self, "_spec_cache", None)
        if cached is not None and cached[0] == prefix:
            return cached[1]
        cap_value = self.capacity
        if isinstance(cap_value, numbers.Real) and not isinstance(cap_value, bool):
            raise InputError(f"{prefix}.capacity", f"must list each firm's capacity (two or more), got {cap_value!r}")
        if isinstance(cap_value, Sequence | np.ndarray) and not isinstance(cap_value, str) and len(cap_value) < 2:
            raise InputError(f"{prefix}.capacity", f"must list at least two firms' capacities, got {list(cap_value)!r}")
        n = len(cap_value) if isinstance(cap_value, Sequence | np.ndarray) and not isinstance(cap_value, str) else None
        out = {}
        for name, constraint in self._constraints.items():
            key = f"{prefix}.{name}"
            value = getattr(self, name)
            if name == "names":
                out[name] = None if value is None else constraint.inner.check(key, value, n)
            elif isinstance(constraint, PerFirm):
                out[name] = constraint.check(key, value, n)
            else:
                out[name] = constraint.check(key, value)
        if out["reservation_price"] <= out["cost"]:
            raise InputError(f"{prefix}.reservation_price", f"must be above the marginal cost {out['cost']:g} "
                             f"(nothing would be worth selling), got {out['reservation_price']:g}")
        names = out["names"] or tuple(f"Firm {i + 1}" for i in range(n))
        spec = CapacitySpec(out["capacity"], out["cost"], out["reservation_price"], out["market_size"], out["demand"],
                            out["rationing"], names)
        object.__setattr__(self, "_spec_cache", (prefix, spec))
        return spec

    @property
    def n_firms(self) -> int:
        """Number of firms (int)."""
        return self.spec().n_firms

    # ---- one period -------------------------------------------------------------------------------
    def sales(self, prices, weights=None) -> np.ndarray:
        """Quantities sold at price profiles.

        Parameters
        ----------
        prices : array_like of shape (..., n_firms)
        weights : array_like of shape (n_firms,), optional
            How tied firms share (default: capacities).

        Returns
        -------
        ndarray of shape (..., n_firms)
        """
        return sales(self.spec(), prices, weights)

    def profits(self, prices, weights=None) -> np.ndarray:
        """Profits at price profiles.

        Parameters
        ----------
        prices : array_like of shape (..., n_firms)
        weights : array_like of shape (n_firms,), optional
            How tied firms share (default: capacities).

        Returns
        -------
        ndarray of shape (..., n_firms)
        """
        return profits(self.spec(), prices, weights)

    def residual_demand(self, prices, firm: int) -> np.ndarray:
        """Quantity demanded at a firm's price once its cheaper rivals have sold.

        Parameters
        ----------
        prices : array_like of shape (..., n_firms)
        firm : int
            Index (0-based).

        Returns
        -------
        ndarray of shape (...,)
        """
        return residual_demand(self.spec(), prices, firm)

    def play_period(self, prices, weights=None) -> tuple[np.ndarray, np.ndarray]:
        """One period by the plain-Python reference (:func:`sim.models._capacity_reference.play_period`).

        Parameters
        ----------
        prices : array_like of shape (n_firms,)
        weights : array_like of shape (n_firms,), optional

        Returns
        -------
        sales, profits : ndarray of shape (n_firms,)
        """
        s = self.spec()
        n = s.n_firms
        p = [float(x) for x in np.asarray(prices, float)]
        w = [float(x) for x in (s.capacity if weights is None else np.asarray(weights, float))]
        q, pi, order = [0.0] * n, [0.0] * n, [0] * n
        status = play_period(p, [float(x) for x in s.capacity], w, s.cost, DEMAND_CODES[s.demand],
                             s.reservation_price, s.market_size, RATIONING_CODES[s.rationing], order, q, pi)
        if status != 0:
            raise InputError("weights", "tie-sharing weights must be positive")
        return np.array(q), np.array(pi)

    # ---- static game ------------------------------------------------------------------------------
    def static_equilibrium(self, method: str | None = None, n_grid: int = 81) -> StaticEquilibrium:
        """The static equilibrium (pure or mixed; see :mod:`sim.models._capacity_static`).

        Parameters
        ----------
        method : {None, "closed_form", "symmetric", "numeric"}
        n_grid : int
            Price points of the numeric method.

        Returns
        -------
        StaticEquilibrium
        """
        return static_equilibrium(self.spec(), method, n_grid)

    def residual_monopoly(self) -> tuple[np.ndarray, np.ndarray]:
        """Each firm's residual-monopoly price and profit behind rivals selling their capacities.

        Returns
        -------
        prices, profits : ndarray of shape (n_firms,)
        """
        s = self.spec()
        out = np.array([residual_monopoly(s, i) for i in range(s.n_firms)])
        return out[:, 0], out[:, 1]

    def minmax(self) -> np.ndarray:
        """Each firm's minmax payoff.

        Returns
        -------
        ndarray of shape (n_firms,)
        """
        return minmax_payoffs(self.spec())

    # ---- collusion --------------------------------------------------------------------------------
    def agreement(self, rule: str = "proportional", shares=None, price=None) -> Agreement:
        """The collusive agreement (see :func:`sim.models._capacity_collusion.agreement`).

        Parameters
        ----------
        rule : {"proportional", "equal", "given"}
        shares : array_like of shape (n_firms,), optional
        price : float, optional

        Returns
        -------
        Agreement
        """
        return agreement(self.spec(), rule, shares, price)

    def best_deviations(self, agreed: Agreement) -> tuple[np.ndarray, np.ndarray, tuple]:
        """Each firm's best deviation from an agreement.

        Parameters
        ----------
        agreed : Agreement

        Returns
        -------
        profits, prices : ndarray of shape (n_firms,)
        kinds : tuple of str
        """
        return best_deviations(self.spec(), agreed)

    def critical_discount_factors(self, rule: str = "proportional", shares=None, price=None,
                                  method: str | None = None) -> CollusionAnalysis:
        """Critical discount factors per firm under Nash reversion and minmax punishments.

        Parameters
        ----------
        rule, shares, price :
            The agreement.
        method : str, optional
            Method of the static equilibrium.

        Returns
        -------
        CollusionAnalysis
        """
        return collusion_analysis(self.spec(), rule, shares, price, method)

    def partial_cartels(self, members, sharing: str = "own") -> dict:
        """Outcomes of partial cartels (see :func:`sim.models._capacity_collusion.partial_cartels`).

        Parameters
        ----------
        members : array_like of bool, shape (n_cartels, n_firms)
        sharing : {"own", "proportional"}

        Returns
        -------
        dict
            ``profits``, ``deviation`` of shape (n_cartels, n_firms), ``prices`` of shape
            (n_cartels,), ``nash`` of shape (n_firms,).
        """
        return partial_cartels(self.spec(), members, sharing)

    # ---- capacity changes -------------------------------------------------------------------------
    def merge(self, firms, name: str | None = None) -> CapacityPricing:
        """The market after some firms merge: one firm with their summed capacity, in the place of
        the first of them.

        Parameters
        ----------
        firms : sequence of int or str
            Two or more firms, by number (1, 2, ...) or name.
        name : str, optional
            Name of the merged firm (default: the names joined by ``+``).

        Returns
        -------
        CapacityPricing
        """
        s = self.spec()
        if not isinstance(firms, Sequence) or isinstance(firms, str) or len(firms) < 2:
            raise InputError("merger.firms", f"must list two or more firms, got {firms!r}")
        idx = sorted({firm_index(s.names, f, "merger.firms") for f in firms})
        if len(idx) != len(firms):
            raise InputError("merger.firms", f"a firm is listed twice, got {list(firms)!r}")
        if len(idx) == s.n_firms:
            raise InputError("merger.firms", "merging every firm leaves a monopoly; the collusion analysis needs "
                                             "two or more firms")
        cap, names = [], []
        for i in range(s.n_firms):
            if i == idx[0]:
                cap.append(float(s.capacity[idx].sum()))
                names.append(name or " + ".join(s.names[j] for j in idx))
            elif i not in idx:
                cap.append(float(s.capacity[i]))
                names.append(s.names[i])
        return self.clone(capacity=cap, names=names)

    def move_capacity(self, source, amount: float, target=None, new_name: str = "Entrant") -> CapacityPricing:
        """The market after capacity moves from one firm to another or to a new entrant.

        Parameters
        ----------
        source : int or str
            The firm giving up capacity (number from 1 or name).
        amount : float
            Capacity moved (positive, below the source's capacity).
        target : int or str, optional
            The receiving firm (a transfer); None for a divestiture to a new firm.
        new_name : str
            Name of the new firm.

        Returns
        -------
        CapacityPricing
        """
        s = self.spec()
        i = firm_index(s.names, source, "change.source")
        a = Real(0, MAX_MAGNITUDE, closed="neither").check("change.amount", amount)
        if a >= s.capacity[i]:
            raise InputError("change.amount", f"must be below {s.names[i]}'s capacity {s.capacity[i]:g} (the firm "
                                              f"keeps some capacity), got {a:g}")
        cap = s.capacity.copy()
        cap[i] -= a
        names = list(s.names)
        if target is None:
            if new_name in names:
                raise InputError("change.new_name", f"a firm is already named {new_name!r}")
            return self.clone(capacity=[*cap.tolist(), a], names=[*names, new_name])
        j = firm_index(s.names, target, "change.target")
        if j == i:
            raise InputError("change.target", "capacity cannot move from a firm to itself")
        cap[j] += a
        return self.clone(capacity=cap.tolist(), names=names)

    def compare(self, other: CapacityPricing, description: str = "", **agreement_options) -> CapacityChange:
        """Collusion in this market (before) and in ``other`` (after a capacity change).

        Parameters
        ----------
        other : CapacityPricing
        description : str
        **agreement_options
            ``rule``, ``shares``, ``price``, ``method`` as in :meth:`critical_discount_factors`.

        Returns
        -------
        CapacityChange
        """
        return compare_capacity_change(self.critical_discount_factors(**agreement_options),
                                       other.critical_discount_factors(**agreement_options), description)

    def clone(self, **changes) -> CapacityPricing:
        """A new market with the same parameters, some changed (names are dropped when the
        capacities change and no names are given).

        Parameters
        ----------
        **changes
            Constructor arguments to change.

        Returns
        -------
        CapacityPricing
        """
        params = self.get_params()
        params.update(changes)
        if "capacity" in changes and "names" not in changes and self.names is not None:
            params["names"] = None
        return type(self)(**params)

    # ---- serialisation ---------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Parameters as a plain table (lists for arrays).

        Returns
        -------
        dict
        """
        out = {}
        for k, v in self.get_params().items():
            if v is None:
                continue
            out[k] = v.tolist() if isinstance(v, np.ndarray) else (list(v) if isinstance(v, tuple) else v)
        return out

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "market") -> CapacityPricing:
        """Build and validate a market from :meth:`to_dict`'s table (unknown keys refused).

        Parameters
        ----------
        d : dict
        prefix : str
            Key path of the table in error messages.

        Returns
        -------
        CapacityPricing
        """
        if not isinstance(d, dict):
            raise InputError(prefix, f"must be a table, got {d!r}")
        allowed = cls._param_names()
        for k in d:
            if k not in allowed:
                raise InputError(f"{prefix}.{k}", f"unknown key; allowed: {', '.join(allowed)}")
        if "capacity" not in d:
            raise InputError(f"{prefix}.capacity", "missing (each firm's capacity)")
        m = cls(**d)
        m.spec(prefix)
        return m
