"""The optimal symmetric two-phase punishment (stick and carrot; Abreu, 1986, "Extremal equilibria of
oligopolistic supergames", JET) and its critical discount factor (see :mod:`sim.theory.thresholds`)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from sim.models.market import MarketSpec
from sim.theory.collusion import common_level
from sim.theory.equilibrium import StageGame, best_response, stage_game
from sim.theory.schemes import _TOL, SchemeThreshold, _market_level

__all__ = ["StickCarrot", "stick_and_carrot"]


@dataclass(frozen=True)
class StickCarrot(SchemeThreshold):
    """Optimal symmetric two-phase punishment.

    Parameters
    ----------
    scheme, per_firm, market, binding, T
        As in :class:`SchemeThreshold` (``T`` is None).
    punishment_level : float
        The common punishment quantity or price ``x``.
    punishment_actions : ndarray of shape (n_products,)
        The punishment profile (``x`` for every product, capped at capacity).
    punishment_profits, punishment_deviation_profits : ndarray of shape (n_firms,)
        Profits at the punishment and of the best deviation from it.
    binding_constraint : str
        ``"collusion"`` or ``"punishment"`` (which incentive constraint binds the binding firm).
    weaker_than_grim : bool
        The best one-period stick needs a higher discount factor than grim trigger (set by
        :func:`critical_discount_factors`, which knows both).
    """

    punishment_level: float = math.nan
    punishment_actions: np.ndarray = field(default_factory=lambda: np.zeros(0))
    punishment_profits: np.ndarray = field(default_factory=lambda: np.zeros(0))
    punishment_deviation_profits: np.ndarray = field(default_factory=lambda: np.zeros(0))
    binding_constraint: str = ""
    weaker_than_grim: bool = False

    def to_dict(self) -> dict:
        """The thresholds and the punishment as plain data.

        Returns
        -------
        dict
        """
        out = super().to_dict()
        out.update(
            weaker_than_grim=self.weaker_than_grim,
            punishment_action=float(self.punishment_level),
            punishment_profile=self.punishment_actions.tolist(),
            punishment_profits=self.punishment_profits.tolist(),
            punishment_deviation_profits=self.punishment_deviation_profits.tolist(),
            binding_constraint=self.binding_constraint,
        )
        return out


def _sc_parts(ms: MarketSpec, xs: np.ndarray, pi_c: np.ndarray, pi_d: np.ndarray):
    """Per-firm (collusion, punishment) constraint thresholds at each punishment level in ``xs``.

    Returns arrays of shape (len(xs), n_firms); ``inf`` where the punishment is not harsher than
    collusion."""
    P = common_level(ms, xs)
    pi_p = ms.firm_profits(P)
    if ms.symmetric:
        _, v = best_response(ms, 0, P)
        pi_dp = np.repeat(v[:, None], ms.n_firms, axis=1)
    else:
        pi_dp = np.stack([best_response(ms, i, P)[1] for i in range(ms.n_firms)], axis=1)
    room = pi_c[None, :] - pi_p
    scale = max(1.0, float(np.abs(pi_c).max()))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # a ratio beyond the float range is inf
        d1 = np.where(room > _TOL * scale, (pi_d - pi_c)[None, :] / room, np.inf)
        d2 = np.where(room > _TOL * scale, (pi_dp - pi_p) / room, np.inf)
    d1 = np.maximum(d1, 0.0)
    d2 = np.maximum(d2, 0.0)
    return d1, d2, P, pi_p, pi_dp


def stick_and_carrot(market, stage: StageGame | None = None, n_grid: int | None = None) -> StickCarrot:
    """The optimal symmetric two-phase punishment and its critical discount factor.

    Parameters
    ----------
    market : Market or MarketSpec
    stage : StageGame, optional
        The stage game (solved with the joint-profit agreement if omitted).
    n_grid : int, optional
        Points of the coarse search over punishment levels before local refinement (default 161 for
        symmetric markets, where one best response serves every firm, and 65 otherwise).

    Notes
    -----
    The market threshold at level ``x`` is ``max_i max(c1_i(x), c2_i(x))`` where ``c1`` and ``c2``
    are the collusion and punishment constraints solved for delta. It is minimised over ``x`` by a
    grid search, Brent's method around the best grid point and, where the two constraints cross at
    the optimum (the usual case), a root-find of their difference, so that the threshold is exact
    to about machine precision.

    Returns
    -------
    StickCarrot
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    st = stage if stage is not None else stage_game(ms)
    pi_c, pi_d = st.collusive.firm_profits, st.deviation_profits
    if n_grid is None:
        n_grid = 161 if ms.symmetric else 65
    _lo, hi = ms.action_bounds()
    x_lo = 0.0
    x_hi = float(hi.max())
    if ms.quantity_setting and ms.demand.price_reaches_zero and np.all(ms.cost > 0):
        # beyond the choke quantity the price stays at zero and the punishment profit is -c x: harsher
        # punishments remain available up to where one period of losses outweighs the cheating gain
        # (a hundred times the choke quantity bounds the search when costs are tiny)
        x_hi = min(max(x_hi, 2.0 * float(np.max(pi_d - pi_c)) / float(ms.cost.min())), 100.0 * x_hi)
        x_hi = min(x_hi, float(ms.capacity.max()))

    def F(xs):
        d1, d2, *_ = _sc_parts(ms, np.atleast_1d(xs), pi_c, pi_d)
        return d1.max(axis=1), d2.max(axis=1)

    xs = np.linspace(x_lo, x_hi, n_grid)
    f1, f2 = F(xs)
    total = np.maximum(f1, f2)
    k = int(np.argmin(total))
    if not np.isfinite(total[k]):
        n = ms.n_firms
        return StickCarrot("stick_carrot", np.full(n, np.nan), math.nan, 0, None, math.nan,
                           np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan), "")
    a, b = xs[max(k - 1, 0)], xs[min(k + 1, n_grid - 1)]
    # a level at which no delta works is capped at 1e300; Brent's parabola through such values overflows (inf - inf
    # is nan, and the step falls back to a golden section)
    with np.errstate(over="ignore", invalid="ignore"):
        res = optimize.minimize_scalar(
            lambda t: min(1e300, float(np.maximum(*F(t))[0])), bounds=(a, b), method="bounded",
            options={"xatol": 1e-14 * max(1.0, x_hi), "maxiter": 1000},
        )
    x_best, v_best = (float(res.x), float(res.fun)) if res.fun <= total[k] else (float(xs[k]), float(total[k]))
    # exact crossing of the two constraints, when the optimum sits on it
    g = lambda t: float(F(t)[0][0] - F(t)[1][0])  # noqa: E731
    h = 1e-6 * max(1.0, x_hi)
    # inf - inf where neither constraint can hold is nan: no crossing there
    with np.errstate(invalid="ignore"):
        try:
            ga, gb = g(max(x_lo, x_best - h)), g(min(x_hi, x_best + h))
            if np.isfinite(ga) and np.isfinite(gb) and ga * gb < 0:
                xr = optimize.brentq(g, max(x_lo, x_best - h), min(x_hi, x_best + h), xtol=1e-16, rtol=1e-15)
                vr = float(np.maximum(*F(xr))[0])
                if vr <= v_best + 1e-12:
                    x_best, v_best = float(xr), vr
        except (ValueError, RuntimeError):  # no sign change, or no convergence: the bracketed optimum stands
            pass
    d1, d2, P, pi_p, pi_dp = _sc_parts(ms, np.array([x_best]), pi_c, pi_d)
    per_firm = np.maximum(d1[0], d2[0])
    per_firm = np.where(per_firm >= 1.0, np.nan, per_firm)
    m, kf = _market_level(per_firm)
    which = "collusion" if d1[0][kf] >= d2[0][kf] else "punishment"
    return StickCarrot(
        "stick_carrot", per_firm, m, kf, None, float(x_best), P[0], pi_p[0], pi_dp[0], which,
    )


