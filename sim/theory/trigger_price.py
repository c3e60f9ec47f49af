"""Trigger-price equilibrium under imperfect monitoring (Green and Porter, 1984).

Green, E. J. and R. H. Porter (1984), "Noncooperative collusion under imperfect price information",
Econometrica 52(1), 87-100.

Setting: n symmetric firms compete in quantities for a homogeneous good; the market price is
``p = theta * P(Q)`` with an i.i.d. multiplicative demand shock ``theta`` of mean one; firms observe
only the price, never each other's output. A trigger-price strategy produces the collusive quantity
``q`` in normal periods; when the price falls below the trigger ``p_bar`` the firms revert to the
static Nash quantity for ``T`` periods (``T = None``: forever) and then return to normal.

With ``beta(Q) = Pr(theta P(Q) < p_bar) = F(p_bar / P(Q))`` and ``kappa = delta (1 - delta^T)``, the
value of a firm in a normal period is

    V = pi_N / (1 - delta) + (pi_C - pi_N) / (1 - delta + beta kappa),

the continuation value at the start of a price war is ``W = pi_N (1 - delta^T)/(1 - delta) +
delta^T V``, and no firm gains from a one-period change of output ``q_i`` when

    pi_i(q_i) - pi_C <= delta (beta(q_i) - beta) (V - W)   for every q_i.

The first-order form of that constraint is solved for the trigger at each candidate ``q`` and the
global form is checked on a grid. The best scheme maximises ``V`` over ``(q, p_bar, T)``.

Long-run behaviour: collusive spells are geometric with mean ``1 / beta`` periods (the period whose
low price starts the war counts as collusive), each war lasts ``T`` periods, so the long-run share of
war periods is ``beta T / (1 + beta T)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real
from sim.models.market import MarketSpec
from sim.models.monitoring import NORMAL_SIGMA_MAX
from sim.theory.equilibrium import collusive_outcome, static_nash

__all__ = [
    "NOISE_KINDS",
    "TriggerPriceScheme",
    "price_war_statistics",
    "trigger_price_equilibrium",
    "trigger_price_scheme",
]

NOISE_KINDS = ("lognormal", "normal")


def _norm_cdf(u):
    return 0.5 * special.erfc(-np.asarray(u, dtype=float) / math.sqrt(2.0))


def _norm_pdf(u):
    u = np.asarray(u, dtype=float)
    return np.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi)


class Shock:
    """A mean-one multiplicative shock. ``u`` is the standardised threshold: ``F(z) = Phi(u(z))``.

    Parameters
    ----------
    kind : {"lognormal", "normal"}
        ``exp(sigma Z - sigma^2/2)`` or ``1 + sigma Z``, ``Z`` standard normal.
    sigma : float
        Standard deviation (> 0; at most 1/3 for a normal shock).
    """

    def __init__(self, kind: str, sigma: float):
        self.kind = Options(*NOISE_KINDS).check("monitoring.noise", kind)
        # a normal shock 1 + sigma Z must stay (practically) positive, as in the simulation engine
        hi = NORMAL_SIGMA_MAX if self.kind == "normal" else 10.0
        self.sigma = Real(0, hi, closed="right").check("monitoring.sigma", sigma)

    def u_of_z(self, z):
        """The standard normal quantile of the shock level ``z``.

        Parameters
        ----------
        z : float or ndarray

        Returns
        -------
        ndarray
        """
        z = np.asarray(z, dtype=float)
        s = self.sigma
        if self.kind == "lognormal":
            with np.errstate(divide="ignore"):
                return (np.log(z) + 0.5 * s * s) / s
        return (z - 1.0) / s

    def z_of_u(self, u):
        """The shock level at the standard normal quantile ``u`` (inverse of :meth:`u_of_z`).

        Parameters
        ----------
        u : float or ndarray

        Returns
        -------
        ndarray
        """
        s = self.sigma
        u = np.asarray(u, dtype=float)
        if self.kind == "lognormal":
            return np.exp(s * u - 0.5 * s * s)
        return 1.0 + s * u

    def cdf(self, z):
        """``Pr(theta < z)``.

        Parameters
        ----------
        z : float or ndarray

        Returns
        -------
        ndarray
        """
        return _norm_cdf(self.u_of_z(z))

    def z_density(self, z):
        """``z f(z)``, the elasticity term of the probability of a war.

        Parameters
        ----------
        z : float or ndarray

        Returns
        -------
        ndarray
        """
        z = np.asarray(z, dtype=float)
        u = self.u_of_z(z)
        if self.kind == "lognormal":
            return _norm_pdf(u) / self.sigma
        return z * _norm_pdf(u) / self.sigma

    def sample(self, rng: np.random.Generator, size):
        """Draws of the shock.

        Parameters
        ----------
        rng : numpy.random.Generator
        size : int or tuple of int

        Returns
        -------
        ndarray of shape ``size``
        """
        s = self.sigma
        zz = rng.standard_normal(size)
        return np.exp(s * zz - 0.5 * s * s) if self.kind == "lognormal" else 1.0 + s * zz


def price_war_statistics(beta: float, T: int | None) -> dict:
    """Long-run statistics of a trigger-price scheme with war probability ``beta`` per normal period.

    Parameters
    ----------
    beta : float
        Probability that a normal period starts a war.
    T : int or None
        War length (None: forever).

    Returns
    -------
    dict
        ``war_probability``, ``expected_collusive_spell`` (``1 / beta``), ``war_length`` (``T``) and
        ``war_share``, the long-run share of war periods ``beta T / (1 + beta T)`` (1 when wars last
        forever and beta > 0).
    """
    beta = float(beta)
    spell = math.inf if beta <= 0 else 1.0 / beta
    if T is None:
        share = 0.0 if beta <= 0 else 1.0
    else:
        share = beta * T / (1.0 + beta * T)
    return {"war_probability": beta, "expected_collusive_spell": spell, "war_length": T,
            "war_share": share}


@dataclass(frozen=True)
class TriggerPriceScheme:
    """A trigger-price scheme and what it yields.

    Parameters
    ----------
    quantity : float
        Per-firm output in normal periods.
    trigger : float
        Trigger price ``p_bar``.
    T : int or None
        War length (None: forever).
    delta : float
    noise, sigma : str, float
    war_probability : float
        ``beta``, probability that a normal period ends in a war.
    value : float
        Value ``V`` of a firm in a normal period (discounted expected profit).
    nash_value : float
        ``pi_N / (1 - delta)``.
    collusive_profit, nash_profit : float
        Per-period expected profits in normal and war periods.
    max_deviation_gain : float
        Largest gain from a one-period output change found on the check grid (<= 0 up to rounding
        when the scheme is an equilibrium).
    equilibrium : bool
        Whether the incentive constraint holds.
    expected_collusive_spell, war_share : float
        See :func:`price_war_statistics`.
    """

    quantity: float
    trigger: float
    T: int | None
    delta: float
    noise: str
    sigma: float
    war_probability: float
    value: float
    nash_value: float
    collusive_profit: float
    nash_profit: float
    max_deviation_gain: float
    equilibrium: bool
    expected_collusive_spell: float
    war_share: float

    def to_dict(self) -> dict:
        """The fields as plain data (None for infinite values).

        Returns
        -------
        dict
        """
        d = dict(self.__dict__)
        for k, v in d.items():
            if isinstance(v, float) and not math.isfinite(v):
                d[k] = None
        return d


def _check_market(ms: MarketSpec) -> None:
    if not (ms.quantity_setting and ms.homogeneous_good):
        raise InputError(
            "market.model",
            "the trigger-price equilibrium is defined for quantity competition with a homogeneous good "
            "(such as linear or isoelastic demand)",
        )
    if not ms.demand.provides("price_signal", "price_signal_slope"):
        raise ms.demand.missing("the trigger-price equilibrium", "the price distribution")
    if not ms.symmetric:
        raise InputError(
            "market.cost", "the trigger-price equilibrium needs symmetric firms (equal costs and capacities)"
        )


class _Model:
    def __init__(self, ms: MarketSpec, shock: Shock, delta: float):
        self.ms, self.shock, self.delta = ms, shock, delta
        self.n = ms.n_firms
        self.c = float(ms.cost[0])
        self.cap = float(ms.capacity[0])
        self.qn = float(static_nash(ms).actions[0])
        self.pin = float(static_nash(ms).profits[0])
        self.qm = float(collusive_outcome(ms, "symmetric").actions[0])

    def price(self, Q):
        # the observed price is theta * P(Q): the demand system's price signal before the shock
        return self.ms.demand.price_signal(Q)

    def dprice(self, Q):
        return self.ms.demand.price_signal_slope(Q)

    def profit_i(self, qi, q):
        Q = qi + (self.n - 1) * q
        return qi * (self.price(Q) - self.c)

    def kappa(self, T):
        return self.delta if T is None else self.delta * (1.0 - self.delta**T)

    def value(self, pic, beta, T):
        d = self.delta
        return self.pin / (1 - d) + (pic - self.pin) / (1 - d + beta * self.kappa(T))

    def war_value(self, V, T):
        d = self.delta
        if T is None:
            return self.pin / (1 - d)
        return self.pin * (1 - d**T) / (1 - d) + d**T * V

    def deviation_gain(self, q, trigger, T, qi):
        """Gain of a one-period change to ``qi`` (array) when the others produce q."""
        pic = float(self.profit_i(q, q))
        P = float(self.price(self.n * q))
        beta = float(self.shock.cdf(trigger / P)) if P > 0 else 1.0
        V = self.value(pic, beta, T)
        W = self.war_value(V, T)
        Pi = self.price(qi + (self.n - 1) * q)
        with np.errstate(divide="ignore"):
            beta_i = np.where(Pi > 0, self.shock.cdf(trigger / np.where(Pi > 0, Pi, 1.0)), 1.0)
        return self.profit_i(qi, q) - pic - self.delta * (beta_i - beta) * (V - W)

    def trigger_for(self, q, T):
        """Triggers at which q satisfies the first-order incentive condition (lowest war risk first)."""
        Q = self.n * q
        P = float(self.price(Q))
        if P <= 0:
            return []
        slope = float(-self.dprice(Q)) / P
        marg = float(P + q * self.dprice(Q) - self.c)  # d pi_i / d q_i at the symmetric point
        pic = float(self.profit_i(q, q))
        if marg <= 0 or pic <= self.pin:
            return []
        d, kap = self.delta, self.kappa(T)
        one_minus = 1.0 if T is None else (1.0 - d**T)

        def rhs(u):
            z = self.shock.z_of_u(u)
            beta = _norm_cdf(u)
            return d * self.shock.z_density(z) * slope * one_minus * (pic - self.pin) / (1 - d + beta * kap)

        lo_u = -1.0 / self.shock.sigma + 1e-9 if self.shock.kind == "normal" else -12.0
        us = np.linspace(lo_u, 12.0, 2001)
        vals = rhs(us) - marg
        out = []
        for k in np.flatnonzero(np.sign(vals[:-1]) != np.sign(vals[1:])):
            u = optimize.brentq(lambda t: float(rhs(t) - marg), us[k], us[k + 1], xtol=1e-14, rtol=1e-15)
            out.append(float(self.shock.z_of_u(u) * P))
        return out


def trigger_price_scheme(market, quantity: float, trigger: float, T: int | None, delta: float,
                         noise: str = "lognormal", sigma: float = 0.1, n_check: int = 801) -> TriggerPriceScheme:
    """Evaluate a given trigger-price scheme: its value, war probability, long-run statistics and
    whether it is an equilibrium (global check of one-period output changes on a grid).

    Parameters
    ----------
    market : Market or MarketSpec
        Symmetric firms, quantity competition, homogeneous good.
    quantity : float
        Per-firm output in normal periods (> 0).
    trigger : float
        Trigger price (>= 0).
    T : int or None
        War length (None: forever).
    delta : float in (0, 1)
    noise : {"lognormal", "normal"}
    sigma : float
    n_check : int
        Points of the grid of one-period output changes.

    Returns
    -------
    TriggerPriceScheme
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    _check_market(ms)
    delta = Real(0, 1, closed="neither").check("run.delta", delta)
    if T is not None:
        T = Integer(1, 10_000_000).check("monitoring.punishment", T)
    shock = Shock(noise, sigma)
    mdl = _Model(ms, shock, delta)
    q = Real(0, None, closed="neither").check("monitoring.quantity", quantity)
    trig = Real(0, None).check("monitoring.trigger", trigger)
    return _evaluate(mdl, q, trig, T, n_check)


def _evaluate(mdl: _Model, q: float, trigger: float, T, n_check: int) -> TriggerPriceScheme:
    pic = float(mdl.profit_i(q, q))
    P = float(mdl.price(mdl.n * q))
    beta = float(mdl.shock.cdf(trigger / P)) if P > 0 else 1.0
    V = mdl.value(pic, beta, T)
    hi = min(mdl.cap, 3.0 * max(mdl.qn, q))
    grid = np.linspace(0.0, hi, n_check)
    gain = mdl.deviation_gain(q, trigger, T, grid)
    # refine around the best grid point (the deviation problem is smooth)
    k = int(np.argmax(gain))
    a, b = grid[max(k - 1, 0)], grid[min(k + 1, n_check - 1)]
    res = optimize.minimize_scalar(lambda t: -float(mdl.deviation_gain(q, trigger, T, np.array([t]))[0]),
                                   bounds=(a, b), method="bounded", options={"xatol": 1e-12})
    g = max(float(gain[k]), -float(res.fun))
    scale = max(1e-12, abs(pic))
    stats = price_war_statistics(beta, T)
    return TriggerPriceScheme(
        quantity=q, trigger=trigger, T=T, delta=mdl.delta, noise=mdl.shock.kind, sigma=mdl.shock.sigma,
        war_probability=beta, value=V, nash_value=mdl.pin / (1 - mdl.delta), collusive_profit=pic,
        nash_profit=mdl.pin, max_deviation_gain=g, equilibrium=bool(g <= 1e-9 * scale),
        expected_collusive_spell=stats["expected_collusive_spell"], war_share=stats["war_share"],
    )


def trigger_price_equilibrium(market, delta: float, noise: str = "lognormal", sigma: float = 0.1,
                              T: int | str | None = "best", T_max: int = 30, n_q: int = 121) -> TriggerPriceScheme:
    """The best trigger-price equilibrium: maximise a firm's value over output, trigger and war length.

    Parameters
    ----------
    market : Market or MarketSpec
        Symmetric firms, quantity competition, homogeneous good.
    delta : float in (0, 1)
    noise : {"lognormal", "normal"}
        Distribution of the mean-one shock (lognormal: ``exp(sigma Z - sigma^2/2)``; normal:
        ``1 + sigma Z``).
    sigma : float > 0
    T : int, None or "best"
        War length; None means wars last forever; "best" searches ``1..T_max`` and forever.
    T_max : int
        Longest finite war searched with ``T="best"``.
    n_q : int
        Grid over per-firm output between the best symmetric collusive quantity and static Nash.

    Returns
    -------
    TriggerPriceScheme
        The best scheme found. When no output below static Nash can be sustained, the scheme is
        static Nash itself (trigger 0, war probability 0).
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    _check_market(ms)
    delta = Real(0, 1, closed="neither").check("run.delta", delta)
    shock = Shock(noise, sigma)
    mdl = _Model(ms, shock, delta)
    if T == "best":
        Ts = [*range(1, Integer(1, 10_000).check("T_max", T_max) + 1), None]
    elif T is None:
        Ts = [None]
    else:
        Ts = [Integer(1, 10_000_000).check("monitoring.punishment", T)]
    best = None
    qs = np.linspace(mdl.qm, mdl.qn, n_q)[:-1]
    for TT in Ts:
        cand = _best_for_T(mdl, TT, qs)
        if cand is not None and (best is None or cand.value > best.value):
            best = cand
    if best is None:
        return _evaluate(mdl, mdl.qn, 0.0, Ts[0] if Ts[0] is not None else None, 401)
    return best


def _best_for_T(mdl: _Model, T, qs) -> TriggerPriceScheme | None:
    def candidate(q):
        out = None
        for trig in mdl.trigger_for(q, T):
            s = _evaluate(mdl, float(q), trig, T, 401)
            if s.equilibrium and (out is None or s.value > out.value):
                out = s
        return out

    found = [(q, candidate(q)) for q in qs]
    feas = [(q, s) for q, s in found if s is not None]
    if not feas:
        return None
    k = int(np.argmax([s.value for _, s in feas]))
    q0, s0 = feas[k]
    step = qs[1] - qs[0] if len(qs) > 1 else 0.0
    if step > 0:
        def neg(q):
            s = candidate(q)
            return -s.value if s is not None else -s0.value + 1.0
        res = optimize.minimize_scalar(neg, bounds=(max(qs[0], q0 - step), min(qs[-1] + step, q0 + step)),
                                       method="bounded", options={"xatol": 1e-10})
        s1 = candidate(float(res.x))
        if s1 is not None and s1.value > s0.value:
            s0 = _evaluate(mdl, s1.quantity, s1.trigger, T, 2001)
            if not s0.equilibrium:
                s0 = feas[k][1]
    return s0
