"""The static (one-shot) equilibrium of price competition with capacity constraints.

Pure-strategy equilibria (``K`` total capacity, ``k_L`` the largest capacity, ``c`` the cost):

* market clearing: every firm sells its capacity at ``P(K)``. With inelastic demand this holds when
  ``K <= M`` (at the price ``v``). With linear demand and efficient rationing it holds when the
  largest firm would not raise its price above ``P(K)``: its residual marginal revenue at capacity is
  not negative, ``P(K) - c >= (v / M) k_L`` (Kreps and Scheinkman, 1983, the capacities inside the
  Cournot best responses); with proportional rationing a firm that raises its price keeps the share
  ``k_i / K`` of every consumer group and the condition is ``P(K) >= (v + c) / 2`` (Davidson and
  Deneckere, 1986).
* price equal to cost: the rivals of every firm can serve the whole demand at cost,
  ``K - k_L >= D(c)`` (both rationing rules).

Otherwise there is no pure-strategy equilibrium and the firms mix (Bertrand-Edgeworth). With
efficient rationing the largest firm's equilibrium payoff is its residual-monopoly profit
``max_p (p - c) min(k_L, D(p) - (K - k_L))``, earned at the top of the support ``p_high`` (its
residual-monopoly price); the bottom of the support ``p_low`` solves
``(p_low - c) min(k_L, D(p_low)) = payoff_L`` (Kreps and Scheinkman, 1983; Osborne and Pitchik, 1986,
JET 38(2), for the duopoly with any capacities; De Francesco and Salvadori, 2010, and Hirata, 2009,
B.E. Journal of Theoretical Economics 9(1), for more firms, where smaller firms can earn more than
``(p_low - c) k_i``).

Methods
-------
``closed_form``: the duopoly (Osborne and Pitchik, 1986: each firm's distribution from the other's
indifference, the larger firm with an atom at ``p_high`` when capacities differ).
``symmetric``: n firms of equal capacity (a common distribution from the indifference condition,
solved at each price by a root finder).
``numeric``: otherwise, the game on a price grid solved by following the logit quantal-response
path to high precision (McKelvey and Palfrey, 1995, Games and Economic Behavior 10(1); Turocy, 2005,
Games and Economic Behavior 51(2)) with Newton steps, a coarse grid first and a fine grid over the
support it finds; the answer is certified by the largest gain any firm could make by deviating to
any price (grid prices, prices just below them, and a fine sweep), reported as ``max_gain``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from sim.core.errors import InputError
from sim.models._capacity_core import CapacitySpec
from sim.models._capacity_mixed import StaticEquilibrium
from sim.models._capacity_numeric import numeric_equilibrium

__all__ = ["StaticEquilibrium", "static_equilibrium"]


# --------------------------------------------------------------------------------------------------
# Regions
# --------------------------------------------------------------------------------------------------


def market_clearing(spec: CapacitySpec) -> bool:
    """Whether every firm selling its capacity at the market-clearing price is an equilibrium.

    Parameters
    ----------
    spec : CapacitySpec

    Returns
    -------
    bool
    """
    K, kL, c = spec.total_capacity, float(spec.capacity.max()), spec.cost
    if not spec.linear:
        return K <= spec.market_size
    p = spec.clearing_price(K)
    if spec.rationing == "efficient":
        return p - c >= spec.reservation_price / spec.market_size * kL
    return p >= spec.monopoly_price


def cost_pricing(spec: CapacitySpec) -> bool:
    """Whether the rivals of every firm can serve the whole demand at cost (price = cost).

    Parameters
    ----------
    spec : CapacitySpec

    Returns
    -------
    bool
    """
    return spec.total_capacity - float(spec.capacity.max()) >= float(spec.quantity(spec.cost))


def residual_monopoly(spec: CapacitySpec, i: int) -> tuple[float, float]:
    """Firm i as a monopolist on what its rivals leave when they sell their whole capacities first.

    Parameters
    ----------
    spec : CapacitySpec
    i : int
        Index (0-based).

    Returns
    -------
    price, profit : float
    """
    return spec.best_against_residual(float(spec.capacity[i]), 1.0, spec.total_capacity - float(spec.capacity[i]))


# --------------------------------------------------------------------------------------------------
# Public entry
# --------------------------------------------------------------------------------------------------


def static_equilibrium(spec: CapacitySpec, method: str | None = None, n_grid: int = 81) -> StaticEquilibrium:
    """The static equilibrium (see the module notes).

    Parameters
    ----------
    spec : CapacitySpec
    method : {None, "closed_form", "symmetric", "numeric"}
        Force a method for the mixed region (None: the closed form where one exists).
    n_grid : int
        Price points of the fine grid of the numeric method.

    Returns
    -------
    StaticEquilibrium
    """
    key = ("static", method, n_grid)
    if key in spec._cache:
        return spec._cache[key]
    n = spec.n_firms
    if market_clearing(spec):
        p = spec.clearing_price(spec.total_capacity) if spec.linear else spec.reservation_price
        out = _pure(spec, "market_clearing", p, spec.capacity * (p - spec.cost))
    elif cost_pricing(spec):
        out = _pure(spec, "cost_pricing", spec.cost, np.zeros(n))
    else:
        if method is None:
            if n == 2 and (spec.rationing == "efficient" or not spec.linear):
                method = "closed_form"
            elif np.all(spec.capacity == spec.capacity[0]) and (spec.rationing == "efficient" or not spec.linear):
                method = "symmetric"
            else:
                method = "numeric"
        if method in ("closed_form", "symmetric") and spec.linear and spec.rationing == "proportional":
            raise InputError("market.rationing", "the closed forms of the mixed equilibrium assume efficient "
                                                 "rationing; use the numeric method")
        if method == "closed_form":
            if n != 2:
                raise InputError("method", f"the closed form is for two firms, the market has {n}")
            out = _duopoly(spec)
        elif method == "symmetric":
            if not np.all(spec.capacity == spec.capacity[0]):
                raise InputError("method", "the symmetric form needs equal capacities")
            out = _symmetric(spec)
        elif method == "numeric":
            out = numeric_equilibrium(spec, n_grid)
        else:
            raise InputError("method", f"must be one of 'closed_form', 'symmetric', 'numeric', got {method!r}")
    spec._cache[key] = out
    return out


def _pure(spec, kind, price, payoffs):
    n = spec.n_firms
    p = np.full(n, float(price))
    return StaticEquilibrium(kind, "pure", np.asarray(payoffs, float), p, p.copy(), np.ones(n), np.array([price]),
                             np.ones((n, 1)))


def _lowest_price(spec: CapacitySpec, k: float, payoff: float, p_high: float) -> float:
    """``p_low`` solving ``(p - c) min(k, D(p)) = payoff`` on ``[c, p_high]`` (the left side rises
    there because ``p_high`` is at most the price that maximises it)."""
    c = spec.cost
    p = c + payoff / k
    if float(spec.quantity(p)) >= k:
        return p

    def g(x):
        return (x - c) * min(k, float(spec.quantity(x))) - payoff

    return float(optimize.brentq(g, c, p_high, xtol=1e-15 * max(1.0, p_high), rtol=1e-15, maxiter=500))


def _duopoly(spec: CapacitySpec, n_points: int = 401) -> StaticEquilibrium:
    """Mixed equilibrium of the duopoly with efficient rationing (Kreps and Scheinkman, 1983;
    Osborne and Pitchik, 1986). ``L`` is the larger firm, ``S`` the smaller:

    * ``p_high`` = L's residual-monopoly price, ``payoff_L = (p_high - c)(D(p_high) - k_S)``;
    * ``p_low`` from ``(p_low - c) min(k_L, D(p_low)) = payoff_L``; ``payoff_S = (p_low - c) min(k_S,
      D(p_low))``;
    * on ``[p_low, p_high)``, S's distribution makes L indifferent,
      ``F_S(p) = ((p - c) min(k_L, D) - payoff_L) / ((p - c) (min(k_L, D) - min(k_L, (D - k_S)+)))``,
      and L's makes S indifferent, ``F_L(p) = ((p - c) min(k_S, D) - payoff_S) / ((p - c) (min(k_S, D)
      - min(k_S, (D - k_L)+)))``; L puts the rest, ``1 - F_L(p_high-)``, on ``p_high`` (zero when the
      capacities are equal).
    """
    k = spec.capacity
    L = int(np.argmax(k))
    S = 1 - L
    kL, kS, c = float(k[L]), float(k[S]), spec.cost
    p_high, pay_L = spec.best_against_residual(kL, 1.0, kS)
    p_low = _lowest_price(spec, kL, pay_L, p_high)
    pay_S = (p_low - c) * min(kS, float(spec.quantity(p_low)))
    p = np.linspace(p_low, p_high, n_points)
    D = spec.quantity(p)
    m = p - c
    num_S = m * np.minimum(kL, D) - pay_L
    den_S = m * (np.minimum(kL, D) - np.minimum(kL, np.maximum(0.0, D - kS)))
    num_L = m * np.minimum(kS, D) - pay_S
    den_L = m * (np.minimum(kS, D) - np.minimum(kS, np.maximum(0.0, D - kL)))
    with np.errstate(divide="ignore", invalid="ignore"):
        F_S = np.clip(np.where(den_S > 0, num_S / den_S, 1.0), 0.0, 1.0)
        F_L = np.clip(np.where(den_L > 0, num_L / den_L, 1.0), 0.0, 1.0)
    F_S[0], F_L[0] = 0.0, 0.0
    F_S[-1] = 1.0
    atom_L = 1.0 - F_L[-1]
    if kL == kS:
        atom_L = 0.0
    F_L[-1] = 1.0
    cdf = np.empty((2, n_points))
    cdf[L], cdf[S] = F_L, F_S
    payoffs = np.empty(2)
    payoffs[L], payoffs[S] = pay_L, pay_S
    atoms = np.zeros(2)
    atoms[L] = atom_L
    both = np.full(2, p_low), np.full(2, p_high)
    return StaticEquilibrium("mixed", "closed_form", payoffs, both[0], both[1], atoms, p, cdf)


def _symmetric(spec: CapacitySpec, n_points: int = 401) -> StaticEquilibrium:
    """Mixed equilibrium of n firms of equal capacity ``k`` (efficient rationing): the payoff is the
    residual-monopoly profit ``max_p (p - c) min(k, D(p) - (n-1) k)``, the support runs from ``p_low``
    (``(p_low - c) min(k, D(p_low))`` = payoff) to the residual-monopoly price, and the common
    distribution F solves, at every price, the indifference condition
    ``sum_m C(n-1, m) F^m (1-F)^(n-1-m) (p - c) min(k, (D(p) - m k)+) = payoff``
    (m = number of rivals priced below), whose left side falls in F."""
    n = spec.n_firms
    k = float(spec.capacity[0])
    p_high, pay = spec.best_against_residual(k, 1.0, (n - 1) * k)
    p_low = _lowest_price(spec, k, pay, p_high)
    p = np.linspace(p_low, p_high, n_points)
    binom = np.array([math.comb(n - 1, m) for m in range(n)], dtype=float)
    F = np.empty(n_points)
    F[0], F[-1] = 0.0, 1.0
    for t in range(1, n_points - 1):
        D = float(spec.quantity(p[t]))
        q = np.minimum(k, np.maximum(0.0, D - k * np.arange(n)))
        m_idx = np.arange(n)

        def h(f, q=q, t=t, m_idx=m_idx):
            return (p[t] - spec.cost) * float((binom * f**m_idx * (1 - f) ** (n - 1 - m_idx) * q).sum()) - pay

        F[t] = 1.0 if h(1.0) >= 0 else (0.0 if h(0.0) <= 0 else optimize.brentq(h, 0.0, 1.0, xtol=1e-15))
    F = np.maximum.accumulate(F)
    cdf = np.repeat(F[None, :], n, axis=0)
    return StaticEquilibrium("mixed", "symmetric", np.full(n, pay), np.full(n, p_low), np.full(n, p_high),
                             np.zeros(n), p, cdf)
