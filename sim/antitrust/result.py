"""The result of a coordinated-effects assessment, as plain data.

:class:`Assessment` is what :func:`sim.antitrust.assess.assess` returns, what a cell of the ``assess`` kind stores
with its results and what the evidence layer draws (:mod:`sim.evidence.assess`). It holds numbers, strings, lists
and dicts only -- no market object, no solver state -- so that it prints, plots and round-trips through JSON
(``Assessment.from_dict(json.loads(json.dumps(a.to_dict()))) == a``). Numbers are stored as JSON holds them: a
value that is not finite (a threshold that no discount factor below one reaches, a ratio over a zero) is None.

Conventions. A threshold of None means "not sustainable at any discount factor below one"; in comparisons it ranks
above every number. "Easier" means a lower critical discount factor: the firms need less patience to sustain the
agreement. Firms are named as in ``[merger] names`` (default ``Firm 1``, ``Firm 2``, ...); the merged firm is named
after its owners joined by `` + ``.
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.antitrust.merger_sets import PayoffSetsComparison
from sim.core.jsonutil import jsonable
from sim.core.records import Record
from sim.core.text import CAUTION

__all__ = ["DEFAULT_CURRENCY", "DEFAULT_PERIOD", "Assessment", "CautionedTable", "MarketSide"]

#: the words for money and for a period when the experiment gives none (``experiment.currency``, ``.period``)
DEFAULT_CURRENCY = "currency units"
DEFAULT_PERIOD = "period"

#: fields of :class:`Assessment` that say how to present it rather than what was computed
PRESENTATION_FIELDS = ("name", "currency", "period")


@dataclass(frozen=True)
class MarketSide(Record):
    """One side of the comparison (the market before or after the merger), as plain data.

    Parameters
    ----------
    market : dict
        The market's settings (:meth:`sim.Market.to_dict`).
    names : list of str
        Firm names, one per firm.
    stage : dict
        The stage game (:meth:`sim.theory.equilibrium.StageGame.to_dict`): actions and profits at the static
        Nash equilibrium, the agreement and the best deviations, per product and per firm.
    thresholds : dict
        ``grim``, ``finite`` (a list, one per punishment length T) and ``stick_carrot``: each the market's
        critical discount factor (``market``, None when not sustainable below one), ``per_firm`` (a list of
        length n_firms), ``binding_firm`` (counted from 1) and ``binding_name``; ``stick_carrot`` also gives the
        punishment level (``punishment_action``), the profits at it and which incentive constraint binds
        (``binding_constraint``: ``"collusion"`` or ``"punishment"``).
    partial_collusion : list of dict
        The most profitable sustainable outcome of each scheme at each discount factor (``scheme``, ``T``,
        ``delta``, ``weight``, ``actions``, ``profits``, ``profit_gain``).
    asymmetry : dict
        See :func:`sim.antitrust.sides.asymmetry`.
    simulation : dict, optional
        Simulated persistence: each metric's estimate (``value``, ``se``, ``low``, ``high``, ``n``, ``method``),
        the simulation's settings and ``collusive_by_period`` (a list of length n_periods). Absent without
        simulations.
    simulation_scaled_noise : dict, optional
        The same metrics with every monitoring noise parameter multiplied by ``assess.transparency_scale``.
    """

    market: dict
    names: list
    stage: dict
    thresholds: dict
    partial_collusion: list
    asymmetry: dict
    simulation: dict | None = None
    simulation_scaled_noise: dict | None = None

    def to_dict(self) -> dict:
        """The side as plain JSON data, without the simulations it does not have.

        Returns
        -------
        dict
        """
        out = super().to_dict()
        for k in ("simulation", "simulation_scaled_noise"):
            if out[k] is None:
                del out[k]
        return out

    def scheme(self, scheme: str, T: int | None = None) -> dict:
        """The thresholds of one punishment scheme.

        Parameters
        ----------
        scheme : {"grim", "finite", "stick_carrot"}
        T : int, optional
            The punishment length of ``finite``.

        Returns
        -------
        dict
            ``market``, ``per_firm``, ``binding_firm``, ``binding_name`` (and ``T``, or the stick-and-carrot
            punishment).
        """
        th = self.thresholds
        if scheme in ("grim", "stick_carrot"):
            return th[scheme]
        for f in th["finite"]:
            if f["T"] == T:
                return f
        raise KeyError(f"finite reversion with T={T} was not computed")


@dataclass(frozen=True)
class Assessment(Record):
    """The coordinated-effects comparison, as plain data (see the module notes).

    Parameters
    ----------
    settings : dict
        The validated settings: ``scheme``, ``length``, ``punishments``, ``deltas``, ``partial``, ``growth``,
        ``simulate``, ``agreement``, ``transparency_scale``, ``run``, ``effective_delta``, ``monitoring``,
        ``lineup``, ``lineup_after``, ``sensitivity``, ``sensitivity_axes`` and ``merger``.
    calibration : dict or None
        How the pre-merger market was calibrated (:meth:`sim.antitrust.calibration.Calibration.to_dict`); None
        when the market was given.
    merger : dict
        The merger and both static equilibria (:meth:`sim.antitrust.merger.MergerResult.to_dict`): names, HHI,
        consumer surplus and ``price_changes`` (one row per product, or one for the market price of a homogeneous
        good, with the relative ``change``).
    before, after : MarketSide
    conclusion : dict
        The headline comparison at the experiment's discount factor: ``scheme``, ``threshold_before``,
        ``threshold_after``, ``change``, ``direction`` (``easier``, ``harder``, ``unchanged``), the binding firms,
        ``delta``, ``sustainable_before``, ``sustainable_after``, ``category``, one row per scheme in ``schemes``,
        ``persistence`` (with simulations), ``warnings``, ``statement`` and, with a sensitivity analysis,
        ``robustness``.
    factors : list of dict
        The factor table, one row per factor (see :mod:`sim.antitrust.factors`).
    sensitivity : dict
        The comparison over ranges of the uncertain inputs (see :mod:`sim.antitrust.sensitivity`).
    assumptions : list of str
        The assumptions specific to this assessment.
    caution : str
        The caution every output of the assessment carries.
    name : str
        The experiment's name.
    currency : str or None
        What money is counted in (``experiment.currency``, for example ``"EUR"``); None: not stated.
    period : str or None
        What one period of the model is (``experiment.period``, for example ``"month"``); None: not stated.
    payoff_sets : PayoffSetsComparison or None
        The equilibrium payoff sets before and after (:mod:`sim.antitrust.merger_sets`); None when
        ``[assess.payoff_sets]`` is not given (and then absent from :meth:`to_dict`).
    pair_mergers : dict or None
        ``pairs`` (:meth:`sim.antitrust.screens.PairTable.to_dict`) and ``maverick``
        (:meth:`sim.antitrust.screens.Maverick.to_dict`) of the pre-merger market; None when
        ``assess.pair_mergers`` is not set (and then absent from :meth:`to_dict`).
    """

    settings: dict
    calibration: dict | None
    merger: dict
    before: MarketSide
    after: MarketSide
    conclusion: dict
    factors: list
    sensitivity: dict
    assumptions: list
    caution: str = CAUTION
    name: str = "assessment"
    currency: str | None = None
    period: str | None = None
    payoff_sets: PayoffSetsComparison | None = None
    pair_mergers: dict | None = None

    def to_dict(self) -> dict:
        """The assessment as plain JSON data, without the payoff sets it does not have.

        Returns
        -------
        dict
        """
        out = super().to_dict()
        for optional in ("payoff_sets", "pair_mergers"):
            if out[optional] is None:
                del out[optional]
        return out

    def sides(self) -> tuple:
        """Both sides with their labels.

        Returns
        -------
        tuple of (str, MarketSide)
            ``(("before", self.before), ("after", self.after))``.
        """
        return ("before", self.before), ("after", self.after)

    def headline(self, side: MarketSide) -> dict:
        """The thresholds of the headline scheme (``settings["scheme"]``) on one side.

        Parameters
        ----------
        side : MarketSide

        Returns
        -------
        dict
            See :meth:`MarketSide.scheme`.
        """
        return side.scheme(self.settings["scheme"], self.settings["length"])

    def money(self, per_period: bool = True) -> str:
        """The unit of a sum of money in words.

        Parameters
        ----------
        per_period : bool
            A flow (profit, consumer surplus: per period) rather than a price or a cost (per unit sold).

        Returns
        -------
        str
            For example ``"EUR per month"`` or ``"EUR"``; ``"currency units per period"`` when the experiment
            states neither.
        """
        cur = self.currency or DEFAULT_CURRENCY
        return f"{cur} per {self.period or DEFAULT_PERIOD}" if per_period else cur

    def document(self) -> dict:
        """What was computed, without how to present it: :meth:`to_dict` without ``name``, ``currency`` and
        ``period`` (the form a cell's ``arrays["assessment"]`` holds).

        Returns
        -------
        dict
        """
        return {k: v for k, v in self.to_dict().items() if k not in PRESENTATION_FIELDS}

    @classmethod
    def from_parts(cls, parts: dict, name: str = "assessment", currency: str | None = None,
                   period: str | None = None) -> Assessment:
        """Build the result from computed parts, storing every number as JSON holds it.

        Parameters
        ----------
        parts : dict
            ``settings``, ``calibration``, ``merger``, ``before``, ``after`` (dicts of :class:`MarketSide`'s
            fields), ``conclusion``, ``factors``, ``sensitivity``, ``assumptions``; numpy values, nan and inf
            allowed (nan and inf become None).
        name : str
        currency, period : str or None

        Returns
        -------
        Assessment
        """
        doc = jsonable(dict(parts))
        doc.update(name=name, currency=currency, period=period)
        return cls.from_dict(doc)


class CautionedTable:
    """A flat dataclass of the practitioner's tables (screens, shares of draws) as JSON data with the caution."""

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined), with the caution.

        Returns
        -------
        dict
        """
        return {**self.__dict__, "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict):
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        object
            An instance of the class.
        """
        return cls(**{k: v for k, v in d.items() if k != "caution"})
