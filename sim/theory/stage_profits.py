"""Per-firm profits of a stage game and the path from static Nash to the agreement.

The incentive constraints of :mod:`sim.theory.enforcement`, :mod:`sim.theory.demand_states` and
:mod:`sim.theory.multimarket` need, per firm, three numbers: its profit when everyone keeps the
agreement, its best one-shot deviation against the others' agreed actions, and its static Nash profit.
:class:`StageProfits` holds them (and the agreed price, which price-dependent detection reads);
:func:`stage_profits` builds one from a solved stage game, a market or plain numbers.

Below a threshold the firms can still sustain a less profitable agreement. Like
:func:`sim.theory.thresholds.partial_collusion`, the analyses here move along the straight path of profiles
``a(w) = a_N + w (a_C - a_N)``, ``w`` in ``[0, 1]`` (0 is static Nash, 1 the agreement);
:func:`path_point` evaluates one point of it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..core.errors import InputError
from ..models.market import Market, MarketSpec
from .equilibrium import StageGame, best_deviation, stage_game

__all__ = ["StageProfits", "average_price", "path_point", "stage_profits"]


def _vector(key: str, value, n: int | None = None) -> np.ndarray:
    try:
        x = np.atleast_1d(np.asarray(value, dtype=float))
    except (TypeError, ValueError):
        raise InputError(key, f"must be a list of numbers (one per firm), got {value!r}") from None
    if x.ndim != 1 or x.size == 0 or not np.all(np.isfinite(x)):
        raise InputError(key, f"must be a list of finite numbers (one per firm), got {value!r}")
    if n is not None and x.size != n:
        raise InputError(key, f"must have one value per firm ({n}), got {x.size}")
    return x


@dataclass(frozen=True, eq=False)
class StageProfits:
    """The per-firm profits an incentive constraint compares.

    Parameters
    ----------
    collusive : ndarray of shape (n_firms,)
        Each firm's profit when every firm keeps the agreement.
    deviation : ndarray of shape (n_firms,)
        Each firm's best one-shot deviation profit against the others' agreed actions.
    nash : ndarray of shape (n_firms,)
        Each firm's static Nash profit (the punishment of grim trigger).
    price : float
        Quantity-weighted average price at the agreement (``nan`` when unknown); read only by a
        detection rate that depends on the price.
    """

    collusive: np.ndarray
    deviation: np.ndarray
    nash: np.ndarray
    price: float = math.nan

    def __post_init__(self):
        c = _vector("profits.collusive", self.collusive)
        object.__setattr__(self, "collusive", c)
        object.__setattr__(self, "deviation", _vector("profits.deviation", self.deviation, c.size))
        object.__setattr__(self, "nash", _vector("profits.nash", self.nash, c.size))
        object.__setattr__(self, "price", float(self.price))

    @property
    def n_firms(self) -> int:
        """Number of firms."""
        return int(self.collusive.size)

    @classmethod
    def from_stage(cls, stage: StageGame) -> StageProfits:
        """Read the profits of a solved stage game.

        Parameters
        ----------
        stage : StageGame

        Returns
        -------
        StageProfits
        """
        price = average_price(stage.market, stage.collusive.actions)
        return cls(stage.collusive.firm_profits, stage.deviation_profits, stage.nash.firm_profits, price)

    def to_dict(self) -> dict:
        """Plain-JSON form (``price`` is ``None`` when unknown).

        Returns
        -------
        dict
        """
        return {
            "collusive": self.collusive.tolist(),
            "deviation": self.deviation.tolist(),
            "nash": self.nash.tolist(),
            "price": self.price if math.isfinite(self.price) else None,
        }

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "profits") -> StageProfits:
        """Inverse of :meth:`to_dict`, validating each entry under the key path ``prefix``.

        Parameters
        ----------
        d : dict
        prefix : str

        Returns
        -------
        StageProfits
        """
        if not isinstance(d, dict):
            raise InputError(prefix, f"must be a table with collusive, deviation and nash profits, got {d!r}")
        for key in ("collusive", "deviation", "nash"):
            if key not in d:
                raise InputError(f"{prefix}.{key}", "missing (one profit per firm)")
        extra = sorted(set(d) - {"collusive", "deviation", "nash", "price"})
        if extra:
            raise InputError(f"{prefix}.{extra[0]}", "unknown key; allowed: collusive, deviation, nash, price")
        try:
            price = d.get("price")
            return cls(d["collusive"], d["deviation"], d["nash"], math.nan if price is None else float(price))
        except InputError as e:
            raise InputError(prefix + e.key[len("profits"):], e.message) from None


def average_price(market, actions) -> float:
    """Quantity-weighted average price of an action profile (the plain mean when nothing sells).

    Parameters
    ----------
    market : Market or MarketSpec
    actions : array_like of shape (n_products,)

    Returns
    -------
    float
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    q, p, _ = ms.evaluate(np.asarray(actions, dtype=float)[None, :])
    total = float(q.sum())
    return float((p * q).sum() / total) if total > 0 else float(p.mean())


def stage_profits(source, agreement: str = "joint") -> StageProfits:
    """Per-firm collusive, deviation and Nash profits from whatever the caller has.

    Parameters
    ----------
    source : StageProfits, StageGame, Market, MarketSpec or dict
        A dict is read by :meth:`StageProfits.from_dict`; a market is solved with
        :func:`sim.theory.equilibrium.stage_game`.
    agreement : str
        The agreement when ``source`` is a market (see :func:`sim.theory.equilibrium.collusive_outcome`).

    Returns
    -------
    StageProfits
    """
    if isinstance(source, StageProfits):
        return source
    if isinstance(source, StageGame):
        return StageProfits.from_stage(source)
    if isinstance(source, Market | MarketSpec):
        return StageProfits.from_stage(stage_game(source, agreement))
    if isinstance(source, dict):
        return StageProfits.from_dict(source)
    raise InputError("profits", f"must be a market, a stage game or per-firm profits, got {type(source).__name__}")


@dataclass(frozen=True, eq=False)
class PathPoint:
    """One profile on the path from static Nash to the agreement.

    Attributes
    ----------
    weight : float
        Position on the path: 0 is static Nash, 1 the agreement.
    actions : ndarray of shape (n_products,)
    profits : StageProfits
        Profits at this profile, the best deviations against it and the static Nash profits.
    """

    weight: float
    actions: np.ndarray
    profits: StageProfits


def path_point(stage: StageGame, weight: float) -> PathPoint:
    """Evaluate the profile ``a_N + weight (a_C - a_N)`` of a stage game.

    Quantities are capped at capacity, as in :func:`sim.theory.thresholds.partial_collusion`.

    Parameters
    ----------
    stage : StageGame
    weight : float in [0, 1]

    Returns
    -------
    PathPoint
    """
    ms = stage.market
    w = float(weight)
    a = stage.nash.actions + w * (stage.collusive.actions - stage.nash.actions)
    if ms.quantity_setting:
        a = np.minimum(a, ms.capacity)
    if w == 0.0:
        # static Nash: no deviation pays, and the search would only add rounding
        pi = stage.nash.firm_profits
        return PathPoint(0.0, a, StageProfits(pi, pi, pi, average_price(ms, a)))
    if w == 1.0:
        return PathPoint(1.0, a, StageProfits.from_stage(stage))
    pi = ms.firm_profits(a[None, :])[0]
    _, dev = best_deviation(ms, a)
    return PathPoint(w, a, StageProfits(pi, dev, stage.nash.firm_profits, average_price(ms, a)))
