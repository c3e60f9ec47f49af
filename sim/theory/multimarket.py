"""Multimarket contact: firms that meet in several markets pool their incentive constraints.

Bernheim and Whinston (1990, "Multimarket contact and collusive behavior", RAND 21(1)): when a
deviation in any market is punished in every market the deviator shares with its rivals, the deviator
best cheats everywhere at once, and the relevant constraint of firm ``i`` is the sum over its markets,

    sum_m [pi_D,im - pi_C,im]  <=  sum_m beta_m / (1 - beta_m) [pi_C,im - pi_N,im],

with ``beta_m = delta (1 + g_m)`` for a market growing at rate ``g_m`` (see
:mod:`sim.theory.demand_states`). Slack in one market (where the loss outweighs the gain) can then
sustain collusion in another that could not sustain it alone. Pooling identical markets changes
nothing; pooling markets with different thresholds gives a common threshold between them, below the
higher one.

Enforcement in several markets
------------------------------
A market may carry its own :class:`~sim.theory.enforcement.Enforcement` (a detection rate and a fine,
with the leniency and deviator options; the detection rate must be a number and competition after a
conviction must last forever). Convention: each market's authority investigates independently, a
conviction in any market ends collusion in every market of the game (the investigation uncovers the
firms' contacts) and each convicted market's fine is paid there. Per market, with ``q`` the
probability that collusion ends in a period (``1 - prod_m (1 - q_m)``),

    W_im = (c_im - e_im) / (1 - beta_m (1 - q)),    D_im = d_im - phi_im,

(``c = pi_C - pi_N``, ``d = pi_D - pi_N``, ``e`` the expected fine per colluding period, ``phi`` the
deviator's expected fine), and firm ``i`` keeps the agreement when ``sum_m (W_im - D_im) >= 0``. A
market on its own uses its own ``q_m``; with one market and no growth this is exactly the constraint
of :mod:`sim.theory.enforcement`. Under this convention pooling raises every market's chance of an
end to collusion, so identical markets under enforcement are not neutral to pool.

Firms are named: a game declares its firm set and each market lists its firms in the order of its
own firm indices; a market's own numbers (costs, ...) follow that order.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import InputError
from ..core.params import Options, Real
from ..core.text import CAUTION
from ..models.market import Market, market_from_dict
from .demand_states import _beta_grid, _smallest_beta
from .enforcement import Enforcement, PriceDetection, enforcement_terms
from .equilibrium import AGREEMENTS, stage_game
from .stage_profits import path_point

__all__ = ["ContactGame", "ContactMarket", "PooledThresholds", "SlackReport", "pooled_thresholds", "slack_at"]


def _names(key: str, value, minimum: int) -> tuple:
    if isinstance(value, str) or not isinstance(value, Sequence):
        raise InputError(key, f"must be a list of firm names, got {value!r}")
    names = tuple(value)
    for x in names:
        if not isinstance(x, str) or not x.strip():
            raise InputError(key, f"firm names must be non-empty text, got {x!r}")
    dup = [x for k, x in enumerate(names) if x in names[:k]]
    if dup:
        raise InputError(key, f"names {dup[0]!r} twice")
    if len(names) < minimum:
        raise InputError(key, f"must name at least {minimum} firms, got {len(names)}")
    return names


@dataclass(frozen=True)
class ContactMarket:
    """One market of a multimarket game.

    Parameters
    ----------
    market : Market
    firms : sequence of str
        The names of the market's firms, in the order of the market's firm indices.
    growth : float in (-1, 1)
        Growth rate of the market's demand per period.
    enforcement : Enforcement or None
    label : str
        A name for the market (default: "market k").
    """

    market: Market
    firms: tuple
    growth: float = 0.0
    enforcement: Enforcement | None = None
    label: str = ""

    def to_dict(self) -> dict:
        """Plain-JSON form (the market in the layout of an experiment file's market table).

        Returns
        -------
        dict
        """
        return {"label": self.label, "firms": list(self.firms), "growth": self.growth,
                "enforcement": None if self.enforcement is None else self.enforcement.to_dict(),
                "market": self.market.to_dict()}

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "markets[0]") -> ContactMarket:
        """Build from a table in the layout of :meth:`to_dict`, naming errors under ``prefix``.

        Parameters
        ----------
        d : dict
        prefix : str

        Returns
        -------
        ContactMarket
        """
        if not isinstance(d, dict):
            raise InputError(prefix, f"must be a table, got {d!r}")
        return _market_from_dict(d, prefix)


def _check_market(k: int, cm, declared: tuple) -> ContactMarket:
    key = f"markets[{k}]"
    if isinstance(cm, dict):
        cm = _market_from_dict(cm, key)
    if not isinstance(cm, ContactMarket):
        raise InputError(key, f"must be a market with its firm names, got {type(cm).__name__}")
    if not isinstance(cm.market, Market):
        raise InputError(f"{key}.market", f"must be a market, got {type(cm.market).__name__}")
    ms = cm.market.spec(f"{key}.market")
    firms = _names(f"{key}.firms", cm.firms, 2)
    if len(firms) != ms.n_firms:
        raise InputError(f"{key}.firms", f"must name the market's {ms.n_firms} firms in order, got {len(firms)}")
    unknown = [f for f in firms if f not in declared]
    if unknown:
        raise InputError(f"{key}.firms", f"names {unknown[0]!r}, which is not among the declared firms "
                                         f"({', '.join(declared)})")
    growth = Real(-1, 1, closed="neither").check(f"{key}.growth", cm.growth)
    enf = cm.enforcement
    if enf is not None:
        if not isinstance(enf, Enforcement):
            raise InputError(f"{key}.enforcement", f"must be an enforcement regime, got {type(enf).__name__}")
        if isinstance(enf.detection, PriceDetection):
            raise InputError(f"{key}.enforcement.detection", "must be a number with several markets (a "
                                                             "price-dependent rate is not supported here)")
        if enf.after_detection is not None:
            raise InputError(f"{key}.enforcement.after_detection", "must be empty (competition forever after a "
                                                                   "conviction) with several markets")
    label = cm.label or f"market {k + 1}"
    return ContactMarket(cm.market, firms, growth, enf, str(label))


def _market_from_dict(d: dict, key: str) -> ContactMarket:
    allowed = ("label", "firms", "growth", "enforcement", "market")
    for k in d:
        if k not in allowed:
            raise InputError(f"{key}.{k}", f"unknown key; allowed: {', '.join(allowed)}")
    if "market" not in d:
        raise InputError(f"{key}.market", "missing (the market's demand and costs)")
    enf = d.get("enforcement")
    enf = None if enf is None else Enforcement.from_dict(enf, f"{key}.enforcement")
    return ContactMarket(market_from_dict(d["market"], f"{key}.market"), d.get("firms"), d.get("growth", 0.0), enf,
                         d.get("label", ""))


@dataclass(frozen=True)
class ContactGame:
    """Markets in which the same or overlapping firms meet.

    Parameters
    ----------
    firms : sequence of str
        The declared firm set; every firm must sell in at least one market.
    markets : sequence of ContactMarket (or dicts in its :meth:`ContactMarket.to_dict` layout)
    agreement : str
        The agreement in every market (see :func:`sim.theory.equilibrium.collusive_outcome`).
    """

    firms: tuple
    markets: tuple
    agreement: str = "joint"
    _stages: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    def __post_init__(self):
        declared = _names("firms", self.firms, 2)
        if isinstance(self.markets, str | dict) or not isinstance(self.markets, Sequence) or not self.markets:
            raise InputError("markets", f"must be a non-empty list of markets, got {self.markets!r}")
        markets = tuple(_check_market(k, cm, declared) for k, cm in enumerate(self.markets))
        seen = {f for cm in markets for f in cm.firms}
        idle = [f for f in declared if f not in seen]
        if idle:
            raise InputError("firms", f"declares {idle[0]!r}, which sells in no market")
        agreement = Options(*AGREEMENTS[:3]).check("agreement", self.agreement)
        object.__setattr__(self, "firms", declared)
        object.__setattr__(self, "markets", markets)
        object.__setattr__(self, "agreement", agreement)

    @property
    def n_firms(self) -> int:
        """Number of declared firms."""
        return len(self.firms)

    @property
    def n_markets(self) -> int:
        """Number of markets."""
        return len(self.markets)

    @property
    def presence(self) -> np.ndarray:
        """``presence[i, m]``: firm ``i`` sells in market ``m``; ndarray of bool, shape (n_firms, n_markets)."""
        out = np.zeros((self.n_firms, self.n_markets), dtype=bool)
        for m, cm in enumerate(self.markets):
            for f in cm.firms:
                out[self.firms.index(f), m] = True
        return out

    def contact(self) -> np.ndarray:
        """Number of markets each pair of firms shares (the diagonal: each firm's own count).

        Returns
        -------
        ndarray of int, shape (n_firms, n_firms)
        """
        x = self.presence.astype(np.int64)
        return x @ x.T

    def stage(self, m: int):
        """The solved stage game of a market (cached).

        Parameters
        ----------
        m : int
            Index (0-based) of the market.

        Returns
        -------
        StageGame
        """
        if m not in self._stages:
            self._stages[m] = stage_game(self.markets[m].market, self.agreement)
        return self._stages[m]

    def to_dict(self) -> dict:
        """Plain-JSON form in the layout :meth:`from_dict` reads.

        Returns
        -------
        dict
        """
        return {"firms": list(self.firms), "agreement": self.agreement,
                "markets": [cm.to_dict() for cm in self.markets]}

    @classmethod
    def from_dict(cls, d: dict) -> ContactGame:
        """Build and validate from a table.

        Parameters
        ----------
        d : dict

        Returns
        -------
        ContactGame
        """
        if not isinstance(d, dict):
            raise InputError("contact", f"must be a table, got {d!r}")
        for k in d:
            if k not in ("firms", "agreement", "markets"):
                raise InputError(k, "unknown key; allowed: firms, agreement, markets")
        return cls(d.get("firms"), d.get("markets"), d.get("agreement", "joint"))


# --------------------------------------------------------------------------------------------------
# Slack
# --------------------------------------------------------------------------------------------------


class _Terms:
    """Per market and weight on its Nash-to-agreement path: the pieces of each firm's constraint."""

    def __init__(self, game: ContactGame):
        self.game = game
        self.cache: dict = {}

    def at(self, m: int, w: float):
        """(c, e, D, q_m, profits) of market ``m`` at weight ``w``, per local firm."""
        key = (m, float(w))
        if key not in self.cache:
            cm = self.game.markets[m]
            sp = path_point(self.game.stage(m), float(w)).profits
            c, d = sp.collusive - sp.nash, sp.deviation - sp.nash
            if cm.enforcement is None:
                zero = np.zeros(sp.n_firms)
                self.cache[key] = (c, zero, d, 0.0, sp.collusive)
            else:
                t = enforcement_terms(sp, cm.enforcement)
                self.cache[key] = (c, t.expected_fine, d - t.deviator_fine, t.conviction_rate, sp.collusive)
        return self.cache[key]

    def joint_q(self, weights) -> float:
        return 1.0 - float(np.prod([1.0 - self.at(m, w)[3] for m, w in enumerate(weights)]))

    def slack(self, delta: float, weights, pooled: bool = True) -> np.ndarray:
        """``W_im - D_im`` per firm and market (0 where absent), shape (n_firms, n_markets)."""
        g = self.game
        out = np.zeros((g.n_firms, g.n_markets))
        q_all = self.joint_q(weights) if pooled else None
        for m, cm in enumerate(g.markets):
            c, e, D, q_m, _ = self.at(m, weights[m])
            q = q_all if pooled else q_m
            beta = delta * (1.0 + cm.growth)
            idx = [g.firms.index(f) for f in cm.firms]
            out[idx, m] = (c - e) / (1.0 - beta * (1.0 - q)) - D
        return out


def _delta_cap(game: ContactGame, markets) -> float:
    """Largest delta keeping every ``delta (1 + g_m)`` of these markets below one."""
    return min(1.0, *(1.0 / (1.0 + game.markets[m].growth) for m in markets))


def _threshold(f, cap: float, scale: float) -> float:
    grid = cap * _beta_grid()
    tol = 1e-12 * scale
    t = _smallest_beta(f, grid, -f(0.0), tol)
    return t if math.isfinite(t) and t < 1.0 - 1e-12 else math.nan


def _check_delta(game: ContactGame, delta) -> float:
    delta = Real(0, 1, closed="neither").check("delta", delta)
    for k, cm in enumerate(game.markets):
        if delta * (1.0 + cm.growth) >= 1.0:
            raise InputError("delta", f"delta (1 + growth) must be below one in every market; market {k + 1} "
                                      f"({cm.label}) gives {delta * (1.0 + cm.growth):.6g}")
    return delta


def _nan_list(a):
    return [None if not math.isfinite(x) else float(x) for x in np.ravel(a)]


def _nan_array(values, shape=None) -> np.ndarray:
    out = np.array([math.nan if v is None else float(v) for v in values], dtype=float)
    return out if shape is None else out.reshape(shape)


@dataclass(frozen=True, eq=False)
class PooledThresholds:
    """Critical discount factors of every market alone and of every firm's pooled constraint.

    Attributes
    ----------
    firms, labels : tuple of str
        Firm names and market labels.
    presence : ndarray of bool, shape (n_firms, n_markets)
    standalone : ndarray of shape (n_firms, n_markets)
        Each firm's threshold in each market on its own (``nan`` where the firm is absent or cannot be
        held below one).
    market_thresholds : ndarray of shape (n_markets,)
        Each market's threshold on its own (its largest firm threshold).
    pooled : ndarray of shape (n_firms,)
        Each firm's threshold with its constraints pooled over its markets.
    common : float
        The lowest discount factor at which collusion holds in every market with pooling (the largest
        pooled firm threshold).
    highest_standalone : float
        The lowest discount factor at which every market sustains collusion on its own.
    binding_firm : int
        Index (0-based) of the firm whose pooled constraint sets ``common``.
    """

    firms: tuple
    labels: tuple
    presence: np.ndarray
    standalone: np.ndarray
    market_thresholds: np.ndarray
    pooled: np.ndarray
    common: float
    highest_standalone: float
    binding_firm: int

    def to_dict(self) -> dict:
        """Plain-JSON form (``None`` for ``nan``).

        Returns
        -------
        dict
        """
        n, m = self.presence.shape
        return {"firms": list(self.firms), "labels": list(self.labels), "presence": self.presence.tolist(),
                "standalone": [_nan_list(r) for r in self.standalone],
                "market_thresholds": _nan_list(self.market_thresholds), "pooled": _nan_list(self.pooled),
                "common": _nan_list([self.common])[0], "highest_standalone": _nan_list([self.highest_standalone])[0],
                "binding_firm": self.binding_firm + 1, "shape": [n, m], "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> PooledThresholds:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        PooledThresholds
        """
        shape = tuple(d["shape"])
        return cls(tuple(d["firms"]), tuple(d["labels"]), np.asarray(d["presence"], dtype=bool),
                   _nan_array([x for r in d["standalone"] for x in r], shape), _nan_array(d["market_thresholds"]),
                   _nan_array(d["pooled"]), _nan_array([d["common"]])[0], _nan_array([d["highest_standalone"]])[0],
                   d["binding_firm"] - 1)


def _worst(values: np.ndarray) -> tuple[float, int]:
    if values.size == 0:
        return math.nan, 0
    if np.any(np.isnan(values)):
        k = int(np.flatnonzero(np.isnan(values))[0])
        return math.nan, k
    k = int(np.argmax(values))
    return float(values[k]), k


def pooled_thresholds(game: ContactGame) -> PooledThresholds:
    """Thresholds of every market alone and of every firm's pooled constraint, at full collusion.

    Parameters
    ----------
    game : ContactGame

    Returns
    -------
    PooledThresholds
    """
    terms = _Terms(game)
    ones = np.ones(game.n_markets)
    pres = game.presence
    scale = max(1.0, max(float(np.abs(terms.at(m, 1.0)[4]).max()) for m in range(game.n_markets)))
    standalone = np.full((game.n_firms, game.n_markets), math.nan)
    for m in range(game.n_markets):
        cap = _delta_cap(game, [m])
        for i in np.flatnonzero(pres[:, m]):
            standalone[i, m] = _threshold(lambda x, i=i, m=m: terms.slack(x, ones, pooled=False)[i, m], cap, scale)
    market = np.array([_worst(standalone[pres[:, m], m])[0] for m in range(game.n_markets)])
    pooled = np.empty(game.n_firms)
    for i in range(game.n_firms):
        cap = _delta_cap(game, np.flatnonzero(pres[i]))
        pooled[i] = _threshold(lambda x, i=i: float(terms.slack(x, ones).sum(axis=1)[i]), cap, scale)
    common, k = _worst(pooled)
    highest, _ = _worst(market)
    labels = tuple(cm.label for cm in game.markets)
    return PooledThresholds(game.firms, labels, pres, standalone, market, pooled, common, highest, k)


@dataclass(frozen=True, eq=False)
class SlackReport:
    """Who lends slack to whom at a discount factor, at full collusion in every market.

    Attributes
    ----------
    delta : float
    firms, labels : tuple of str
    presence : ndarray of bool, shape (n_firms, n_markets)
    slack : ndarray of shape (n_firms, n_markets)
        ``W_im - D_im``: the firm's expected discounted loss from cheating in the market minus its gain
        (0 where absent); positive in a market that lends slack, negative in one that borrows.
    pooled_slack : ndarray of shape (n_firms,)
        The sum over the firm's markets (>= 0: the firm keeps the agreement everywhere).
    alone : ndarray of bool, shape (n_markets,)
        Every firm of the market keeps the agreement with the market on its own.
    together : bool
        Every firm's pooled constraint holds.
    lends : ndarray of bool, shape (n_markets, n_markets)
        ``lends[m, k]``: some firm sells in both, with slack in ``m`` and a shortfall in ``k``.
    """

    delta: float
    firms: tuple
    labels: tuple
    presence: np.ndarray
    slack: np.ndarray
    pooled_slack: np.ndarray
    alone: np.ndarray
    together: bool
    lends: np.ndarray

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        return {"delta": self.delta, "firms": list(self.firms), "labels": list(self.labels),
                "presence": self.presence.tolist(), "slack": self.slack.tolist(),
                "pooled_slack": self.pooled_slack.tolist(), "alone": self.alone.tolist(), "together": self.together,
                "lends": self.lends.tolist(), "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> SlackReport:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        SlackReport
        """
        return cls(d["delta"], tuple(d["firms"]), tuple(d["labels"]), np.asarray(d["presence"], dtype=bool),
                   np.asarray(d["slack"], dtype=float), np.asarray(d["pooled_slack"], dtype=float),
                   np.asarray(d["alone"], dtype=bool), d["together"], np.asarray(d["lends"], dtype=bool))


def slack_at(game: ContactGame, delta: float) -> SlackReport:
    """Each firm's slack in each market at ``delta`` and which markets lend slack to which.

    Parameters
    ----------
    game : ContactGame
    delta : float in (0, 1)
        ``delta (1 + g_m)`` must stay below one in every market.

    Returns
    -------
    SlackReport
    """
    delta = _check_delta(game, delta)
    terms = _Terms(game)
    ones = np.ones(game.n_markets)
    pres = game.presence
    slack = terms.slack(delta, ones)
    own = terms.slack(delta, ones, pooled=False)
    pooled = slack.sum(axis=1)
    scale = 1e-12 * max(1.0, float(np.abs(slack).max()))
    alone = np.array([bool(np.all(own[pres[:, m], m] >= -scale)) for m in range(game.n_markets)])
    lends = np.zeros((game.n_markets, game.n_markets), dtype=bool)
    for i in range(game.n_firms):
        for m in np.flatnonzero(pres[i] & (slack[i] > scale)):
            lends[m, pres[i] & (slack[i] < -scale)] = True
    labels = tuple(cm.label for cm in game.markets)
    return SlackReport(delta, game.firms, labels, pres, slack, pooled, alone, bool(np.all(pooled >= -scale)), lends)
