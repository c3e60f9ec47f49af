"""A merger in a market of price competition with capacity constraints: the market after it, and the comparison.

The ``[merger]`` table of a capacity market:

* ``firms``: the merging firms (two or more, by name or number from 1); they become one firm with the sum of their
  capacities, in the place of the first of them;
* ``name``: the merged firm's name (default: the names joined by ``+``);
* ``[[merger.capacity_moves]]`` (optional, applied in order after the merger): ``source`` gives up ``amount`` of
  capacity, to ``target`` (a transfer between firms, for example a kiln sold to the merged firm) or, without a
  target, to a new firm named ``new_firm`` (a divestiture).

:func:`capacity_merger` compares collusion before and after (:class:`CapacityMerger`): the thresholds of both
markets, the change with the binding firm before and after and the capacity-distribution measures that Compte, Jenny
and Rey (2002, "Capacity constraints, mergers and collusion", European Economic Review 46(1)) emphasise (the largest
firm's capacity share against the equal split, and whether the largest firm's rivals can serve the market), the
concentration screens of the EU (2004) and US (2023) merger guidelines on capacity shares
(:func:`sim.antitrust.screens.concentration_screen`), which post-merger partial cartel is the worry
(:func:`sim.theory.cartels.merger_cartel_worry`), the factor rows (:mod:`sim.antitrust.capacity_factors`) and,
when asked, the global sensitivity (:mod:`sim.antitrust.capacity_sensitivity`).

Model results are evidence under the stated assumptions, not proof of conduct; their use in a case is a matter for
the applicable law and qualified practitioners.
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.antitrust.capacity_factors import capacity_factor_rows
from sim.antitrust.capacity_plan import CapacityMergerPlan, apply_plan, firm_position, merger_plan_from_dict
from sim.antitrust.capacity_sensitivity import capacity_sobol
from sim.antitrust.global_sensitivity import SobolResult
from sim.antitrust.screens import ConcentrationScreen, concentration_screen
from sim.core.records import Record
from sim.core.text import CAUTION
from sim.models.capacity_pricing import CapacityChange, CapacityPricing, compare_capacity_change
from sim.theory.capacity_analysis import CapacityThresholds, capacity_thresholds
from sim.theory.cartels import CartelWorry, merger_cartel_worry

__all__ = ["CapacityMerger", "CapacityMergerPlan", "apply_plan", "capacity_merger", "merger_plan_from_dict"]

@dataclass(frozen=True)
class CapacityMerger(Record):
    """Collusion before and after a merger with capacity changes.

    Parameters
    ----------
    steps : list of str
        The merger and its capacity moves, in words.
    merging : list of str
        Names of the merging firms.
    before, after : CapacityThresholds
    change : CapacityChange
        Thresholds after minus before, binding firm (Nash reversion) before and after, symmetry measures.
    harshest_binding_before, harshest_binding_after : str
        The binding firm under minmax punishments before and after.
    concentration : ConcentrationScreen
        The EU and US screens at pre-merger capacity shares.
    cartels : CartelWorry or None
        Which post-merger partial cartel is the worry at ``delta`` (None without ``assess.delta``).
    delta : float
        The discount factor of the partial-cartel rows (nan when none is given).
    factors : list of dict
        The factor rows (:func:`sim.antitrust.capacity_factors.capacity_factor_rows`).
    sobol : SobolResult or None
        Sobol indices of the minmax-punishment thresholds (when ``[assess.global_sensitivity]`` asks).
    caution : str
    """

    steps: list
    merging: list
    before: CapacityThresholds
    after: CapacityThresholds
    change: CapacityChange
    harshest_binding_before: str
    harshest_binding_after: str
    concentration: ConcentrationScreen
    cartels: CartelWorry | None
    delta: float
    factors: list
    sobol: SobolResult | None = None
    caution: str = CAUTION

    @property
    def harshest_change(self) -> float:
        """Minmax-punishment threshold after minus before (float)."""
        return float(self.after.collusion.harshest_market - self.before.collusion.harshest_market)


def capacity_merger(market: CapacityPricing, plan: CapacityMergerPlan, agreement: dict | None = None,
                    delta: float | None = None, max_cartel_size: int | None = None,
                    sensitivity: dict | None = None, before: CapacityThresholds | None = None) -> CapacityMerger:
    """Compare collusion before and after a merger with capacity changes (see the module notes).

    Parameters
    ----------
    market : CapacityPricing
        The pre-merger market.
    plan : CapacityMergerPlan
    agreement : dict, optional
        ``rule``, ``shares``, ``price`` (:func:`sim.theory.capacity_analysis.agreement_of`); shares given for the
        pre-merger firms are not carried over: the post-merger agreement is proportional to capacities then.
    delta : float, optional
        Discount factor of the partial-cartel comparison (skipped when None).
    max_cartel_size : int, optional
        Largest post-merger cartel studied.
    sensitivity : dict, optional
        Validated global-sensitivity settings (:func:`sim.antitrust.capacity_sensitivity.sensitivity_settings`).
    before : CapacityThresholds, optional
        The pre-merger thresholds when already computed.

    Returns
    -------
    CapacityMerger
    """
    a = agreement or {"rule": "proportional", "shares": None, "price": None}
    post, steps, fmap = apply_plan(market, plan)
    a_post = a if a["rule"] != "given" else {"rule": "proportional", "shares": None, "price": a["price"]}
    th0 = before if before is not None else capacity_thresholds(market, a)
    th1 = capacity_thresholds(post, a_post)
    change = compare_capacity_change(th0.collusion, th1.collusion, "; ".join(steps))
    names = th0.names
    merging = sorted({names[firm_position(names, f)] for f in plan.firms}, key=names.index)
    cap = th0.collusion.capacity
    screen = concentration_screen(cap / cap.sum(), [names.index(n) for n in merging])
    worry = None
    if delta is not None:
        worry = merger_cartel_worry(market, post, fmap, delta, max_size=max_cartel_size, names_pre=names,
                                    names_post=th1.names)
    sobol = capacity_sobol(market, plan, a, sensitivity) if sensitivity else None
    rows = capacity_factor_rows(th0, th1, screen, worry)
    return CapacityMerger(steps, merging, th0, th1, change, th0.harshest_binding_name, th1.harshest_binding_name,
                          screen, worry, float("nan") if delta is None else float(delta), rows, sobol)
