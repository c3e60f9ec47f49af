"""Coordinated effects of a merger: tacit collusion before and after, side by side.

:func:`assess` takes a pre-merger market (given, or calibrated from observed data by
:func:`sim.antitrust.calibration.calibrate`) and a :class:`~sim.antitrust.merger.Merger`, builds the post-merger
market (:func:`sim.antitrust.merger.merge`) and compares the two:

* critical discount factors of each punishment scheme -- grim trigger (Friedman, 1971), T-period
  Nash reversion, the optimal symmetric stick and carrot (Abreu, 1986) -- per firm, with the binding
  firm (:func:`sim.theory.thresholds.critical_discount_factors`; :mod:`sim.antitrust.sides`);
* partial collusion: the most profitable outcome each scheme sustains at a range of discount factors
  (:func:`sim.theory.thresholds.partial_collusion`);
* simulated persistence of collusion under the experiment's monitoring noise (the engine,
  :func:`sim.simulation.engine.run_game`), with confidence intervals;
* asymmetry measures: firm shares, the Herfindahl-Hirschman index, the ratio of the largest to the
  smallest share, cost and capacity spreads (:func:`sim.antitrust.sides.asymmetry`);
* the usual factors of the trade's checklist, each varied in the model (:mod:`sim.antitrust.factors`);
* sensitivity: the comparison repeated over ranges of the uncertain inputs, locating where the conclusion flips
  (:mod:`sim.antitrust.sensitivity`).

Layers: :func:`prepare_assessment` validates everything (and calibrates, merges and compiles the line-ups) before
any work; :func:`run_assessment` does the work and returns an :class:`~sim.antitrust.result.Assessment`, plain data
that round-trips through JSON; :func:`assess` is both. The ``assess`` experiment kind
(:mod:`sim.runner.analyses.assess`) runs one assessment per cell and stores the result with the cell; the evidence
layer (:mod:`sim.evidence.assess`) prints, plots and writes it into the bundle.

Discount factor. The headline discount factor is ``run.delta``; with a random horizon (``run.horizon = "random"``)
the factor that matters is ``delta * continuation``.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from tqdm import tqdm

from sim.antitrust.calibration import MarketData, calibrate
from sim.antitrust.conclusion import assumptions, conclusion
from sim.antitrust.contact_factor import check_other_markets, contact_row
from sim.antitrust.factors import factor_table
from sim.antitrust.merger import Merger, merge
from sim.antitrust.merger_sets import check_payoff_sets, compare_payoff_sets
from sim.antitrust.options import (
    ASSESS_TABLES,
    SENSITIVITY_INPUTS,
    assessment_from_dict,
    check_options,
    check_sensitivity,
    has_noise,
    lineup_entries,
    scaled_monitoring,
)
from sim.antitrust.result import Assessment, MarketSide
from sim.antitrust.screens import maverick, pair_thresholds
from sim.antitrust.sensitivity import robustness, sensitivity
from sim.antitrust.sides import asymmetry, simulate_side, solve_side, symmetric_counterpart
from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.models.market import Market
from sim.models.monitoring import Monitoring, monitoring_from_dict
from sim.simulation.engine import RUN_DEFAULTS, check_run, prepare_game
from sim.theory.equilibrium import collusive_outcome

__all__ = ["ASSESS_TABLES", "Assessment", "MarketSide", "PreparedAssessment", "assess", "assessment_from_dict",
           "asymmetry", "prepare_assessment", "run_assessment", "symmetric_counterpart"]


class _Progress:
    def __init__(self, total: int, enabled):
        if enabled is None:
            enabled = sys.stderr.isatty()
        self.bar = None
        if enabled:
            self.bar = tqdm(total=total, desc="assess", unit="step", leave=False, file=sys.stderr)

    def step(self, what: str = "") -> None:
        if self.bar is not None:
            if what:
                self.bar.set_postfix_str(what, refresh=False)
            self.bar.update(1)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


@dataclass
class PreparedAssessment:
    """Everything :func:`prepare_assessment` validated before the work starts.

    Parameters
    ----------
    opts : dict
        The validated ``[assess]`` settings (:func:`sim.antitrust.options.check_options`).
    data : MarketData or None
        The observed data (None: a given market).
    calibration : Calibration or None
    merger : Merger
    mres : MergerResult
        The markets before and after the merger with their static equilibria.
    monitoring : Monitoring
    runs : dict
        The validated simulation settings.
    sens : dict
        The validated sensitivity ranges (name -> ndarray).
    entries, post_entries : list of dict
        The line-up before and after the merger, one entry per firm.
    games : dict
        ``"before"`` and ``"after"`` -> the compiled games of the simulations (empty without simulations).
    effective_delta : float
        The discount factor of the conclusion.
    settings : dict
        What :attr:`sim.antitrust.result.Assessment.settings` records.
    rescaled_monitoring : Monitoring, optional
        The monitoring of the transparency factor (every noise parameter scaled).
    noise_monitoring : list of Monitoring
        One monitoring per noise-sensitivity scale.
    name : str
        The experiment's name.
    currency, period : str or None
        What money and a period are counted in.
    payoff_sets : PayoffSetsSpec, optional
        The validated ``[assess.payoff_sets]`` table (None: no payoff sets).
    contact : ContactSetup, optional
        The validated ``[[assess.other_markets]]`` with the contact game (None: no other markets).
    pair_mergers : bool
        Compute the threshold after every two-firm merger of the pre-merger market and the maverick.
    """

    opts: dict
    data: Any
    calibration: Any
    merger: Any
    mres: Any
    monitoring: Any
    runs: dict
    sens: dict
    entries: list
    post_entries: list
    games: dict
    effective_delta: float
    settings: dict
    rescaled_monitoring: Any = None
    noise_monitoring: list = field(default_factory=list)
    name: str = "assessment"
    currency: str | None = None
    period: str | None = None
    payoff_sets: Any = None
    contact: Any = None
    pair_mergers: bool = False


def assess(source, merger, monitoring=None, lineup=None, run=None, agreement: str = "joint", scheme: str = "grim",
           length: int | None = None, punishments=(1, 2, 3), deltas=(0.5, 0.6, 0.7, 0.8, 0.9),
           partial=None, growth: float = 0.02, simulate: bool = True, transparency_scale: float = 2.0,
           sensitivity: dict | None = None, progress=None, key=(0,), name: str = "assessment",
           currency: str | None = None, period: str | None = None, payoff_sets: dict | None = None,
           other_markets: list | None = None, pair_mergers: bool = False) -> Assessment:
    """Compare the scope for tacit collusion before and after a merger.

    Parameters
    ----------
    source : Market or MarketData
        The pre-merger market, or observed data to calibrate it from.
    merger : Merger
    monitoring : Monitoring or dict, optional
        What firms observe and the noise around it (default: perfect monitoring, no noise); used by
        the simulations.
    lineup : list of dict, optional
        ``[[strategies]]`` entries for the pre-merger firms (default: grim trigger for every firm).
        After the merger the merged firm plays the strategy of the lowest-numbered merging firm.
    run : dict, optional
        Simulation settings (``periods``, ``replications``, ``horizon``, ``continuation``, ``delta``,
        ``seed``, ``paths``); ``delta`` is also the headline discount factor.
    agreement : {"joint", "symmetric", "proportional"}
        The collusive outcome in each market.
    scheme : {"grim", "finite", "stick_carrot"}
        The punishment scheme of the headline comparison (``finite`` with ``length``).
    length : int, optional
        Punishment length T of the headline scheme ``finite``.
    punishments : sequence of int
        Lengths T of finite Nash reversion to report.
    deltas : sequence of float
        Discount factors at which to report partial collusion.
    partial : sequence of str, optional
        Schemes whose partial collusion is reported (default: grim trigger, and finite reversion for
        each punishment length; ``stick_carrot`` costs several seconds per discount factor).
    growth : float in (-1, 1)
        Demand growth rate per period of the factor table's growth row: 0 for none, negative for a declining
        market. Profits growing at rate g make the effective discount factor ``delta (1 + g)``.
    simulate : bool
        Whether to run the simulations (persistence, the transparency factor, noise sensitivity).
    transparency_scale : float in (0, 100], not 1
        The transparency factor compares simulated persistence at the experiment's monitoring noise
        with every noise parameter multiplied by this scale (default: doubled; below 1: less noise).
        A scale that takes a parameter out of its range is refused before any work.
    sensitivity : dict, optional
        Ranges of the uncertain inputs: ``margin``, ``elasticity``, ``market_elasticity``, ``size`` (calibration
        inputs, with data), ``delta``, ``noise`` (a scale factor of every monitoring noise parameter; 1 is the
        experiment's noise; a scale that takes a parameter out of its range is refused before any work); each a
        list of values or a range ``{"start": a, "stop": b, "num": k}`` (or ``"step"`` instead of ``"num"``).
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    key : tuple of int
        Prefix of the simulations' stream keys: the simulations before and after use ``key + (0,)``
        and ``key + (1,)``, the rescaled noise of the transparency factor ``key + (2, 0|1)``, noise
        sensitivity point ``j`` (from 0) ``key + (3, j, 0|1)``. The default ``(0,)`` is the key of
        cell 0, the only cell of an experiment file without a sweep, so that this function gives the
        numbers of ``supergame run FILE`` and ``supergame assess FILE``; a sweep cell ``c`` passes
        ``(c,)``.
    name : str
        The experiment's name (the result's title).
    currency, period : str, optional
        What money and a period are counted in (``experiment.currency``, ``experiment.period``).
    payoff_sets : dict, optional
        ``[assess.payoff_sets]``: compare the equilibrium payoff sets before and after on action grids (``grid``,
        ``directions``, ``tolerance``; see :func:`sim.antitrust.merger_sets.check_payoff_sets`).
    other_markets : list of dict, optional
        ``[[assess.other_markets]]``: markets where the firms also meet (``market``, ``firms``, ``label``,
        ``growth``), for the multimarket-contact row (see :mod:`sim.antitrust.contact_factor`).
    pair_mergers : bool
        ``assess.pair_mergers``: the grim-trigger threshold of the pre-merger market after every two-firm merger and
        the maverick (:func:`sim.antitrust.screens.pair_thresholds`, :func:`sim.antitrust.screens.maverick`).

    Returns
    -------
    Assessment
    """
    prepared = prepare_assessment(source, merger, monitoring=monitoring, lineup=lineup, run=run, agreement=agreement,
                                  scheme=scheme, length=length, punishments=punishments, deltas=deltas,
                                  partial=partial, growth=growth, simulate=simulate,
                                  transparency_scale=transparency_scale, sensitivity=sensitivity, name=name,
                                  currency=currency, period=period, payoff_sets=payoff_sets,
                                  other_markets=other_markets, pair_mergers=pair_mergers)
    return run_assessment(prepared, progress=progress, key=key)


def _pre_market(source):
    if isinstance(source, MarketData):
        calibration = calibrate(source)
        return source, calibration, calibration.market
    if isinstance(source, Market):
        source.spec("market")
        return None, None, source
    raise InputError("market", f"give a Market or MarketData, got {type(source).__name__}")


def _monitoring(monitoring) -> Monitoring:
    if monitoring is None:
        return Monitoring()
    if isinstance(monitoring, dict):
        return monitoring_from_dict(monitoring)
    if isinstance(monitoring, Monitoring):
        monitoring.validated()
        return monitoring
    raise InputError("monitoring", f"must be a Monitoring or a table, got {monitoring!r}")


def _run_settings(run, n_products: int) -> dict:
    runs = dict(RUN_DEFAULTS)
    runs.update({"periods": 500, "replications": 500})
    if run is not None:
        runs.update(refuse_unknown(run, "run", RUN_DEFAULTS))
    return check_run(n_products=n_products, **runs)


def _games(opts: dict, pre, mres, mon, entries, post_entries) -> dict:
    for mk in (pre, mres.post):
        # an agreement the market does not admit (e.g. 'proportional' with homogeneous Bertrand) is an
        # input error, found before the work starts
        collusive_outcome(mk.spec(), opts["agreement"])
    games = {}
    if opts["simulate"]:
        for label, mk, ent in (("before", pre, entries), ("after", mres.post, post_entries)):
            try:
                games[label] = prepare_game(mk, ent, mon, opts["agreement"])
            except InputError as exc:
                if label == "after" and exc.key.startswith("strategies"):
                    raise InputError(exc.key, f"{exc.message} (in the post-merger line-up)") from None
                raise
    return games


def _noise_settings(opts: dict, sens: dict, mon) -> tuple:
    # every monitoring setting the simulations will use, validated now (a scale that takes a noise
    # parameter out of its range is refused, never clipped)
    if "noise" in sens and not opts["simulate"]:
        raise InputError("assess.sensitivity.noise", "varies the simulations' monitoring noise, but assess.simulate "
                                                     "is false; remove it or set assess.simulate = true")
    if not opts["simulate"]:
        return None, []
    rescaled = (scaled_monitoring(mon, opts["transparency_scale"], "assess.transparency_scale") if has_noise(mon)
                else None)
    return rescaled, [scaled_monitoring(mon, float(k), f"assess.sensitivity.noise[{j + 1}]")
                      for j, k in enumerate(sens.get("noise", []))]


def _settings(opts, runs, eff_delta, mon, entries, post_entries, sens, axes, mres, merger) -> dict:
    return {
        "scheme": opts["scheme"], "length": opts["length"], "punishments": opts["punishments"],
        "deltas": opts["deltas"], "partial": opts["partial"], "growth": opts["growth"],
        "simulate": opts["simulate"], "agreement": opts["agreement"],
        "transparency_scale": opts["transparency_scale"], "run": runs,
        "effective_delta": eff_delta, "monitoring": mon.to_dict(), "lineup": entries,
        "lineup_after": post_entries,
        "sensitivity": {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in sens.items()},
        "sensitivity_axes": axes,
        "merger": {"firms": [mres.names_pre[i] for i in mres.merging], "efficiency": mres.efficiency,
                   "cost": merger.cost},
    }


def prepare_assessment(source, merger, monitoring=None, lineup=None, run=None, agreement: str = "joint",
                       scheme: str = "grim", length: int | None = None, punishments=(1, 2, 3),
                       deltas=(0.5, 0.6, 0.7, 0.8, 0.9), partial=None, growth: float = 0.02,
                       simulate: bool = True, transparency_scale: float = 2.0,
                       sensitivity: dict | None = None, name: str = "assessment", currency: str | None = None,
                       period: str | None = None, payoff_sets: dict | None = None,
                       other_markets: list | None = None, pair_mergers: bool = False) -> PreparedAssessment:
    """Validate the inputs of :func:`assess`, calibrate, build the post-merger market, compile the line-ups and
    build every monitoring setting the simulations will use (the experiment's, the rescaled one of the
    transparency factor, one per noise-sensitivity scale). No threshold or simulation is computed yet.

    Parameters
    ----------
    source, merger, monitoring, lineup, run, agreement, scheme, length, punishments, deltas, partial, growth, \
simulate, transparency_scale, sensitivity, name, currency, period, payoff_sets, other_markets, pair_mergers : object
        As in :func:`assess`.

    Returns
    -------
    PreparedAssessment

    Raises
    ------
    InputError
        Naming the key path of the first setting that is wrong.
    """
    opts = check_options(scheme, length, punishments, deltas, partial, growth, simulate, agreement,
                         transparency_scale)
    data, calibration, pre = _pre_market(source)
    if not isinstance(merger, Merger):
        raise InputError("merger", f"must be a Merger, got {type(merger).__name__}")
    mon = _monitoring(monitoring)
    pre_ms = pre.spec()
    runs = _run_settings(run, pre_ms.n_products)
    sens, axes = check_sensitivity(sensitivity, data)
    mres = merge(pre, merger)
    entries = lineup_entries(lineup, pre_ms.n_firms)
    if lineup is None and mon.validated()["signal"] == "price":
        raise InputError("strategies", "with monitoring.signal = 'price' give a line-up of price-watching "
                                       "strategies (for example trigger_price) as [[strategies]] entries")
    post_entries = [entries[i] for i in range(pre_ms.n_firms) if i not in mres.merging[1:]]
    games = _games(opts, pre, mres, mon, entries, post_entries)
    rescaled, noise_mons = _noise_settings(opts, sens, mon)
    eff_delta = runs["delta"] * (runs["continuation"] if runs["horizon"] == "random" else 1.0)
    settings = _settings(opts, runs, eff_delta, mon, entries, post_entries, sens, axes, mres, merger)
    sets = check_payoff_sets(payoff_sets, mres, opts["agreement"], eff_delta)
    contact = check_other_markets(other_markets, mres, opts["agreement"], mres.efficiency)
    if not isinstance(pair_mergers, bool):
        raise InputError("assess.pair_mergers", f"must be true or false, got {pair_mergers!r}")
    if pair_mergers and pre_ms.n_firms < 3:
        raise InputError("assess.pair_mergers", f"a two-firm merger leaves a monopoly in a market of "
                                                f"{pre_ms.n_firms} firms; the pair table needs three or more")
    if sets is not None:
        settings["payoff_sets"] = {"grid": list(sets.before.grid), "directions_before": sets.before.directions,
                                   "directions_after": sets.after.directions, "tolerance": sets.before.tolerance}
    if contact is not None:
        settings["other_markets"] = [cm.to_dict() for cm in contact.game.markets[1:]]
    return PreparedAssessment(opts, data, calibration, merger, mres, mon, runs, sens, entries, post_entries, games,
                              eff_delta, settings, rescaled, noise_mons, name, currency, period, sets, contact,
                              pair_mergers)


def _simulate(p: PreparedAssessment, sides: dict, key: tuple, threads, bar: _Progress) -> None:
    for j, label in enumerate(("before", "after")):
        sides[label].simulation = simulate_side(p.games[label], p.runs, key=key + (j,), threads=threads)
        bar.step(f"simulate {label}")
    if p.rescaled_monitoring is None:
        bar.step()
        bar.step()
        return
    for j, (label, mk, ent) in enumerate((("before", p.mres.pre, p.entries), ("after", p.mres.post,
                                                                            p.post_entries))):
        g2 = prepare_game(mk, ent, p.rescaled_monitoring, p.opts["agreement"], strict=False)
        sides[label].rescaled = simulate_side(g2, p.runs, key=key + (2, j), threads=threads)
        bar.step(f"simulate {label}, noise x{p.opts['transparency_scale']:g}")


def run_assessment(p: PreparedAssessment, progress=None, key=(0,), threads: int | None = None) -> Assessment:
    """Compute a prepared assessment.

    Parameters
    ----------
    p : PreparedAssessment
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    key : tuple of int
        Prefix of the simulations' stream keys (see :func:`assess`).
    threads : int, optional
        Caps the simulations' threads (the numbers do not depend on it).

    Returns
    -------
    Assessment
    """
    opts, sens, mres = p.opts, p.sens, p.mres
    key = tuple(int(k) for k in key)
    n_sens = sum(len(sens[k]) for k in SENSITIVITY_INPUTS if k in sens)
    n_noise = len(sens.get("noise", [])) if opts["simulate"] else 0
    n_delta = len(sens.get("delta", [])) if "delta" in sens else 0
    total = (2 * (2 + len(opts["deltas"])) + (4 if opts["simulate"] else 0) + 3 + n_sens + n_noise + n_delta
             + (2 if p.payoff_sets is not None else 0) + (1 if p.contact is not None else 0) + int(p.pair_mergers))
    bar = _Progress(total, progress)
    try:
        sides = {label: solve_side(label, mk, names, opts, bar.step)
                 for label, mk, names in (("before", mres.pre, mres.names_pre), ("after", mres.post, mres.names_post))}
        if opts["simulate"]:
            _simulate(p, sides, key, threads, bar)
        before, after = sides["before"], sides["after"]
        concl = conclusion(before, after, opts, p.effective_delta)
        factors = factor_table(mres.pre, before, after, opts, p.effective_delta, p.monitoring, bar.step)
        if p.contact is not None:
            factors.append(contact_row(p.contact))
            bar.step("factors: multimarket contact")
        sets = None
        if p.payoff_sets is not None:
            sets = compare_payoff_sets(p.payoff_sets, mres, opts["agreement"], bar.step).to_dict()
        pairs = None
        if p.pair_mergers:
            pairs = {"pairs": pair_thresholds(mres.pre, mres.names_pre, opts["agreement"]).to_dict(),
                     "maverick": maverick(mres.pre, mres.names_pre, opts["agreement"]).to_dict()}
            bar.step("pair mergers and the maverick")
        sens_out = sensitivity(p, before, after, bar.step, key, threads)
        if sens_out:
            concl["robustness"] = robustness(sens_out, concl)
    finally:
        bar.close()
    said = assumptions(p.calibration, mres, opts, p.runs, p.monitoring, p.entries, p.post_entries)
    parts = {"settings": p.settings, "calibration": None if p.calibration is None else p.calibration.to_dict(),
             "merger": mres.to_dict(), "before": before.to_dict(), "after": after.to_dict(), "conclusion": concl,
             "factors": factors, "sensitivity": sens_out, "assumptions": said}
    if sets is not None:
        parts["payoff_sets"] = sets
    if pairs is not None:
        parts["pair_mergers"] = pairs
    return Assessment.from_parts(parts, name=p.name, currency=p.currency, period=p.period)
