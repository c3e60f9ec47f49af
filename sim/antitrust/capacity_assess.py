"""Price competition with capacity constraints from an experiment document: the thresholds and, with a ``[merger]``,
the merger's effect on coordination.

Tables read: ``[market]`` (``model = "capacity"``; :mod:`sim.theory.capacity_analysis`), ``[collusion]`` (the
agreement rule: ``proportional`` to capacities, ``equal`` or ``given`` shares; an optional agreed ``price``),
``[merger]`` (optional; :mod:`sim.antitrust.capacity_plan`) and ``[assess]`` (optional, with a merger): ``delta``
(the discount factor at which partial cartels are compared), ``max_cartel_size`` and ``[assess.global_sensitivity]``
(:mod:`sim.antitrust.capacity_sensitivity`).

:func:`prepare_capacity` validates everything before any work (errors name the key path); :func:`run_capacity` does
the work and returns a :class:`CapacityResult`, plain data that round-trips through JSON.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sim.antitrust.capacity_merger import CapacityMerger, capacity_merger
from sim.antitrust.capacity_plan import CapacityMergerPlan, merger_plan_from_dict
from sim.antitrust.capacity_sensitivity import sensitivity_settings
from sim.antitrust.screens import Maverick, PairTable, maverick, pair_thresholds
from sim.core.errors import InputError
from sim.core.params import Integer
from sim.core.records import Record
from sim.core.tables import refuse_unknown
from sim.core.text import CAUTION
from sim.models.capacity_pricing import CapacityPricing
from sim.theory.capacity_analysis import (
    CapacityThresholds,
    agreement_of,
    capacity_market_from_dict,
    capacity_thresholds,
    require_spare_capacity,
    require_static_equilibrium,
)

__all__ = ["CAPACITY_TABLES", "CapacityResult", "PreparedCapacity", "prepare_capacity", "run_capacity"]

#: the tables of a capacity experiment
CAPACITY_TABLES = ("market", "collusion", "merger", "assess")


@dataclass(frozen=True)
class PreparedCapacity:
    """What :func:`prepare_capacity` validated.

    Parameters
    ----------
    market : CapacityPricing
    agreement : dict
        ``rule``, ``shares``, ``price``.
    plan : CapacityMergerPlan or None
    delta : float or None
    max_cartel_size : int or None
    sensitivity : dict or None
    pair_mergers : bool
        Whether to compute the threshold after every two-firm merger and the maverick (``assess.pair_mergers``).
    """

    market: CapacityPricing
    agreement: dict
    plan: CapacityMergerPlan | None
    delta: float | None
    max_cartel_size: int | None
    sensitivity: dict | None
    pair_mergers: bool = False


def prepare_capacity(doc: dict) -> PreparedCapacity:
    """Validate a capacity experiment's tables (see the module notes).

    Parameters
    ----------
    doc : dict
        The experiment document.

    Returns
    -------
    PreparedCapacity

    Raises
    ------
    InputError
        Naming the key path (``market.capacity``, ``merger.capacity_moves[1].amount``,
        ``assess.global_sensitivity.inputs.cost``, ...).
    """
    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    market = capacity_market_from_dict(doc["market"])
    require_spare_capacity(market)
    require_static_equilibrium(market)
    agreement = agreement_of(doc.get("collusion", {}), market.spec().n_firms)
    if agreement["price"] is not None:
        market.agreement(agreement["rule"], agreement["shares"], agreement["price"])
    plan = merger_plan_from_dict(doc["merger"], market) if "merger" in doc else None
    opts = refuse_unknown(doc.get("assess", {}), "assess",
                          ("delta", "max_cartel_size", "global_sensitivity", "pair_mergers"))
    pairs = opts.get("pair_mergers", False)
    if not isinstance(pairs, bool):
        raise InputError("assess.pair_mergers", f"must be true or false, got {pairs!r}")
    if pairs and market.spec().n_firms < 3:
        raise InputError("assess.pair_mergers", f"a two-firm merger leaves a monopoly in a market of "
                                                f"{market.spec().n_firms} firms; the pair table needs three or more")
    if pairs and agreement["shares"] is not None:
        raise InputError("assess.pair_mergers", "needs an agreement rule for the shares (collusion.agreement), not "
                                                "given shares, which do not carry over to a merged firm")
    if any(k != "pair_mergers" for k in opts) and plan is None:
        raise InputError("assess", "the [assess] settings need a [merger] table")
    delta = opts.get("delta")
    if delta is not None and (isinstance(delta, bool) or not isinstance(delta, int | float) or not 0 < delta < 1):
        raise InputError("assess.delta", f"must be a number in (0, 1), got {delta!r}")
    size = opts.get("max_cartel_size")
    if size is not None:
        size = Integer(2, market.spec().n_firms).check("assess.max_cartel_size", size)
    sens = None
    if "global_sensitivity" in opts:
        sens = sensitivity_settings(opts["global_sensitivity"], market, plan)
    return PreparedCapacity(market, agreement, plan, None if delta is None else float(delta), size, sens, pairs)


@dataclass(frozen=True)
class CapacityResult(Record):
    """The result of a capacity experiment.

    Parameters
    ----------
    thresholds : CapacityThresholds
        The market of the file (before any merger).
    merger : CapacityMerger or None
        The comparison with the market after the merger (None without a ``[merger]``).
    caution : str
    pairs : PairTable or None
        The Nash-reversion threshold after every two-firm merger of the market of the file
        (``assess.pair_mergers``; :func:`sim.antitrust.screens.pair_thresholds`).
    maverick : Maverick or None
        The firm whose presence raises that threshold the most, with the reason
        (:func:`sim.antitrust.screens.maverick`).
    """

    thresholds: CapacityThresholds
    merger: CapacityMerger | None = None
    caution: str = CAUTION
    pairs: PairTable | None = None
    maverick: Maverick | None = None

    @property
    def n_firms(self) -> int:
        """Number of firms of the market of the file (int)."""
        return self.thresholds.n_firms


def run_capacity(p: PreparedCapacity) -> CapacityResult:
    """Compute the thresholds and, with a merger, the comparison.

    Parameters
    ----------
    p : PreparedCapacity

    Returns
    -------
    CapacityResult
    """
    th = capacity_thresholds(p.market, p.agreement)
    extra = {}
    if p.pair_mergers:
        rule = {"rule": p.agreement["rule"], "price": p.agreement["price"]}
        extra = {"pairs": pair_thresholds(p.market, agreement=rule), "maverick": maverick(p.market, agreement=rule)}
    if p.plan is None:
        return CapacityResult(th, **extra)
    mg = capacity_merger(p.market, p.plan, p.agreement, p.delta, p.max_cartel_size, p.sensitivity, before=th)
    return CapacityResult(th, mg, **extra)


def finite_or_nan(x) -> float:
    """A float, nan for None or a non-finite value.

    Parameters
    ----------
    x : float or None

    Returns
    -------
    float
    """
    return math.nan if x is None or not math.isfinite(float(x)) else float(x)
