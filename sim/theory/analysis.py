"""The thresholds analysis: one function from a validated specification to a result that is plain data.

:func:`thresholds_analysis` solves the stage game of a market, every critical discount factor asked for
(grim trigger, T-period Nash reversion, the best symmetric stick and carrot), partial collusion at the given
discount factors and, under noisy monitoring, the trigger-price equilibrium (Green and Porter, 1984). Its
:class:`ThresholdsResult` is what ``supergame thresholds`` prints, what a ``thresholds`` cell of a run stores
and what the evidence bundle draws (:mod:`sim.evidence.thresholds`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.records import Record
from sim.theory.any_punishment import AnyPunishmentResult, AnyPunishmentSpec, any_punishment_analysis
from sim.theory.contact_section import ContactSection, contact_section
from sim.theory.enforcement_section import EnforcementQuestion, EnforcementSection, enforcement_section
from sim.theory.multimarket import ContactGame
from sim.theory.states_section import DemandStatesSection, StatesQuestion, states_section
from sim.theory.thresholds import critical_discount_factors
from sim.theory.trigger_price import trigger_price_equilibrium

__all__ = ["ThresholdsResult", "ThresholdsSpec", "thresholds_analysis"]


@dataclass(frozen=True)
class ThresholdsSpec:
    """A validated thresholds question (built by the ``thresholds`` kind from an experiment's tables).

    Attributes
    ----------
    market : sim.Market
    agreement : str
        ``"joint"``, ``"symmetric"``, ``"proportional"`` or ``"given"``.
    actions : list of float or None
        The agreed actions per product when ``agreement == "given"``.
    punishments : tuple of int
        Lengths T of Nash reversion.
    deltas : tuple of float
        Discount factors for partial collusion (and the trigger-price equilibrium).
    noise : str or None
        The demand shock of the trigger-price equilibrium (None: perfect monitoring, no such equilibrium).
    sigma : float
        Its standard deviation.
    any_punishment : AnyPunishmentSpec or None
        The lowest threshold under any punishment, asked for by an ``[any_punishment]`` table (None: not asked).
    enforcement : EnforcementQuestion or None
        Detection, fines and leniency (``[enforcement]``).
    demand_states : StatesQuestion or None
        Demand states and the parameter that moves with them (``[demand_states]``).
    contact : ContactGame or None
        Markets linked by the same firms (``[contact]``).
    """

    market: object
    agreement: str
    actions: list | None
    punishments: tuple
    deltas: tuple
    noise: str | None = None
    sigma: float = 0.0
    any_punishment: AnyPunishmentSpec | None = None
    enforcement: EnforcementQuestion | None = None
    demand_states: StatesQuestion | None = None
    contact: ContactGame | None = None


@dataclass(frozen=True)
class ThresholdsResult(Record):
    """Everything the thresholds analysis found, as plain data.

    Attributes
    ----------
    market : dict
        The market's settings (:meth:`sim.Market.to_dict`).
    products : dict
        Per product (lists of length n_products): ``cost``, ``capacity`` (None where unlimited) and ``owner``
        (the owning firm, counted from 1); ``quantity_setting`` (bool) and ``n_firms``.
    report : dict
        :meth:`sim.ThresholdReport.to_dict`: the stage game's profits and actions, the thresholds of every
        scheme with the binding firm, partial collusion and the binding firm's sensitivity. Each scheme also
        lists ``tied_firms``: the firms (from 1) whose thresholds equal the market's within a relative 1e-9
        (:data:`sim.theory.verdicts.TIE_RTOL`; the binding firm is one of them), and, when the scheme sustains
        the agreement at no discount factor below one, ``not_sustainable``: ``code`` (``below_nash``,
        ``no_gain``, ``incentive`` or ``solver``), ``firms`` and ``text`` (:mod:`sim.theory.verdicts`).
    punishments : list of int
    deltas : list of float
    trigger_price : list of dict or None
        One trigger-price equilibrium per discount factor (:meth:`sim.TriggerPriceScheme.to_dict`).
    any_punishment : AnyPunishmentResult or None
        The lowest critical discount factor under any punishment on an action grid, with the named schemes on
        the same grid (None when the experiment has no ``[any_punishment]`` table).
    enforcement : EnforcementSection or None
        Collusion under detection, fines and leniency (:mod:`sim.theory.enforcement_section`).
    demand_states : DemandStatesSection or None
        Per-state thresholds and the best state-contingent path (:mod:`sim.theory.states_section`).
    contact : ContactSection or None
        Pooled thresholds of markets linked by the same firms (:mod:`sim.theory.contact_section`).
    """

    market: dict
    products: dict
    report: dict
    punishments: list
    deltas: list
    trigger_price: list | None = None
    any_punishment: AnyPunishmentResult | None = None
    enforcement: EnforcementSection | None = None
    demand_states: DemandStatesSection | None = None
    contact: ContactSection | None = None

    @property
    def n_firms(self) -> int:
        """The number of firms."""
        return int(self.products["n_firms"])

    def scheme_rows(self) -> list[dict]:
        """One row per scheme: ``scheme`` (readable), ``key`` (``grim``, ``finite``, ``stick_carrot``), ``T``,
        ``market``, ``binding_firm`` (from 1) and ``per_firm`` (None where the firm cannot be held).

        Returns
        -------
        list of dict
        """
        th = self.report["thresholds"]
        rows = [{"scheme": "grim trigger", "key": "grim", "T": None, **th["grim"]}]
        rows += [{"scheme": f"Nash reversion, T={f['T']}", "key": "finite", **f} for f in th["finite"]]
        rows.append({"scheme": "stick and carrot", "key": "stick_carrot", "T": None, **th["stick_carrot"]})
        return rows


def thresholds_analysis(spec: ThresholdsSpec) -> ThresholdsResult:
    """Solve a thresholds question.

    Parameters
    ----------
    spec : ThresholdsSpec

    Returns
    -------
    ThresholdsResult
    """
    ms = spec.market.spec()
    report = critical_discount_factors(spec.market, punishments=spec.punishments, deltas=spec.deltas,
                                       agreement=spec.agreement, actions=spec.actions)
    tp = None
    if spec.noise is not None:
        tp = [trigger_price_equilibrium(spec.market, d, spec.noise, spec.sigma).to_dict() for d in spec.deltas]
    caps = [float(c) if np.isfinite(c) else None for c in ms.capacity]
    products = {"cost": [float(c) for c in ms.cost], "capacity": caps, "owner": (ms.owner + 1).tolist(),
                "quantity_setting": bool(ms.quantity_setting), "n_firms": int(ms.n_firms)}
    extra = {}
    if spec.any_punishment is not None:
        extra["any_punishment"] = any_punishment_analysis(spec.market, spec.any_punishment, spec.agreement,
                                                          spec.actions)
    if spec.enforcement is not None:
        extra["enforcement"] = enforcement_section(spec.market, spec.enforcement, spec.deltas, spec.agreement,
                                                   spec.actions)
    if spec.demand_states is not None:
        extra["demand_states"] = states_section(spec.market, spec.demand_states, spec.deltas, spec.agreement)
    if spec.contact is not None:
        extra["contact"] = contact_section(spec.contact, spec.deltas)
    return ThresholdsResult(market=spec.market.to_dict(), products=products, report=report.to_dict(),
                            punishments=[int(t) for t in spec.punishments], deltas=[float(d) for d in spec.deltas],
                            trigger_price=tp, **extra)
