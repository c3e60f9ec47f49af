"""Repeated price competition with capacity constraints in the simulation engine.

A capacity market (:class:`sim.models.capacity_pricing.CapacityPricing`) is played by the same kernel, driver,
line-ups and monitoring as every other market: :func:`capacity_stage_levels` solves its stage game once (the
agreement, each firm's best deviation, the static equilibrium) into the named levels a line-up compiles against,
and :func:`sim.simulation.game.compile_game` takes it from there. The market's stage core is
:func:`sim.models.capacity_stage.capacity_stage`.

What the automata's "compete" phase plays (the ``nash`` level): the static equilibrium. Where it is pure it is
played as it is; where it is mixed (Bertrand-Edgeworth), each firm draws its price every period of the phase from
its equilibrium distribution (tabulated as in :mod:`sim.models.capacity_stage`), from the replication's own
stream, so results are reproducible from the seed and do not depend on the number of workers. The analytic
baseline (thresholds, the closed-form deviation gain) uses the equilibrium's expected profits, which the draws
match on average.

Stick and carrot (Abreu, 1986) needs a punishment level below the static equilibrium that the firms would
accept for one period; this model does not compute one, so a line-up asking for it is refused, naming the key.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.models.capacity_repeated import CapacityStageMarket
from strategies.base import StageLevels

__all__ = ["CapacityOutcome", "CapacityStage", "capacity_stage_levels"]


@dataclass(frozen=True)
class CapacityOutcome:
    """A level's actions and per-period profits.

    Parameters
    ----------
    actions : ndarray of shape (n_firms,)
        Prices (``MIXED_PRICE`` for a drawn price).
    profits : ndarray of shape (n_firms,)
        Profits (expected ones for a drawn level).
    """

    actions: np.ndarray
    profits: np.ndarray


@dataclass(frozen=True)
class CapacityStage:
    """The solved stage game of a capacity market, in the fields the engine reads of a stage game.

    Parameters
    ----------
    market : CapacityStageMarket
        The market as the engine plays it.
    agreement : str
        The agreement rule.
    nash, collusive : CapacityOutcome
        The static equilibrium and the agreement.
    deviation_profiles : ndarray of shape (n_firms, n_firms)
        Row i: firm i's best deviation, the others at the agreed price.
    deviation_actions : ndarray of shape (n_firms,)
        Each firm's deviation price.
    deviation_profits : ndarray of shape (n_firms,)
        Each firm's profit when it deviates.
    minmax_profits : ndarray of shape (n_firms,)
        Each firm's minmax payoff.
    """

    market: CapacityStageMarket
    agreement: str
    nash: CapacityOutcome
    collusive: CapacityOutcome
    deviation_profiles: np.ndarray
    deviation_actions: np.ndarray
    deviation_profits: np.ndarray
    minmax_profits: np.ndarray

    @property
    def n_firms(self) -> int:
        """Number of firms (int)."""
        return self.market.n_firms


#: how the reports name the capacity model's agreement rules
_RULE_NAMES = {"proportional": "shares proportional to capacities", "equal": "equal quantities",
               "given": "shares given by the user"}


def _no_stick(key: str):
    raise InputError(key, "stick and carrot is not available in a capacity market (no punishment level below the "
                          "static equilibrium is computed for it); use grim trigger or Nash reversion")


def capacity_stage_levels(market: CapacityStageMarket) -> tuple[CapacityStage, StageLevels]:
    """Solve a capacity market's stage game once and return ``(stage, levels)`` for compiling line-ups.

    Parameters
    ----------
    market : CapacityStageMarket
        The market and its agreement.

    Returns
    -------
    stage : CapacityStage
    levels : StageLevels
        ``collusive``, ``nash`` and ``deviation`` profiles with their per-firm profits.
    """
    cm = market
    pr, fp = cm.profiles, cm.firm_profits_of
    rule = f"{_RULE_NAMES.get(cm.agreed.rule, cm.agreed.rule)} at the price {cm.agreed.price:g}"
    stage = CapacityStage(cm, rule, CapacityOutcome(pr["nash"].copy(), fp["nash"].copy()),
                          CapacityOutcome(pr["collusive"].copy(), fp["collusive"].copy()), cm.deviation_rows.copy(),
                          pr["deviation"].copy(), fp["deviation"].copy(), cm.minmax_profits())
    levels = StageLevels(
        profiles={k: np.asarray(v, dtype=float).copy() for k, v in pr.items()},
        owner=np.arange(cm.n_firms, dtype=np.int64), n_firms=cm.n_firms, quantity_setting=False,
        capacity=cm.capacity.copy(), firm_profits={k: np.asarray(v, dtype=float).copy() for k, v in fp.items()},
        lazy={"punishment": _no_stick},
    )
    return stage, levels
