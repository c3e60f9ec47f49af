"""Collusion in the repeated capacity-constrained price game.

The agreement: every firm charges the agreed price ``p_C`` and the quantity demanded there is split
by a rule. ``p_C`` is the reservation price with inelastic demand and the joint-profit price
``max((v + c) / 2, P(K))`` with linear demand (or a price the user gives). Rules:

* ``proportional``: shares proportional to capacities (the agreement of Compte, Jenny and Rey, 2002,
  European Economic Review 46(1), and of Brock and Scheinkman, 1985, with equal capacities);
* ``equal``: equal quantities, a firm that cannot sell its equal part selling its capacity and the
  others sharing the rest equally;
* ``given``: shares the user gives (each within the firm's capacity).

A firm's best deviation: it undercuts the agreed price by an arbitrarily small amount and sells up to
its capacity, or charges the best price below ``p_C`` if its capacity covers more than the demand at
``p_C`` (the continuous-price supremum is reported); or it prices above the others and sells its
residual at the best such price. The largest of these is its deviation profit.

Punishments. Nash reversion (grim trigger; Friedman, 1971) uses the static equilibrium payoffs. The
harshest punishment holds each firm to its minmax payoff: its rivals price at zero (prices cannot be
negative) and sell first, and it sells its residual demand at the best price. The minmax bounds
every punishment from below (Abreu, 1988, Econometrica 56(2)); in capacity-constrained price games
optimal penal codes approach it when firms are patient (Lambson, 1987, Review of Economic Studies
54(3)). With efficient rationing the largest firm's static equilibrium payoff equals its minmax
payoff, so for it Nash reversion is already the harshest punishment (Compte, Jenny and Rey, 2002).
With proportional rationing the minmax is searched over a common price of the rivals.

Critical discount factor of firm i: ``(pi_D - pi_C) / (pi_D - pi_P)`` with ``pi_P`` the punishment
payoff; 0 when deviating does not pay; ``nan`` when the firm earns less under the agreement than in
the punishment (no discount factor below one holds it). The market's threshold is the largest; that
firm binds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from sim.core.errors import InputError
from sim.core.text import CAUTION
from sim.models._capacity_core import CapacitySpec
from sim.models._capacity_static import static_equilibrium

__all__ = ["RULES", "Agreement", "CollusionAnalysis", "agreement", "best_deviations", "collusion_analysis",
           "minmax_payoffs", "threshold"]

RULES = ("proportional", "equal", "given")
_TOL = 1e-12


@dataclass(frozen=True)
class Agreement:
    """A collusive agreement.

    Attributes
    ----------
    rule : {"proportional", "equal", "given"}
    price : float
        The agreed price ``p_C``.
    quantities : ndarray of shape (n_firms,)
        Each firm's sales at ``p_C``.
    shares : ndarray of shape (n_firms,)
        ``quantities / D(p_C)``.
    profits : ndarray of shape (n_firms,)
    """

    rule: str
    price: float
    quantities: np.ndarray
    shares: np.ndarray
    profits: np.ndarray

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {"rule": self.rule, "price": self.price, "quantities": self.quantities.tolist(),
                "shares": self.shares.tolist(), "profits": self.profits.tolist()}

    @classmethod
    def from_dict(cls, d: dict) -> Agreement:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        Agreement
        """
        return cls(d["rule"], float(d["price"]), np.asarray(d["quantities"], float), np.asarray(d["shares"], float),
                   np.asarray(d["profits"], float))


def _none(x: float):
    return None if x is None or not math.isfinite(x) else float(x)


def _nan(x):
    return math.nan if x is None else float(x)


@dataclass(frozen=True)
class CollusionAnalysis:
    """Critical discount factors of an agreement in a capacity-constrained price game.

    Attributes
    ----------
    names : tuple of str
    capacity : ndarray of shape (n_firms,)
    agreement : Agreement
    deviation_profits, deviation_prices : ndarray of shape (n_firms,)
        Best one-shot deviation (a continuous-price supremum when the deviator undercuts ``p_C``).
    deviation_kinds : tuple of str
        ``"undercut"``, ``"above"`` (residual at a higher price) or ``"none"`` (deviating does not pay).
    static_kind : str
        Kind of the static equilibrium (``"market_clearing"``, ``"cost_pricing"`` or ``"mixed"``).
    nash_profits, minmax_profits : ndarray of shape (n_firms,)
    grim, harshest : ndarray of shape (n_firms,)
        Per-firm critical discount factors under Nash reversion and under minmax punishments.
    grim_market, harshest_market : float
        Largest per-firm threshold (``nan`` if a firm cannot be held).
    grim_binding, harshest_binding : int
        Index (0-based) of the binding firm.
    nash_is_minmax : ndarray of bool, shape (n_firms,)
        Firms for which Nash reversion is already the harshest punishment.
    grim_ties, harshest_ties : tuple of int
        Every firm whose threshold equals the market's to within the accuracy of the computation
        (agreements with shares proportional to capacity often give several firms the same
        threshold; then the binding firm is one of them and the others bind as much).
    notes : tuple of str
    """

    names: tuple
    capacity: np.ndarray
    agreement: Agreement
    deviation_profits: np.ndarray
    deviation_prices: np.ndarray
    deviation_kinds: tuple
    static_kind: str
    nash_profits: np.ndarray
    minmax_profits: np.ndarray
    grim: np.ndarray
    harshest: np.ndarray
    grim_market: float
    harshest_market: float
    grim_binding: int
    harshest_binding: int
    nash_is_minmax: np.ndarray
    grim_ties: tuple = ()
    harshest_ties: tuple = ()
    notes: tuple = field(default_factory=tuple)

    @property
    def binding_name(self) -> str:
        """Name of the firm that binds under Nash reversion.

        Returns
        -------
        str
        """
        return self.names[self.grim_binding]

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {
            "names": list(self.names), "capacity": self.capacity.tolist(), "agreement": self.agreement.to_dict(),
            "deviation_profits": self.deviation_profits.tolist(), "deviation_prices": self.deviation_prices.tolist(),
            "deviation_kinds": list(self.deviation_kinds), "static_kind": self.static_kind,
            "nash_profits": self.nash_profits.tolist(), "minmax_profits": self.minmax_profits.tolist(),
            "grim": [_none(x) for x in self.grim], "harshest": [_none(x) for x in self.harshest],
            "grim_market": _none(self.grim_market), "harshest_market": _none(self.harshest_market),
            "grim_binding": self.grim_binding, "harshest_binding": self.harshest_binding,
            "nash_is_minmax": [bool(x) for x in self.nash_is_minmax], "grim_ties": list(self.grim_ties),
            "harshest_ties": list(self.harshest_ties), "notes": list(self.notes), "caution": CAUTION,
        }

    @classmethod
    def from_dict(cls, d: dict) -> CollusionAnalysis:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        CollusionAnalysis
        """
        arr = lambda k: np.asarray(d[k], float)  # noqa: E731
        nan_arr = lambda k: np.array([_nan(x) for x in d[k]], float)  # noqa: E731
        return cls(tuple(d["names"]), arr("capacity"), Agreement.from_dict(d["agreement"]), arr("deviation_profits"),
                   arr("deviation_prices"), tuple(d["deviation_kinds"]), d["static_kind"], arr("nash_profits"),
                   arr("minmax_profits"), nan_arr("grim"), nan_arr("harshest"), _nan(d["grim_market"]),
                   _nan(d["harshest_market"]), int(d["grim_binding"]), int(d["harshest_binding"]),
                   np.asarray(d["nash_is_minmax"], bool), tuple(d["grim_ties"]), tuple(d["harshest_ties"]),
                   tuple(d["notes"]))


# --------------------------------------------------------------------------------------------------
# Agreement, deviations, minmax
# --------------------------------------------------------------------------------------------------


def default_price(spec: CapacitySpec) -> float:
    """The default agreed price.

    Parameters
    ----------
    spec : CapacitySpec

    Returns
    -------
    float
        The reservation price (inelastic) or the joint-profit price ``max((v + c) / 2, P(K))``
        (linear).
    """
    if not spec.linear:
        return spec.reservation_price
    return max(spec.monopoly_price, spec.clearing_price(spec.total_capacity))


def agreement(spec: CapacitySpec, rule: str = "proportional", shares=None, price=None) -> Agreement:
    """The agreed outcome (see the module notes).

    Parameters
    ----------
    spec : CapacitySpec
    rule : {"proportional", "equal", "given"}
    shares : array_like of shape (n_firms,), optional
        Required with ``rule="given"``: fractions of the demand at ``p_C``, summing to one.
    price : float, optional
        Agreed price in ``(c, v]`` (default: :func:`default_price`).

    Returns
    -------
    Agreement
    """
    n, cap = spec.n_firms, spec.capacity
    if rule not in RULES:
        raise InputError("collusion.rule", f"must be one of {', '.join(map(repr, RULES))}, got {rule!r}")
    if price is None:
        p = default_price(spec)
    else:
        if isinstance(price, bool) or not isinstance(price, int | float) or not math.isfinite(price):
            raise InputError("collusion.price", f"must be a number, got {price!r}")
        p = float(price)
        if not spec.cost < p <= spec.reservation_price:
            raise InputError("collusion.price", f"must be above the cost {spec.cost:g} and at most the reservation "
                                                f"price {spec.reservation_price:g}, got {p:g}")
    D = float(spec.quantity(p))
    K = spec.total_capacity
    if K <= D * (1 + 1e-12):
        raise InputError("market.capacity", f"total capacity {K:g} does not exceed the quantity demanded at the agreed "
                                            f"price ({D:g} at {p:g}): every firm sells all it can without an "
                                            "agreement, so there is no collusion to sustain")
    if rule == "proportional":
        q = cap / K * D
    elif rule == "equal":
        q = _equal_split(D, cap)
    else:
        q = _given(shares, D, cap, n, spec.names)
    if rule != "given" and shares is not None:
        raise InputError("collusion.shares", f"only used with rule = 'given', not {rule!r}")
    return Agreement(rule, p, q, q / D, (p - spec.cost) * q)


def _equal_split(D, cap):
    q = np.zeros(cap.size)
    left = list(range(cap.size))
    rest = D
    while left:
        each = rest / len(left)
        full = [j for j in left if cap[j] <= each]
        if not full:
            q[left] = each
            break
        for j in full:
            q[j] = cap[j]
            rest -= cap[j]
            left.remove(j)
    return q


def _given(shares, D, cap, n, names):
    key = "collusion.shares"
    if shares is None:
        raise InputError(key, "shares are needed with rule = 'given' (one per firm, summing to one)")
    s = np.asarray(shares, dtype=float) if not isinstance(shares, str) else None
    if s is None or s.shape != (n,) or not np.all(np.isfinite(s)) or np.any(s < 0):
        raise InputError(key, f"must be {n} shares in [0, 1], got {shares!r}")
    if abs(s.sum() - 1.0) > 1e-9:
        raise InputError(key, f"must sum to one, got {s.sum():.12g}")
    q = s * D
    over = np.flatnonzero(q > cap * (1 + 1e-12))
    if over.size:
        i = int(over[0])
        raise InputError(key, f"{names[i]}'s share {s[i]:g} is {q[i]:g} units, above its capacity {cap[i]:g}")
    return q


def _undercut(spec: CapacitySpec, k: float, p_c: float) -> tuple[float, float]:
    """Supremum of ``(p - c) min(k, D(p))`` over ``p < p_c`` and where it is reached (``p_c`` itself
    for the limit from below)."""
    c = spec.cost
    if spec.linear:
        peak = max(spec.monopoly_price, spec.clearing_price(k))
    else:
        peak = spec.reservation_price
    p = min(p_c, peak)
    return p, (p - c) * min(k, float(spec.quantity(p)))


def _above(spec: CapacitySpec, i: int, p_c: float) -> tuple[float, float]:
    """Best price at or above ``p_c`` and its profit when the rivals, all at ``p_c``, sell first."""
    k = float(spec.capacity[i])
    D_c = float(spec.quantity(p_c))
    sold = min(spec.total_capacity - k, D_c)
    if spec.rationing == "efficient":
        scale, minus = 1.0, sold
    else:
        scale, minus = (1.0 - sold / D_c if D_c > 0 else 0.0), 0.0
    p, _ = spec.best_against_residual(k, scale, minus)
    p = max(p, p_c)
    return p, (p - spec.cost) * min(k, max(0.0, scale * float(spec.quantity(p)) - minus))


def best_deviations(spec: CapacitySpec, agreed: Agreement) -> tuple[np.ndarray, np.ndarray, tuple]:
    """Each firm's best one-shot deviation from the agreement.

    Parameters
    ----------
    spec : CapacitySpec
    agreed : Agreement

    Returns
    -------
    profits, prices : ndarray of shape (n_firms,)
    kinds : tuple of str
    """
    n = spec.n_firms
    prof, price, kinds = np.empty(n), np.empty(n), []
    for i in range(n):
        pu, vu = _undercut(spec, float(spec.capacity[i]), agreed.price)
        pa, va = _above(spec, i, agreed.price)
        best = max(vu, va)
        if best <= agreed.profits[i] + _TOL * max(1.0, abs(agreed.profits[i])):
            prof[i], price[i] = agreed.profits[i], agreed.price
            kinds.append("none")
        elif vu >= va:
            prof[i], price[i] = vu, pu
            kinds.append("undercut")
        else:
            prof[i], price[i] = va, pa
            kinds.append("above")
    return prof, price, tuple(kinds)


def minmax_payoffs(spec: CapacitySpec) -> np.ndarray:
    """Each firm's minmax payoff (see the module notes).

    Parameters
    ----------
    spec : CapacitySpec

    Returns
    -------
    ndarray of shape (n_firms,)
    """
    n, M = spec.n_firms, spec.market_size
    out = np.empty(n)
    for i in range(n):
        k = float(spec.capacity[i])
        rest = spec.total_capacity - k
        if spec.rationing == "efficient" or not spec.linear:
            out[i] = spec.best_against_residual(k, 1.0, min(rest, M))[1]
            continue

        def worst(r, k=k, rest=rest):
            below = _undercut(spec, k, r)[1] if r > spec.cost else 0.0
            D_r = float(spec.quantity(r))
            phi = 1.0 - min(rest, D_r) / D_r if D_r > 0 else 1.0
            p, _ = spec.best_against_residual(k, phi, 0.0)
            p = max(p, r)
            above = (p - spec.cost) * min(k, phi * float(spec.quantity(p)))
            return max(below, above)

        rs = np.linspace(0.0, spec.reservation_price, 401)
        vals = np.array([worst(r) for r in rs])
        j = int(np.argmin(vals))
        lo, hi = rs[max(j - 1, 0)], rs[min(j + 1, rs.size - 1)]
        res = optimize.minimize_scalar(worst, bounds=(lo, hi), method="bounded", options={"xatol": 1e-13})
        out[i] = min(float(vals[j]), float(res.fun))
    return out


def threshold(collusive, deviation, punishment) -> np.ndarray:
    """Critical discount factor ``(pi_D - pi_C) / (pi_D - pi_P)``, elementwise (conventions in the
    module notes).

    Parameters
    ----------
    collusive, deviation, punishment : array_like
        Profits under the agreement, of the best deviation, and in the punishment.

    Returns
    -------
    ndarray of the broadcast shape
    """
    c, d, p = (np.asarray(x, dtype=float) for x in (collusive, deviation, punishment))
    scale = np.maximum(1.0, np.maximum(np.abs(c), np.abs(d)))
    gain, loss = d - c, c - p
    tol = _TOL * scale
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(loss < -tol, np.nan, np.where(gain <= tol, 0.0,
                                                       np.where(loss <= tol, np.nan, gain / (gain + loss))))


def _market(per_firm: np.ndarray, tol: float = 1e-9) -> tuple[float, int, tuple]:
    """Market threshold, binding firm and the firms tied with it (within ``tol``)."""
    if np.any(np.isnan(per_firm)):
        bad = np.flatnonzero(np.isnan(per_firm))
        return math.nan, int(bad[0]), tuple(int(i) for i in bad)
    k = int(np.argmax(per_firm))
    ties = tuple(int(i) for i in np.flatnonzero(per_firm >= per_firm[k] - tol))
    return float(per_firm[k]), k, ties


def collusion_analysis(spec: CapacitySpec, rule: str = "proportional", shares=None, price=None,
                       method: str | None = None) -> CollusionAnalysis:
    """Critical discount factors of an agreement under Nash reversion and minmax punishments.

    Parameters
    ----------
    spec : CapacitySpec
    rule, shares, price :
        The agreement (see :func:`agreement`).
    method : str, optional
        Method of the static equilibrium (see :func:`~sim.models._capacity_static.static_equilibrium`).

    Returns
    -------
    CollusionAnalysis
    """
    agreed = agreement(spec, rule, shares, price)
    dev, dev_p, kinds = best_deviations(spec, agreed)
    eq = static_equilibrium(spec, method)
    nash = eq.payoffs
    mm = minmax_payoffs(spec)
    grim = threshold(agreed.profits, dev, nash)
    harsh = threshold(agreed.profits, dev, mm)
    # a numeric static equilibrium is accurate to about its certificate: thresholds that close tie
    gm, gb, gt = _market(grim, 1e-9 + (10 * eq.max_gain if eq.method == "numeric" else 0.0))
    hm, hb, ht = _market(harsh)
    scale = max(1.0, float(np.abs(nash).max()))
    same = np.abs(nash - mm) <= 1e-9 * scale + max(eq.max_gain, 0.0) * scale
    notes = []
    if eq.method == "numeric":
        notes.append(f"static equilibrium computed on a price grid; largest gain from deviating from it "
                     f"{eq.max_gain:.2%} of the largest payoff")
    return CollusionAnalysis(spec.names, spec.capacity.copy(), agreed, dev, dev_p, kinds, eq.kind, nash, mm, grim,
                             harsh, gm, hm, gb, hb, same, gt, ht, tuple(notes))


def partial_cartels(spec: CapacitySpec, members: np.ndarray, sharing: str = "own") -> dict:
    """Outcomes of partial cartels: the members charge a common price above a fringe that sells its
    whole capacity just below it (the umbrella of Bos and Harrington, 2010, "Endogenous cartel
    formation with heterogeneous firms", RAND Journal of Economics 41(1)).

    The cartel's price maximises its profit on the demand the fringe leaves,
    ``(p - c) min(K_S, D(p) - K_F)`` (the same with either rationing rule, the fringe being just
    below); the members share it by capacity (``sharing="own"``: each sells in proportion to its
    capacity) or in proportion to their static equilibrium profits (``"proportional"``). A member's
    deviation undercuts everyone (or prices above, whichever pays more). A cartel whose members sell
    nothing (the fringe covers the demand at every price above cost) changes nothing: its members
    keep their static equilibrium profits and its thresholds are ``nan``.

    Parameters
    ----------
    spec : CapacitySpec
    members : ndarray of bool, shape (n_cartels, n_firms)
    sharing : {"own", "proportional"}

    Returns
    -------
    dict
        ``profits`` and ``deviation`` of shape (n_cartels, n_firms) (deviation ``nan`` for
        outsiders), ``prices`` of shape (n_cartels,), ``nash`` of shape (n_firms,).
    """
    members = np.asarray(members, dtype=bool)
    n = spec.n_firms
    nash = static_equilibrium(spec).payoffs
    cap = spec.capacity
    m = members.shape[0]
    profits = np.tile(nash, (m, 1))
    deviation = np.full((m, n), np.nan)
    prices = np.full(m, np.nan)
    c = spec.cost
    for r in range(m):
        S = members[r]
        K_S, K_F = float(cap[S].sum()), float(cap[~S].sum())
        p, v = spec.best_against_residual(K_S, 1.0, K_F)
        if v <= 0 or S.sum() < 2:
            continue
        prices[r] = p
        profits[r, ~S] = (p - c) * cap[~S]
        if sharing == "own":
            profits[r, S] = v * cap[S] / K_S
        else:
            w = nash[S] if nash[S].sum() > 0 else np.ones(int(S.sum()))
            profits[r, S] = v * w / w.sum()
        for i in np.flatnonzero(S):
            vu = _undercut(spec, float(cap[i]), p)[1]
            va = _above(spec, int(i), p)[1]
            deviation[r, i] = max(vu, va, profits[r, i])
    return {"profits": profits, "deviation": deviation, "prices": prices, "nash": nash}
