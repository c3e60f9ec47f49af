"""Coordinated effects of a merger: tacit collusion before and after, side by side.

:func:`assess` takes a pre-merger market (given, or calibrated from observed data by
:func:`sim.antitrust.calibration.calibrate`) and a :class:`~sim.antitrust.merger.Merger`, builds the post-merger market
(:func:`sim.antitrust.merger.merge`) and compares the two:

* critical discount factors of each punishment scheme -- grim trigger (Friedman, 1971), T-period
  Nash reversion, the optimal symmetric stick and carrot (Abreu, 1986) -- per firm, with the binding
  firm (:func:`sim.theory.thresholds.critical_discount_factors`);
* partial collusion: the most profitable outcome each scheme sustains at a range of discount factors
  (:func:`sim.theory.thresholds.partial_collusion`);
* simulated persistence of collusion under the experiment's monitoring noise (the engine,
  :func:`sim.simulation.engine.simulate`), with confidence intervals;
* asymmetry measures: firm shares, the Herfindahl-Hirschman index, the ratio of the largest to the
  smallest share, cost and capacity spreads;
* the usual factors of the trade's checklist, each named by the change it considers -- fewer firms,
  more symmetric firms, more transparency (less monitoring noise), more frequent interaction,
  growing demand -- with the direction this model computes set beside the direction in Ivaldi,
  Jullien, Rey, Seabright and Tirole (2003, "The Economics of Tacit Collusion", final report for DG
  Competition, European Commission; see :data:`IVALDI` for which directions were read and which are
  recalled from memory). Frequency and growth are structural: the model's definitions fix their
  direction, so they are reported as such and not compared;
* sensitivity: the comparison repeated over ranges of the uncertain inputs (the calibration's
  margin or elasticities, the potential market of a logit calibration, the discount factor, the
  monitoring noise), locating where the conclusion flips. With the observed shares held fixed, a
  logit or linear-Cournot calibration's margin or elasticity only rescales every markup and profit,
  so the thresholds do not depend on it; the output says so when the curves are flat.

Layers: :func:`prepare_assessment` validates everything (and calibrates, merges and compiles the
line-ups) before any work; :func:`run_assessment` does the work; :func:`assess` is both. The
module's ``EXPERIMENT_KIND`` runs one assessment per cell of ``supergame run`` (flat metrics such
as ``threshold.before``, ``threshold.after``, ``direction``, ``collusive_share.before``; the whole
assessment, :meth:`Assessment.to_dict`, stored under the cell's ``arrays["assessment"]``, from which
its evidence bundle is written by :func:`sim.evidence.assess.kind_report`).

Discount factor. The headline discount factor is ``run.delta``; with a random horizon
(``run.horizon = "random"``) the factor that matters is ``delta * continuation``.

Conventions. A threshold of ``nan`` (``None`` in JSON) means "not sustainable at any discount
factor below one"; in comparisons it ranks above every number. "Easier" means a lower critical
discount factor: the firms need less patience to sustain the agreement.
"""

from __future__ import annotations

import itertools
import math
import sys
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from tqdm import tqdm

from sim.antitrust.calibration import MarketData, calibrate, data_from_dict
from sim.antitrust.merger import Merger, difference, firm_shares, hhi, merge, merger_from_dict
from sim.core.errors import InputError, SolverError
from sim.core.params import Boolean, Integer, Options, Real
from sim.core.tables import refuse_unknown
from sim.core.text import CAUTION
from sim.core.values import parse_values
from sim.models.market import Market, market_from_dict
from sim.models.monitoring import NORMAL_SIGMA_MAX, Monitoring, monitoring_from_dict
from sim.simulation.engine import RUN_DEFAULTS, check_run, prepare_game, run_game
from sim.simulation.results import summarize
from sim.theory.equilibrium import collusive_outcome, stage_game, static_nash
from sim.theory.thresholds import critical_discount_factors, partial_collusion
from strategies.registry import lineup_from_tables

__all__ = ["ASSESS_TABLES", "Assessment", "MarketSide", "PreparedAssessment", "assess", "assessment_from_dict",
           "asymmetry", "prepare_assessment", "run_assessment", "symmetric_counterpart"]

SCHEME_NAMES = {"grim": "grim trigger", "finite": "Nash reversion", "stick_carrot": "stick and carrot"}
AGREEMENTS = ("joint", "symmetric", "proportional")
SENSITIVITY_INPUTS = ("margin", "elasticity", "market_elasticity", "size")
ASSESS_TABLES = ("experiment", "market", "data", "merger", "collusion", "monitoring", "strategies", "run",
                 "assess")
_ASSESS_KEYS = ("scheme", "length", "punishments", "deltas", "partial", "growth", "simulate", "transparency_scale",
                "sensitivity")
_SENS_KEYS = ("margin", "elasticity", "market_elasticity", "size", "delta", "noise")
_TOL = 1e-9

#: The factor table's rows: key -> (name, direction in Ivaldi et al. (2003), their reasoning in our words,
#: how the direction was established). Each factor is named by the change it considers, so that
#: "facilitates" reads as "this change makes collusion easier". The directions of more frequent
#: interaction and more transparency are the titles of sections III.4 and III.5 of the report ("Frequent
#: interaction facilitates collusion", "Market transparency facilitates collusion", read from its table
#: of contents); those of the number of competitors, of symmetry and of demand growth are recalled from
#: the report's sections on them (from memory).
IVALDI = {
    "firms": ("fewer firms", "facilitates",
              "with fewer competitors each firm's share of the collusive profit is larger and its gain from "
              "undercutting smaller, so collusion is easier to sustain", "from memory"),
    "symmetry": ("more symmetric firms", "facilitates",
                 "asymmetries in costs, capacities or market shares hinder collusion: the advantaged firm gains "
                 "more from deviating and less from colluding", "from memory"),
    "transparency": ("more transparent (less noise)", "facilitates",
                     "market transparency facilitates collusion: deviations are detected, and punished, sooner and "
                     "price wars are not set off by mistake", "section title"),
    "frequency": ("more frequent interaction", "facilitates",
                  "frequent interaction (and frequent price adjustment) facilitates collusion: retaliation comes "
                  "sooner", "section title"),
    "growth": ("growing demand", "facilitates",
               "collusion is easier in growing markets, where tomorrow's profits weigh more, and harder in "
               "declining ones", "from memory"),
}
IVALDI_SOURCE = ("Ivaldi, Jullien, Rey, Seabright and Tirole (2003), The Economics of Tacit Collusion, final report "
                 "for DG Competition, European Commission (directions of more frequent interaction and more "
                 "transparency: the titles of its sections III.4 and III.5; the others from memory)")
#: Direction of a factor whose effect follows from the model's definitions rather than a computation.
STRUCTURAL = "structural (by construction)"
#: How to read the factor table (the summary, the LaTeX caption and the terminal output carry it; every
#: row's ``reading`` says the same for that row, also in the CSV).
FACTOR_LEGEND = ("Each factor is named by the change it considers. 'facilitates': in the model that change makes "
                 "collusion easier (a lower critical discount factor, or more persistent simulated collusion); "
                 "'hinders': it makes collusion harder; 'no effect': no difference (for simulations, none beyond "
                 "1.96 standard errors); 'mixed': the markets before and after the merger disagree; 'not "
                 "computed': the model cannot vary the factor here (see the note). 'structural (by construction)': "
                 "the direction follows from the model's definitions (the discount factor per interaction, "
                 "profits that grow with demand) and is not computed, so it is not compared with the literature "
                 "and 'agree' is left empty; the row reports how far each market is from its threshold.")


# --------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------


@dataclass
class MarketSide:
    """One side of the comparison (before or after the merger).

    Attributes
    ----------
    label : {"before", "after"}
    market : Market
    names : list of str
        Firm names.
    report : ThresholdReport
        Critical discount factors of every scheme (per firm, market, binding firm).
    partial : list of PartialCollusion
    asymmetry : dict
        See :func:`asymmetry`.
    simulation : SimulationResult or None
    rescaled : SimulationResult or None
        The same simulation with every monitoring noise parameter multiplied by
        ``assess.transparency_scale`` (for the transparency factor).
    """

    label: str
    market: Any
    names: list
    report: Any
    partial: list
    asymmetry: dict
    simulation: Any = None
    rescaled: Any = None

    def scheme(self, scheme: str, T: int | None = None):
        """The :class:`~sim.theory.thresholds.SchemeThreshold` of ``scheme`` (``finite`` with its ``T``)."""
        if scheme == "grim":
            return self.report.grim
        if scheme == "stick_carrot":
            return self.report.stick_carrot
        for f in self.report.finite:
            if f.T == T:
                return f
        raise KeyError(f"finite reversion with T={T} was not computed")

    def to_dict(self) -> dict:
        th = self.report
        out = {
            "market": self.market.to_dict(), "names": self.names,
            "stage": th.stage.to_dict(),
            "thresholds": {"grim": _scheme_dict(th.grim, self.names),
                           "finite": [_scheme_dict(f, self.names) for f in th.finite],
                           "stick_carrot": _scheme_dict(th.stick_carrot, self.names)},
            "partial_collusion": [p.to_dict() for p in self.partial],
            "asymmetry": self.asymmetry,
        }
        if self.simulation is not None:
            out["simulation"] = _sim_summary(self.simulation) | {
                "collusive_by_period": np.asarray(self.simulation.collusive_by_period, dtype=float).tolist()}
        if self.rescaled is not None:
            out["simulation_scaled_noise"] = _sim_summary(self.rescaled)
        return out


def _scheme_dict(s, names) -> dict:
    d = s.to_dict()
    d["binding_name"] = names[s.binding] if s.binding < len(names) else None
    return d


_SIM_METRICS = ("collusive_share", "war_share", "first_breakdown", "broken_down", "spell_length", "profit_gain",
                "price", "consumer_surplus")


def _sim_summary(res) -> dict:
    return {k: res.metrics[k].to_dict() for k in _SIM_METRICS} | {"settings": res.settings}


@dataclass
class Assessment:
    """The coordinated-effects comparison.

    Attributes
    ----------
    settings : dict
        Validated settings (scheme, punishments, deltas, run, monitoring, line-up, sensitivity).
    calibration : Calibration or None
        How the pre-merger market was calibrated (None when the market was given).
    merger : MergerResult
    before, after : MarketSide
    conclusion : dict
        The headline comparison at the experiment's discount factor (see :func:`assess`).
    factors : list of dict
        The factor table (one row per factor).
    sensitivity : dict
        The comparison over ranges of the uncertain inputs.
    assumptions : list of str
    """

    settings: dict
    calibration: Any
    merger: Any
    before: MarketSide
    after: MarketSide
    conclusion: dict
    factors: list
    sensitivity: dict
    assumptions: list = field(default_factory=list)

    def to_dict(self) -> dict:

        return {
            "settings": self.settings,
            "calibration": None if self.calibration is None else self.calibration.to_dict(),
            "merger": self.merger.to_dict(),
            "before": self.before.to_dict(),
            "after": self.after.to_dict(),
            "conclusion": self.conclusion,
            "factors": self.factors,
            "sensitivity": self.sensitivity,
            "assumptions": self.assumptions,
            "caution": CAUTION,
        }


# --------------------------------------------------------------------------------------------------
# Asymmetry and symmetric counterparts
# --------------------------------------------------------------------------------------------------


def _ratio(x: np.ndarray) -> float:
    x = np.asarray(x, dtype=float)
    if x.size == 0 or not np.all(np.isfinite(x)):
        return math.nan
    lo = float(x.min())
    return math.inf if lo <= 0 else float(x.max()) / lo


def asymmetry(market, outcome=None) -> dict:
    """Measures of asymmetry between the firms of a market.

    Parameters
    ----------
    market : Market or MarketSpec
    outcome : Outcome, optional
        Where shares are measured (default: the static Nash equilibrium).

    Returns
    -------
    dict
        ``shares`` (firm shares of total quantity), ``hhi`` (0-10000), ``share_ratio`` (largest over
        smallest share; ``inf`` when a firm sells nothing), ``costs`` (each firm's quantity-weighted
        mean marginal cost), ``cost_ratio`` (highest over lowest), ``cost_cv`` (coefficient of
        variation), ``capacities``, ``capacity_shares`` and ``capacity_ratio`` (``None`` without
        capacities), ``products`` (number of products per firm).
    """

    ms = market if not hasattr(market, "spec") else market.spec()
    out = outcome if outcome is not None else static_nash(ms)
    q = np.asarray(out.quantities, dtype=float)
    shares = firm_shares(ms, out)
    qf = ms.firm_sum(q)
    with np.errstate(invalid="ignore", divide="ignore"):
        wc = ms.firm_sum(q * ms.cost) / qf
    plain = np.array([ms.cost[ms.products_of(i)].mean() for i in range(ms.n_firms)])
    costs = np.where(qf > 0, wc, plain)
    cap = np.asarray(ms.capacity, dtype=float)
    has_cap = bool(np.all(np.isfinite(cap)))
    capf = ms.firm_sum(cap) if has_cap else None
    return {
        "shares": shares.tolist(), "hhi": hhi(shares), "share_ratio": _ratio(shares),
        "costs": costs.tolist(), "cost_ratio": _ratio(costs),
        "cost_cv": float(np.std(costs) / np.mean(costs)) if np.mean(costs) > 0 else math.nan,
        "capacities": None if capf is None else capf.tolist(),
        "capacity_shares": None if capf is None else (capf / capf.sum()).tolist(),
        "capacity_ratio": None if capf is None else _ratio(capf),
        "products": np.bincount(ms.owner, minlength=ms.n_firms).tolist(),
    }


def symmetric_counterpart(market, n_products: int | None = None, keep_owner: bool = False, *,
                          n_firms: int | None = None, products_per_firm: int = 1):
    """The market with its products made alike: mean marginal cost, mean quality or intercept, equal
    capacities and equal tie-sharing weights; the demand's other parameters unchanged.

    Parameters
    ----------
    market : Market
    n_products : int, optional
        Number of products (single-product firms) of the counterpart; default: as many as the market.
    keep_owner : bool
        Keep the market's owner map (only with the same number of products): removes cost and demand
        asymmetries but not ownership asymmetry.
    n_firms : int, optional
        Instead of ``n_products``: the number of firms of the counterpart, each owning
        ``products_per_firm`` products (``n_firms * products_per_firm`` products in all).
    products_per_firm : int
        Products of each firm with ``n_firms`` (above one only for differentiated products).
    """

    ms = market.spec()
    owner = None
    if n_firms is not None:
        if n_products is not None or keep_owner:
            raise ValueError("give n_firms or n_products / keep_owner, not both")
        n = int(n_firms) * int(products_per_firm)
        if products_per_firm > 1:
            owner = [i + 1 for i in range(int(n_firms)) for _ in range(int(products_per_firm))]
    else:
        n = ms.n_products if n_products is None else int(n_products)
        if keep_owner and market.owner is not None and n == ms.n_products:
            owner = list(market.owner)
    d = market.demand
    kind = ms.demand.kind
    c = float(np.mean(ms.cost))
    if kind == "linear":
        new_d = d.clone(split=None)
    elif kind == "isoelastic":
        new_d = d.clone()
    elif kind == "differentiated":
        new_d = d.clone(intercept=float(np.mean(ms.demand.vector)))
    else:
        new_d = d.clone(quality=float(np.mean(ms.demand.vector)))
    cap = np.asarray(ms.capacity, dtype=float)
    capacity = float(cap.mean()) if market.capacity is not None and np.all(np.isfinite(cap)) else None
    return Market(new_d, cost=c, model=ms.model, n_firms=None if owner is not None else n, capacity=capacity,
                  tick=ms.tick, owner=owner)


# --------------------------------------------------------------------------------------------------
# Validation of options
# --------------------------------------------------------------------------------------------------


def _list_of(key: str, value, element, min_len: int = 0) -> list:
    if isinstance(value, tuple | np.ndarray):
        value = list(value)
    if not isinstance(value, list):
        raise InputError(key, f"must be a list, got {value!r}")
    if len(value) < min_len:
        raise InputError(key, f"must have at least {min_len} values, got {len(value)}")
    return [element.check(f"{key}[{k + 1}]", v) for k, v in enumerate(value)]


def _range(key: str, value, element) -> tuple[np.ndarray, list | None, bool]:
    """Values of a sensitivity range in the range syntax of experiment files, the one of ``[sweep]``
    (:func:`sim.core.values.parse_values`): a list of values, ``{start, stop, num}`` (evenly spaced, both
    ends included), ``{start, stop, step}``, ``{start, stop, num, log = true}`` or ``{values = [...],
    labels = [...]}``. Between 2 and 1000 values, each checked by ``element`` (key ``key[k]``,
    counted from 1); returned in increasing order with their labels (None unless given) and whether
    the range is logarithmic."""

    vals, labels, log = parse_values(value, key, max_values=1000)
    if len(vals) < 2:
        raise InputError(key, f"must have at least 2 values (a sensitivity range), got {len(vals)}")
    checked = [element.check(f"{key}[{k + 1}]", v) for k, v in enumerate(vals)]
    order = np.argsort(checked, kind="stable")
    given = isinstance(value, dict) and "labels" in value
    return (np.asarray(checked, dtype=float)[order], [labels[i] for i in order] if given else None, bool(log))


def _check_options(scheme, length, punishments, deltas, partial, growth, simulate_flag, agreement,
                   transparency_scale=2.0, prefix: str = "assess") -> dict:
    scheme = Options(*SCHEME_NAMES).check(f"{prefix}.scheme", scheme)
    Ts = _list_of(f"{prefix}.punishments", punishments, Integer(1, 10_000))
    if scheme == "finite":
        if length is None:
            raise InputError(f"{prefix}.length", "missing: the punishment length T of scheme = 'finite'")
        length = Integer(1, 10_000).check(f"{prefix}.length", length)
        if length not in Ts:
            Ts = [*Ts, length]
    elif length is not None:
        raise InputError(f"{prefix}.length", f"only used with scheme = 'finite', not {scheme!r}")
    Ts = sorted(set(Ts))
    ds = _list_of(f"{prefix}.deltas", deltas, Real(0, 1, closed="neither"))
    if partial is None:
        partial = ["grim", "finite"] if Ts else ["grim"]
    parts = _list_of(f"{prefix}.partial", partial, Options(*SCHEME_NAMES))
    if "finite" in parts and not Ts:
        raise InputError(f"{prefix}.partial", "'finite' needs at least one punishment length in assess.punishments")
    growth = Real(0, 1, closed="neither").check(f"{prefix}.growth", growth)
    simulate_flag = Boolean().check(f"{prefix}.simulate", simulate_flag)
    tscale = Real(0, 100, closed="right").check(f"{prefix}.transparency_scale", transparency_scale)
    if tscale == 1.0:
        raise InputError(f"{prefix}.transparency_scale", "must differ from 1 (the experiment's own noise): above 1 "
                                                         "more noise, below 1 less, got 1")
    if agreement not in AGREEMENTS:
        raise InputError("collusion.agreement", f"must be one of {', '.join(map(repr, AGREEMENTS))} (agreed actions "
                                                f"do not carry over to the post-merger market), got {agreement!r}")
    return {"scheme": scheme, "length": length, "punishments": Ts, "deltas": sorted(set(ds)),
            "partial": list(dict.fromkeys(parts)), "growth": growth, "simulate": simulate_flag,
            "agreement": agreement, "transparency_scale": tscale}


def _check_sensitivity(sens, data, prefix: str = "assess.sensitivity") -> tuple[dict, dict]:
    """Validated sensitivity ranges: name -> values (increasing), and name -> ``{"labels", "log"}``."""
    if sens is None:
        return {}, {}
    refuse_unknown(sens, prefix, _SENS_KEYS)
    out, axes = {}, {}
    for name in SENSITIVITY_INPUTS:
        if name not in sens:
            continue
        if data is None:
            raise InputError(f"{prefix}.{name}", "varies a calibration input, so the market must come from a [data] "
                                                 "table of observations (not a [market] table)")
        element = {"margin": Real(0, 1, closed="neither"), "size": Real(0, None, closed="neither")}.get(
            name, Real(None, 0, closed="neither"))
        vals, labels, log = _range(f"{prefix}.{name}", sens[name], element)
        if name == "size":
            if data.demand != "logit":
                raise InputError(f"{prefix}.size", "the potential market size is an input of logit demand only")
            sold = float(data.validated("data")["quantities"].sum())
            if vals[0] <= sold:
                raise InputError(f"{prefix}.size", f"every potential market size must exceed the quantities sold "
                                                   f"({sold:g}), got {vals[0]:g}")
        # every value must give valid data (a homogeneous good has no per-product own elasticity, ...)
        try:
            data.with_input(name, float(vals[0])).validated("data")
        except InputError as exc:
            raise InputError(f"{prefix}.{name}", exc.message) from None
        out[name] = vals
        axes[name] = {"labels": labels, "log": log}
    for name, element in (("delta", Real(0, 1, closed="neither")), ("noise", Real(0, 100))):
        if name in sens:
            out[name], labels, log = _range(f"{prefix}.{name}", sens[name], element)
            axes[name] = {"labels": labels, "log": log}
    return out, axes


# --------------------------------------------------------------------------------------------------
# Progress
# --------------------------------------------------------------------------------------------------


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


# --------------------------------------------------------------------------------------------------
# The assessment
# --------------------------------------------------------------------------------------------------


def _lineup_entries(lineup, n_firms: int) -> list:
    """Expand ``[[strategies]]`` entries into one entry per firm (validated)."""

    if lineup is None:
        return [{"strategy": "grim_trigger"} for _ in range(n_firms)]
    if not isinstance(lineup, list) or not lineup or not all(isinstance(e, dict) for e in lineup):
        raise InputError("strategies", "must be a non-empty list of [[strategies]] entries")
    lineup_from_tables(lineup, n_firms, "strategies")
    out = []
    for e in lineup:
        seats = int(e.get("seats", 1))
        out.extend({k: v for k, v in e.items() if k != "seats"} for _ in range(seats))
    return out


_NOISE_PARAMS = ("sigma", "perception_error", "implementation_error")


def _noise_bounds(p: dict) -> dict:
    """Largest value of each noise parameter (the :class:`~sim.models.monitoring.Monitoring` constraints; a
    normal shock's sigma is capped at 1/3)."""

    out = {k: Monitoring._constraints[k].high for k in _NOISE_PARAMS}
    if p["noise"] == "normal":
        out["sigma"] = min(out["sigma"], NORMAL_SIGMA_MAX)
    return out


def _scaled(mon, k: float, key: str):
    """The monitoring with every noise parameter multiplied by ``k``, validated.

    Nothing is clipped: a scale that takes a parameter above its range raises :class:`InputError`
    under ``key`` (the setting that asked for the scale), naming the parameter, its range, the scaled
    value and the largest scale the experiment's noise allows."""

    p = mon.validated()
    bounds = _noise_bounds(p)
    for name in _NOISE_PARAMS:
        v = p[name] * k
        if v > bounds[name]:
            largest = min(bounds[n] / p[n] for n in _NOISE_PARAMS if p[n] > 0)
            shock = f" with noise = '{p['noise']}'" if name == "sigma" else ""
            raise InputError(key, f"scale {k:g} takes monitoring.{name} from {p[name]:g} to {v:g}, outside its "
                                  f"range [0, {bounds[name]:.4g}]{shock}; with this monitoring the scale must be at "
                                  f"most {largest:.4g}")
    out = Monitoring(signal=p["signal"], noise=p["noise"], **{n: p[n] * k for n in _NOISE_PARAMS})
    out.validated(key)
    return out


def _has_noise(mon) -> bool:
    p = mon.validated()
    return p["sigma"] > 0 or p["perception_error"] > 0 or p["implementation_error"] > 0


def _rank(x: float) -> float:
    """Thresholds for comparison: not sustainable ranks above every number."""
    return math.inf if x is None or not math.isfinite(x) else float(x)


def _compare(before: float, after: float) -> str:
    a, b = _rank(before), _rank(after)
    if a == b or (math.isfinite(a) and math.isfinite(b) and abs(a - b) <= _TOL):
        return "unchanged"
    return "easier" if b < a else "harder"


def _sustains(th: float, delta: float) -> bool:
    return bool(math.isfinite(_rank(th)) and delta >= th - 1e-15)


def _category(pre: bool, post: bool) -> str:
    return {(True, True): "both", (False, False): "neither", (False, True): "after only",
            (True, False): "before only"}[(pre, post)]


CATEGORY_TEXT = {
    "both": "sustainable before and after the merger",
    "neither": "sustainable neither before nor after the merger",
    "after only": "sustainable only after the merger",
    "before only": "sustainable only before the merger",
}


def assess(source, merger, monitoring=None, lineup=None, run=None, agreement: str = "joint", scheme: str = "grim",
           length: int | None = None, punishments=(1, 2, 3), deltas=(0.5, 0.6, 0.7, 0.8, 0.9),
           partial=None, growth: float = 0.02, simulate: bool = True, transparency_scale: float = 2.0,
           sensitivity: dict | None = None, progress=None, key=(0,)) -> Assessment:
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
    growth : float in (0, 1)
        Demand growth (and decline) rate per period in the factor table.
    simulate : bool
        Whether to run the simulations (persistence, the transparency factor, noise sensitivity).
    transparency_scale : float in (0, 100], not 1
        The transparency factor compares simulated persistence at the experiment's monitoring noise
        with every noise parameter multiplied by this scale (default: doubled; below 1: less noise).
        A scale that takes a parameter out of its range is refused before any work.
    sensitivity : dict, optional
        Ranges of the uncertain inputs: ``margin``, ``elasticity``, ``market_elasticity`` (calibration
        inputs, with data), ``delta``, ``noise`` (a scale factor of every monitoring noise
        parameter; 1 is the experiment's noise; a scale that takes a parameter out of its range is
        refused before any work); each a list of values or a range
        ``{"start": a, "stop": b, "num": k}`` (or ``"step"`` instead of ``"num"``).
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    key : tuple of int
        Prefix of the simulations' stream keys: the simulations before and after use ``key + (0,)``
        and ``key + (1,)``, the rescaled noise of the transparency factor ``key + (2, 0|1)``, noise
        sensitivity point ``j`` (from 0) ``key + (3, j, 0|1)``. The default ``(0,)`` is the key of
        cell 0, the only cell of an experiment file without a sweep, so that this function gives the
        numbers of ``supergame run FILE`` and ``supergame assess FILE``; a sweep cell ``c`` passes
        ``(c,)``.

    Returns
    -------
    Assessment
    """
    prepared = prepare_assessment(source, merger, monitoring=monitoring, lineup=lineup, run=run, agreement=agreement,
                                  scheme=scheme, length=length, punishments=punishments, deltas=deltas,
                                  partial=partial, growth=growth, simulate=simulate,
                                  transparency_scale=transparency_scale, sensitivity=sensitivity)
    return run_assessment(prepared, progress=progress, key=key)


@dataclass
class PreparedAssessment:
    """Everything :func:`assess` validated before the work starts (see :func:`prepare_assessment`)."""

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


def prepare_assessment(source, merger, monitoring=None, lineup=None, run=None, agreement: str = "joint",
                       scheme: str = "grim", length: int | None = None, punishments=(1, 2, 3),
                       deltas=(0.5, 0.6, 0.7, 0.8, 0.9), partial=None, growth: float = 0.02,
                       simulate: bool = True, transparency_scale: float = 2.0,
                       sensitivity: dict | None = None) -> PreparedAssessment:
    """Validate the inputs of :func:`assess` (same parameters), calibrate, build the post-merger market,
    compile the line-ups and build every monitoring setting the simulations will use (the
    experiment's, the rescaled one of the transparency factor, one per noise-sensitivity scale);
    raises :class:`InputError` naming the field. No threshold or simulation is computed yet."""

    opts = _check_options(scheme, length, punishments, deltas, partial, growth, simulate, agreement,
                          transparency_scale)
    data = None
    calibration = None
    if isinstance(source, MarketData):
        data = source
        calibration = calibrate(data)
        pre = calibration.market
    elif isinstance(source, Market):
        source.spec("market")
        pre = source
    else:
        raise InputError("market", f"give a Market or MarketData, got {type(source).__name__}")
    if not isinstance(merger, Merger):
        raise InputError("merger", f"must be a Merger, got {type(merger).__name__}")
    if monitoring is None:
        mon = Monitoring()
    elif isinstance(monitoring, dict):
        mon = monitoring_from_dict(monitoring)
    elif isinstance(monitoring, Monitoring):
        mon = monitoring
        mon.validated()
    else:
        raise InputError("monitoring", f"must be a Monitoring or a table, got {monitoring!r}")
    runs = dict(RUN_DEFAULTS)
    runs.update({"periods": 500, "replications": 500})
    if run is not None:
        runs.update(refuse_unknown(run, "run", RUN_DEFAULTS))
    pre_ms = pre.spec()
    runs = check_run(n_products=pre_ms.n_products, **runs)
    sens, axes = _check_sensitivity(sensitivity, data)
    mres = merge(pre, merger)
    entries = _lineup_entries(lineup, pre_ms.n_firms)
    if lineup is None and mon.validated()["signal"] == "price":
        raise InputError("strategies", "with monitoring.signal = 'price' give a line-up of price-watching "
                                       "strategies (for example trigger_price) as [[strategies]] entries")
    post_entries = [entries[i] for i in range(pre_ms.n_firms) if i not in mres.merging[1:]]

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
    # every monitoring setting the simulations will use, validated now (a scale that takes a noise
    # parameter out of its range is refused, never clipped)
    rescaled = None
    noise_mons = []
    if "noise" in sens and not opts["simulate"]:
        raise InputError("assess.sensitivity.noise", "varies the simulations' monitoring noise, but assess.simulate "
                                                     "is false; remove it or set assess.simulate = true")
    if opts["simulate"]:
        if _has_noise(mon):
            rescaled = _scaled(mon, opts["transparency_scale"], "assess.transparency_scale")
        noise_mons = [_scaled(mon, float(k), f"assess.sensitivity.noise[{j + 1}]")
                      for j, k in enumerate(sens.get("noise", []))]
    eff_delta = runs["delta"] * (runs["continuation"] if runs["horizon"] == "random" else 1.0)
    settings = {
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

    return PreparedAssessment(opts, data, calibration, merger, mres, mon, runs, sens, entries, post_entries, games,
                              eff_delta, settings, rescaled, noise_mons)


def run_assessment(p: PreparedAssessment, progress=None, key=(0,), threads: int | None = None) -> Assessment:
    """Compute a prepared assessment (see :func:`assess`, also for ``key``); ``threads`` caps the
    simulations' threads (results do not depend on it)."""

    opts, data, calibration, merger, mres = p.opts, p.data, p.calibration, p.merger, p.mres
    mon, runs, sens, entries, post_entries, games = p.monitoring, p.runs, p.sens, p.entries, p.post_entries, p.games
    eff_delta, settings = p.effective_delta, p.settings
    pre = mres.pre
    key = tuple(int(k) for k in key)
    n_sens = sum(len(sens[k]) for k in SENSITIVITY_INPUTS if k in sens)
    n_noise = len(sens.get("noise", [])) if opts["simulate"] else 0
    n_delta = len(sens.get("delta", [])) if "delta" in sens else 0
    total = 2 * (2 + len(opts["deltas"])) + (4 if opts["simulate"] else 0) + 3 + n_sens + n_noise + n_delta
    bar = _Progress(total, progress)
    try:
        sides = {}
        for label, mk, names in (("before", pre, mres.names_pre), ("after", mres.post, mres.names_post)):
            sides[label] = _side(label, mk, names, opts, bar)
        if opts["simulate"]:
            for j, label in enumerate(("before", "after")):
                sides[label].simulation = _run(games[label], runs, key=key + (j,), threads=threads)
                bar.step(f"simulate {label}")
            if p.rescaled_monitoring is not None:
                for j, (label, mk, ent) in enumerate((("before", pre, entries), ("after", mres.post, post_entries))):
                    g2 = prepare_game(mk, ent, p.rescaled_monitoring, opts["agreement"], strict=False)
                    sides[label].rescaled = _run(g2, runs, key=key + (2, j), threads=threads)
                    bar.step(f"simulate {label}, noise x{opts['transparency_scale']:g}")
            else:
                bar.step()
                bar.step()
        before, after = sides["before"], sides["after"]
        conclusion = _conclusion(before, after, opts, eff_delta, mres)
        factors = _factors(pre, mres, before, after, opts, eff_delta, mon, bar)
        sensitivity_out = _sensitivity(data, merger, sens, opts, runs, p.noise_monitoring, entries, post_entries,
                                       before, after, eff_delta, bar, key, threads)
        for name, s in sensitivity_out.items():
            s.update(settings["sensitivity_axes"][name])
        if sensitivity_out:
            conclusion["robustness"] = _robustness(sensitivity_out, conclusion)
    finally:
        bar.close()
    assumptions = _assumptions(calibration, mres, opts, runs, mon, entries, post_entries)
    return Assessment(settings, calibration, mres, before, after, conclusion, factors, sensitivity_out, assumptions)


def _side(label: str, market, names: list, opts: dict, bar: _Progress) -> MarketSide:

    st = stage_game(market, opts["agreement"])
    bar.step(f"stage game {label}")
    rep = critical_discount_factors(market, punishments=opts["punishments"], deltas=(), stage=st)
    bar.step(f"thresholds {label}")
    parts = []
    for d in opts["deltas"]:
        for sch in opts["partial"]:
            if sch == "finite":
                parts.extend(partial_collusion(market, d, "finite", T=T, stage=st) for T in opts["punishments"])
            else:
                parts.append(partial_collusion(market, d, sch, stage=st))
        bar.step(f"partial collusion {label}, delta {d:g}")
    return MarketSide(label, market, list(names), rep, parts, asymmetry(market, st.nash))


def _run(game, runs: dict, key, threads: int | None = None) -> Any:

    raw = run_game(game, runs["periods"], runs["replications"], runs["delta"], runs["seed"], key, runs["horizon"],
                   runs["continuation"], runs["paths"], threads, False)
    return summarize(raw, game, runs, confidence=0.95, baseline=False)


def headline_scheme(side: MarketSide, opts: dict):
    """The threshold of the assessment's headline scheme on one side of the merger."""
    return side.scheme(opts["scheme"], opts["length"])


def _scheme_label(opts: dict) -> str:
    if opts["scheme"] == "finite":
        return f"Nash reversion for {opts['length']} periods"
    return SCHEME_NAMES[opts["scheme"]]


def finite_or_none(x):
    """``x`` as a float, None when it is None or not finite."""
    return None if x is None or not math.isfinite(x) else float(x)


def _conclusion(before: MarketSide, after: MarketSide, opts: dict, delta: float, mres) -> dict:

    hb, ha = headline_scheme(before, opts), headline_scheme(after, opts)
    direction = _compare(hb.market, ha.market)
    sb, sa = _sustains(hb.market, delta), _sustains(ha.market, delta)
    cat = _category(sb, sa)
    out = {
        "scheme": _scheme_label(opts), "threshold_before": finite_or_none(hb.market),
        "threshold_after": finite_or_none(ha.market),
        # within the comparison's tolerance the thresholds are the same, and the change is reported as 0
        "change": ((0.0 if direction == "unchanged" else finite_or_none(difference(ha.market, hb.market)))
                   if hb.sustainable and ha.sustainable else None),
        "direction": direction, "binding_before": before.names[hb.binding], "binding_after": after.names[ha.binding],
        "delta": delta, "sustainable_before": sb, "sustainable_after": sa, "category": cat,
        "schemes": [],
    }
    rows = [("grim", None)] + [("finite", f.T) for f in before.report.finite] + [("stick_carrot", None)]
    for sch, T in rows:
        b, a = before.scheme(sch, T), after.scheme(sch, T)
        out["schemes"].append({
            "scheme": SCHEME_NAMES[sch] + (f", T={T}" if T else ""), "before": finite_or_none(b.market),
            "after": finite_or_none(a.market), "binding_before": before.names[b.binding],
            "binding_after": after.names[a.binding], "direction": _compare(b.market, a.market),
            "sustainable_before": _sustains(b.market, delta), "sustainable_after": _sustains(a.market, delta)})
    if before.simulation is not None and after.simulation is not None:
        eb, ea = before.simulation.metrics["collusive_share"], after.simulation.metrics["collusive_share"]
        diff = difference(ea.value, eb.value)
        se = math.sqrt(eb.se ** 2 + ea.se ** 2) if math.isfinite(eb.se) and math.isfinite(ea.se) else math.nan
        z = 1.959963984540054
        sig = bool(math.isfinite(se) and abs(diff) > z * se) if se > 0 else bool(diff != 0)
        out["persistence"] = {
            "collusive_share_before": eb.value, "collusive_share_after": ea.value, "difference": diff,
            "difference_se": se, "difference_low": diff - z * se if math.isfinite(se) else None,
            "difference_high": diff + z * se if math.isfinite(se) else None,
            "significant": sig,
            "direction": ("unchanged" if not sig else ("more persistent" if diff > 0 else "less persistent")),
        }
    verb = {"easier": "lowers", "harder": "raises", "unchanged": "does not change"}[direction]
    txt = (f"Under the stated assumptions the merger {verb} the critical discount factor of {out['scheme']} "
           f"(binding firm before: {out['binding_before']}; after: {out['binding_after']}): "
           f"{_fmt(hb.market)} before, {_fmt(ha.market)} after. At the discount factor {delta:.4g} collusion is "
           f"{CATEGORY_TEXT[cat]}.")
    if "persistence" in out:
        p = out["persistence"]
        txt += (f" In the simulations the share of collusive periods is {p['collusive_share_before']:.4f} before and "
                f"{p['collusive_share_after']:.4f} after (difference {p['difference']:+.4f}"
                + (f", 95% CI [{p['difference_low']:+.4f}, {p['difference_high']:+.4f}]" if p["difference_low"]
                   is not None else "") + ").")
    warnings = []
    for side in (before, after):
        st = side.report.stage
        gain = st.collusive.firm_profits - st.nash.firm_profits
        scale = max(1.0, float(np.abs(st.nash.firm_profits).max()))
        short = [side.names[i] for i in np.flatnonzero(gain <= 1e-12 * scale)]
        if short:
            its, it = ("its", "it") if len(short) == 1 else ("their", "them")
            warnings.append(f"{side.label} the merger the agreement ({opts['agreement']}) gives "
                            f"{' and '.join(short)} no more than {its} static Nash profit, so no punishment can hold "
                            f"{it} to the agreement" + (": an agreement that shares the gains, such as "
                                                        "'proportional', may be more relevant"
                                                        if opts["agreement"] == "joint" else ""))
    out["warnings"] = warnings
    if warnings:
        txt += " Note: " + "; ".join(warnings) + "."
    out["statement"] = txt
    return out


def _fmt(x) -> str:
    return "not sustainable below one" if x is None or not math.isfinite(x) else f"{x:.4f}"


# --------------------------------------------------------------------------------------------------
# Factor table
# --------------------------------------------------------------------------------------------------


def _direction_from(base: float, varied: float, lower_is_easier: bool = True) -> str:
    """'facilitates' when the varied setting makes collusion easier than the base."""
    c = _compare(base, varied) if lower_is_easier else _compare(-base, -varied)
    return {"easier": "facilitates", "harder": "hinders", "unchanged": "no effect"}[c]


def _combine(dirs: list) -> str:
    dirs = [d for d in dirs if d not in (None, "not computed")]
    if not dirs:
        return "not computed"
    return dirs[0] if all(d == dirs[0] for d in dirs) else "mixed"


def _scheme_threshold(market, opts) -> float:

    rep = critical_discount_factors(market, punishments=opts["punishments"], deltas=(), agreement=opts["agreement"])
    if opts["scheme"] == "grim":
        return rep.grim.market
    if opts["scheme"] == "stick_carrot":
        return rep.stick_carrot.market
    return next(f for f in rep.finite if f.T == opts["length"]).market


#: Subject of each factor's reading, and whether it takes a plural verb.
_SUBJECTS = {"firms": ("fewer firms", True), "symmetry": ("more symmetric firms", True),
             "transparency": ("less monitoring noise", False), "frequency": ("more frequent interaction", False),
             "growth": ("growing demand", False)}


def _reading(key: str, direction: str, iv_dir: str) -> str:
    """One row of the factor table in words (what its direction cells mean)."""
    subj, plural = _SUBJECTS[key]
    make, have = ("make", "have") if plural else ("makes", "has")
    model = {
        "facilitates": f"in the model {subj} {make} collusion easier",
        "hinders": f"in the model {subj} {make} collusion harder",
        "no effect": f"in the model {subj} {have} no effect on collusion",
        "mixed": f"in the model {subj} {make} collusion easier in one market and not in the other",
        "not computed": "the model does not vary this factor here (see the note)",
        STRUCTURAL: f"structural: by construction of the model {subj} can only make collusion easier (or leave it "
                    "unchanged), so this is not a computed direction and is not compared with the literature",
    }[direction]
    lit = {"facilitates": "easier", "hinders": "harder"}[iv_dir]
    return f"{model}; Ivaldi et al. (2003): {subj} {make} collusion {lit}"


def _factors(pre, mres, before: MarketSide, after: MarketSide, opts: dict, delta: float, mon, bar) -> list:
    rows = []
    measure = f"critical discount factor ({_scheme_label(opts)})"
    pre_ms = pre.spec()

    def row(key, varied, measure_, vals, direction, note=""):
        name, iv_dir, iv_text, basis = IVALDI[key]
        structural = direction == STRUCTURAL
        agrees = None if structural or direction in ("not computed", "mixed") else direction == iv_dir
        rows.append({"key": key, "factor": name, "varied": varied, "measure": measure_, "values": vals,
                     "model_direction": direction, "structural": structural, "ivaldi_direction": iv_dir,
                     "ivaldi": iv_text, "ivaldi_basis": basis, "agrees": agrees,
                     "reading": _reading(key, direction, iv_dir), "note": note})

    # fewer firms: symmetric counterparts of the pre-merger market with F and F - 1 firms (firms, not
    # products: a firm owning several products keeps as many in the counterparts when every firm owns
    # the same number)
    F = pre_ms.n_firms
    counts = np.bincount(pre_ms.owner, minlength=F)
    k = int(counts[0]) if np.all(counts == counts[0]) else 1
    per = "single-product firms" if k == 1 else f"firms of {k} products each"
    notes = []
    if pre_ms.multi_product and k == 1:
        notes.append("the pre-merger firms own different numbers of products; the counterparts give each firm one")
    if F <= 2:
        notes.append("a duopoly has no symmetric counterpart with fewer firms")
    try:
        t_n = _scheme_threshold(symmetric_counterpart(pre, n_firms=F, products_per_firm=k), opts)
        t_m = (_scheme_threshold(symmetric_counterpart(pre, n_firms=F - 1, products_per_firm=k), opts) if F > 2
               else math.nan)
        row("firms", f"symmetric counterpart of the pre-merger market: {F} vs {F - 1} {per}", measure,
            {"base": finite_or_none(t_n), "varied": finite_or_none(t_m), "base_label": f"{F} firms",
             "varied_label": f"{F - 1} firms",
             "products_per_firm": k},
            _direction_from(t_n, t_m) if F > 2 else "not computed", "; ".join(notes))
    except (InputError, SolverError) as exc:
        row("firms", "symmetric counterpart", measure, {}, "not computed", "; ".join([*notes, str(exc)]))
    bar.step("factors: fewer firms")

    # more symmetric firms: each side against its counterpart with costs and demand made alike
    vals, dirs, notes = {}, [], []
    for side in (before, after):
        try:
            sym = symmetric_counterpart(side.market, keep_owner=True)
            t_act = headline_scheme(side, opts).market
            a_ms, s_ms = side.market.spec(), sym.spec()
            if (np.array_equal(a_ms.cost, s_ms.cost) and np.array_equal(a_ms.demand.vector, s_ms.demand.vector)
                    and np.array_equal(a_ms.capacity, s_ms.capacity)):
                vals[side.label] = {"actual": finite_or_none(t_act), "symmetric": finite_or_none(t_act)}
                dirs.append("not computed")
                notes.append(f"{side.label}: costs and demand are already symmetric"
                             + (" (ownership is not)" if a_ms.multi_product else ""))
                continue
            t_sym = _scheme_threshold(sym, opts)
            vals[side.label] = {"actual": finite_or_none(t_act), "symmetric": finite_or_none(t_sym)}
            dirs.append(_direction_from(t_act, t_sym))
            if side.market.owner is not None:
                notes.append(f"{side.label}: cost and demand asymmetries removed, ownership asymmetry kept")
        except (InputError, SolverError) as exc:
            vals[side.label] = {}
            notes.append(f"{side.label}: {exc}")
    row("symmetry", "each market against its counterpart with mean costs, mean qualities or intercepts and equal "
                    "capacities and shares", measure, vals, _combine(dirs), "; ".join(notes))
    bar.step("factors: more symmetric firms")

    # more transparent: simulated persistence at the experiment's noise and at a multiple of it
    ts = opts["transparency_scale"]
    if before.rescaled is not None:
        vals, dirs = {}, []
        for side in (before, after):
            e1 = side.simulation.metrics["collusive_share"]
            e2 = side.rescaled.metrics["collusive_share"]
            vals[side.label] = {"noise": e1.value, "noise_ci": [e1.low, e1.high], "scale": ts,
                                "scaled_noise": e2.value, "scaled_noise_ci": [e2.low, e2.high]}
            less, more = (e1, e2) if ts > 1 else (e2, e1)
            se = math.sqrt(e1.se ** 2 + e2.se ** 2)
            if not math.isfinite(se) or abs(less.value - more.value) <= 1.959963984540054 * se:
                dirs.append("no effect")
            else:
                dirs.append("facilitates" if less.value > more.value else "hinders")
        row("transparency", f"monitoring noise (demand-shock sigma, perception and implementation errors) multiplied "
                            f"by {ts:g}", "simulated share of collusive periods (95% CI)", vals, _combine(dirs),
            "less noise means more transparency; 'no effect' when the difference is within 1.96 standard errors")
    else:
        why = ("the experiment's monitoring has no noise to vary" if not _has_noise(mon)
               else "simulations were not run (assess.simulate = false)")
        row("transparency", "monitoring noise", "simulated share of collusive periods", {}, "not computed", why)

    # more frequent interaction: per-interaction discount factor delta^(1/k) when firms meet k times as
    # often -- a structural property of the model, reported as how far each market is from its threshold
    vals = {}
    for side in (before, after):
        t = headline_scheme(side, opts).market
        if math.isfinite(_rank(t)) and 0 < t < 1 and 0 < delta < 1:
            vals[side.label] = {"threshold": t, "longest_interval": math.log(t) / math.log(delta),
                                "sustainable_half_as_often": _sustains(t, delta ** 2),
                                "sustainable": _sustains(t, delta),
                                "sustainable_twice_as_often": _sustains(t, math.sqrt(delta))}
        elif math.isfinite(_rank(t)) and t == 0:
            vals[side.label] = {"threshold": 0.0, "longest_interval": math.inf}
        else:
            vals[side.label] = {"threshold": finite_or_none(t)}
    row("frequency", "firms interact k times as often: the discount factor per interaction becomes delta^(1/k)",
        "longest interval between interactions (in periods) that still sustains collusion: ln(threshold) / ln(delta)",
        vals, STRUCTURAL, "the thresholds are per interaction; more frequent interaction raises the discount factor "
                          "per interaction, which can only help")

    # growing demand: profits growing at rate g make the effective discount factor delta (1 + g) --
    # structural as well
    g = opts["growth"]
    vals = {}
    for side in (before, after):
        t = headline_scheme(side, opts).market
        up, down = min(delta * (1 + g), 1.0 - 1e-15), delta * (1 - g)
        vals[side.label] = {"threshold": finite_or_none(t),
                            "growth_needed": (t / delta - 1.0) if math.isfinite(_rank(t)) and delta > 0 else None,
                            "sustainable_declining": _sustains(t, down), "sustainable": _sustains(t, delta),
                            "sustainable_growing": _sustains(t, up)}
    row("growth", f"demand growing (declining) by {g:g} per period: effective discount factor delta (1 +/- g)",
        "growth per period needed for sustainability, threshold / delta - 1 (negative: the decline tolerated)",
        vals, STRUCTURAL, "assumes every stage profit scales with demand (true of the shipped demand systems when "
                          "quantities scale; capacities grow with demand)")
    bar.step("factors")
    return rows


# --------------------------------------------------------------------------------------------------
# Sensitivity
# --------------------------------------------------------------------------------------------------


def _flips(x: np.ndarray, y: np.ndarray) -> list:
    """Where ``y`` changes sign: between consecutive finite non-zero values of opposite signs (linear
    interpolation); zeros carry no sign and are skipped."""
    pts = [(float(a), float(b)) for a, b in zip(x, y) if math.isfinite(b) and b != 0]
    out = []
    for (x0, y0), (x1, y1) in itertools.pairwise(pts):
        if y0 * y1 < 0:
            out.append(x0 + (x1 - x0) * y0 / (y0 - y1))
    return out


def _signed_change(before: float, after: float) -> float:
    """After minus before, with 'not sustainable' as +1 beyond one: for locating flips."""

    b = before if math.isfinite(_rank(before)) else 2.0
    a = after if math.isfinite(_rank(after)) else 2.0
    return difference(a, b)


def _sensitivity(data, merger, sens: dict, opts: dict, runs: dict, noise_mons: list, entries, post_entries, before,
                 after, delta: float, bar, key=(0,), threads=None) -> dict:

    out = {}
    for name in SENSITIVITY_INPUTS:
        if name not in sens:
            continue
        xs = sens[name]
        pre_t, post_t, status = [], [], []
        binding_pre, binding_post = [], []
        for x in xs:
            try:
                cal = calibrate(data.with_input(name, float(x)))
                mr = merge(cal.market, merger)
                tb = _scheme_threshold_full(cal.market, opts)
                ta = _scheme_threshold_full(mr.post, opts)
                pre_t.append(tb[0])
                post_t.append(ta[0])
                binding_pre.append(mr.names_pre[tb[1]])
                binding_post.append(mr.names_post[ta[1]])
                status.append("ok")
            except (InputError, SolverError) as exc:
                pre_t.append(math.nan)
                post_t.append(math.nan)
                binding_pre.append(None)
                binding_post.append(None)
                status.append(f"infeasible: {exc}")
            bar.step(f"sensitivity {name} {x:g}")
        ok = np.array([s == "ok" for s in status])
        change = np.array([_signed_change(b, a) if k else math.nan for b, a, k in zip(pre_t, post_t, ok)])
        observed = _observed_input(data, name)
        out[name] = {
            "values": np.asarray(xs).tolist(), "observed": observed,
            "threshold_before": [finite_or_none(v) for v in pre_t],
            "threshold_after": [finite_or_none(v) for v in post_t], "binding_before": binding_pre,
            "binding_after": binding_post, "status": status,
            "direction": [_compare(b, a) if k else None for b, a, k in zip(pre_t, post_t, ok)],
            "flips": _flips(np.asarray(xs), change),
            "category_at_delta": [_category(_sustains(b, delta), _sustains(a, delta)) if k else None
                                  for b, a, k in zip(pre_t, post_t, ok)],
            "category_flips": _category_flips(np.asarray(xs), pre_t, post_t, ok, delta),
        }
        fin = [t for t in pre_t + post_t if math.isfinite(_rank(t))]
        if ok.all() and fin and _flat(pre_t) and _flat(post_t):
            out[name]["note"] = (f"the thresholds do not depend on {name} here: with the observed shares held fixed, "
                                 f"{name} only rescales every price-cost markup and profit by a common factor, which "
                                 "leaves every ratio of profits, and so every critical discount factor, unchanged")
    if "delta" in sens:
        ds = sens["delta"]
        sch = opts["scheme"] if opts["scheme"] != "stick_carrot" else "grim"
        gains = {"before": [], "after": []}
        for d in ds:
            for side in (before, after):
                p = partial_collusion(side.market, float(d), sch, T=opts["length"] if sch == "finite" else None,
                                      stage=side.report.stage)
                gains[side.label].append(p.profit_gain)
            bar.step(f"sensitivity delta {d:g}")
        hb, ha = headline_scheme(before, opts).market, headline_scheme(after, opts).market
        out["delta"] = {
            "values": np.asarray(ds).tolist(), "scheme": SCHEME_NAMES[sch] + (f", T={opts['length']}"
                                                                              if sch == "finite" else ""),
            "profit_gain_before": gains["before"], "profit_gain_after": gains["after"],
            "category": [_category(_sustains(hb, d), _sustains(ha, d)) for d in ds],
            "threshold_before": finite_or_none(hb), "threshold_after": finite_or_none(ha),
            "flips": sorted({float(t) for t in (hb, ha) if math.isfinite(_rank(t))
                             and ds[0] <= t <= ds[-1]}),
        }
        if sch != opts["scheme"]:
            out["delta"]["note"] = "partial collusion shown for grim trigger (stick and carrot is too slow to sweep)"
    if "noise" in sens and opts["simulate"]:
        ks = sens["noise"]
        res = {"before": [], "after": []}
        for j, k in enumerate(ks):
            for i, (label, mk, ent) in enumerate((("before", before.market, entries),
                                                  ("after", after.market, post_entries))):
                g = prepare_game(mk, ent, noise_mons[j], opts["agreement"], strict=False)
                e = _run(g, runs, key=tuple(key) + (3, j, i), threads=threads).metrics["collusive_share"]
                res[label].append(e)
            bar.step(f"sensitivity noise x{k:g}")
        diff = np.array([difference(a.value, b.value) for a, b in zip(res["after"], res["before"])])
        out["noise"] = {
            "scales": np.asarray(ks).tolist(),
            "monitoring": [m.to_dict() for m in noise_mons],
            "collusive_share_before": [e.value for e in res["before"]],
            "collusive_share_before_ci": [[e.low, e.high] for e in res["before"]],
            "collusive_share_after": [e.value for e in res["after"]],
            "collusive_share_after_ci": [[e.low, e.high] for e in res["after"]],
            "difference": diff.tolist(), "flips": _flips(np.asarray(ks), diff),
        }
    return out


def _flat(ts, tol: float = 1e-6) -> bool:
    r = [_rank(t) for t in ts]
    if all(math.isinf(x) for x in r):
        return True
    if any(math.isinf(x) for x in r):
        return False
    return max(r) - min(r) <= tol


def _scheme_threshold_full(market, opts) -> tuple[float, int]:

    rep = critical_discount_factors(market, punishments=opts["punishments"], deltas=(), agreement=opts["agreement"])
    if opts["scheme"] == "grim":
        s = rep.grim
    elif opts["scheme"] == "stick_carrot":
        s = rep.stick_carrot
    else:
        s = next(f for f in rep.finite if f.T == opts["length"])
    return s.market, s.binding


def _category_flips(xs, pre_t, post_t, ok, delta) -> list:
    """Input values between which the category at the headline delta changes (midpoints)."""
    cats = [_category(_sustains(b, delta), _sustains(a, delta)) if k else None for b, a, k in zip(pre_t, post_t, ok)]
    out = []
    for k in range(len(xs) - 1):
        if cats[k] is not None and cats[k + 1] is not None and cats[k] != cats[k + 1]:
            out.append({"between": [float(xs[k]), float(xs[k + 1])], "from": cats[k], "to": cats[k + 1]})
    return out


def _observed_input(data, name: str):
    if name == "size":
        return float(data.validated("data")["size"])
    v = getattr(data, name)
    if v is None:
        return None
    if isinstance(v, list | tuple | np.ndarray):
        return None
    return float(v)


def _robustness(sens: dict, conclusion: dict) -> dict:
    out = {}
    for name in SENSITIVITY_INPUTS:
        if name not in sens:
            continue
        s = sens[name]
        dirs = [d for d in s["direction"] if d is not None]
        xs = s["values"]
        same = all(d == conclusion["direction"] for d in dirs) and bool(dirs)
        if not dirs:
            text = f"no value of {name} in [{xs[0]:g}, {xs[-1]:g}] gave a valid calibration"
        elif same and not s["flips"]:
            text = (f"the merger's effect on the threshold ({conclusion['direction']}) holds over the whole range of "
                    f"{name}, [{xs[0]:g}, {xs[-1]:g}]")
        else:
            where = ", ".join(f"{x:.4g}" for x in s["flips"]) or "between grid points"
            text = (f"the merger's effect on the threshold changes sign over {name} in [{xs[0]:g}, {xs[-1]:g}], "
                    f"at {where}")
        if s["category_flips"]:
            text += "; at the discount factor {:.4g} the conclusion changes ".format(conclusion["delta"]) + "; ".join(
                f"from '{c['from']}' to '{c['to']}' between {c['between'][0]:.4g} and {c['between'][1]:.4g}"
                for c in s["category_flips"])
        infeasible = sum(1 for st in s["status"] if st != "ok")
        if infeasible:
            text += f" ({infeasible} of {len(xs)} values gave no valid calibration)"
        out[name] = text
    if "delta" in sens:
        fl = sens["delta"]["flips"]
        out["delta"] = ("the conclusion at a given discount factor changes at " + ", ".join(f"{x:.4g}" for x in fl)
                        if fl else "no threshold lies within the range of discount factors examined")
    if "noise" in sens:
        fl = sens["noise"]["flips"]
        out["noise"] = ("the ordering of simulated persistence (after minus before) changes sign at noise scale "
                        + ", ".join(f"{x:.4g}" for x in fl) if fl else
                        "the ordering of simulated persistence does not change over the noise range examined")
    return out


# --------------------------------------------------------------------------------------------------
# Assumptions
# --------------------------------------------------------------------------------------------------


def _entry_text(entry: dict) -> str:
    params = ", ".join(f"{k} {v}" for k, v in entry.items() if k != "strategy")
    return entry["strategy"] + (f" ({params})" if params else "")


def _assumptions(calibration, mres, opts, runs, mon, entries, post_entries) -> list:
    pre = mres.pre.spec()
    out = []
    if calibration is not None:
        out.append(f"the pre-merger market is calibrated to the observed data assuming {calibration.conduct}; "
                   f"identified by {calibration.identified_by}")
        out.extend(a for a in calibration.assumptions if not a.startswith("conduct:"))
    else:
        out.append("the pre-merger market is taken as given (no calibration to observed data)")
    out.extend(mres.notes)
    agree = {"joint": "the joint-profit maximum", "symmetric": "the best symmetric outcome (a common quantity or "
                                                                "price)", "proportional": "quantities proportional "
                                                                                          "to the static-Nash ones"}
    out.append(f"the firms collude on {agree[opts['agreement']]} of each market; deviations are best one-shot "
               "deviations; punishments as named (Nash reversion forever or for T periods, or the optimal symmetric "
               "stick and carrot)")
    out.append("demand, costs and the number of firms are constant over time apart from the factor table's "
               "variations; firms share one discount factor")
    if runs["horizon"] == "random":
        out.append(f"the game continues after each period with probability {runs['continuation']:g}: the discount "
                   f"factor that matters is delta x continuation = {runs['delta'] * runs['continuation']:.4g}")
    if opts["simulate"]:
        p = mon.validated()
        strategies = sorted({e["strategy"] for e in entries})
        out.append(f"simulations: firms follow the strategies of the line-up ({', '.join(strategies)}) rather than "
                   f"optimising; monitoring '{p['signal']}', demand shock {p['noise']} sigma {p['sigma']:g}, "
                   f"perception error {p['perception_error']:g}, implementation error {p['implementation_error']:g}")
        first = mres.merging[0]
        others = [mres.names_pre[i] for i in mres.merging[1:]]
        out.append(f"after the merger the merged firm {mres.names_post[mres.merged]} plays the strategy of "
                   f"{mres.names_pre[first]}, the lowest-numbered merging firm: "
                   f"{_entry_text(post_entries[mres.merged])}; the strategies of {' and '.join(others)} are dropped"
                   " and every other firm keeps its own")
    if pre.multi_product:
        out.append("some pre-merger firms already own several products")
    return out


# --------------------------------------------------------------------------------------------------
# Experiment tables
# --------------------------------------------------------------------------------------------------


def assessment_from_dict(doc: dict) -> dict:
    """Read the tables of a ``kind = "assess"`` experiment.

    Tables: ``[experiment]``, ``[market]`` (a market given directly) or ``[data]`` (observations to
    calibrate from, see :class:`~sim.antitrust.calibration.MarketData`), ``[merger]``, ``[collusion]``
    (``agreement``), ``[monitoring]``, ``[[strategies]]`` (the pre-merger line-up), ``[run]`` and
    ``[assess]`` (``scheme``, ``length``, ``punishments``, ``deltas``, ``partial``, ``growth``,
    ``simulate``, ``transparency_scale`` and a ``[assess.sensitivity]`` table of ranges: lists of values or
    ``{start, stop, num}`` / ``{start, stop, step}``). Unknown tables and keys raise
    :class:`InputError` naming them.

    Returns
    -------
    dict
        Keyword arguments of :func:`assess` (``source``, ``merger``, ...) plus ``name``.
    """

    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    for k in doc:
        if k in ("sweep", "report"):
            raise InputError(k, "supergame assess runs one assessment; run a sweep (or a [report] table) with "
                                "supergame run FILE")
        if k not in ASSESS_TABLES:
            raise InputError(k, f"unknown table for an assessment; allowed: {', '.join(ASSESS_TABLES)}")
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", ("name", "kind", "description"))
    if "kind" in exp and exp["kind"] != "assess":
        raise InputError("experiment.kind", f"this command runs kind = 'assess' experiments, got {exp['kind']!r}")
    if ("market" in doc) == ("data" in doc):
        raise InputError("data", "give either a [data] table of observations to calibrate from or a [market] table, "
                                 "not both" if "market" in doc else "missing: give a [data] table of observations "
                                                                    "(or a [market] table)")
    source = data_from_dict(doc["data"]) if "data" in doc else market_from_dict(doc["market"])
    if "merger" not in doc:
        raise InputError("merger", "missing: the [merger] table names the merging firms")
    merger = merger_from_dict(doc["merger"])
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", ("agreement",))
    a = refuse_unknown(doc.get("assess", {}), "assess", _ASSESS_KEYS)
    out = {"source": source, "merger": merger, "monitoring": doc.get("monitoring"), "lineup": doc.get("strategies"),
           "run": doc.get("run"), "agreement": coll.get("agreement", "joint")}
    for k in _ASSESS_KEYS:
        if k in a:
            out[k] = a[k]
    name = exp.get("name", "assessment")
    if not isinstance(name, str) or not name.strip():
        raise InputError("experiment.name", f"must be a non-empty string, got {name!r}")
    out["name"] = name
    return out
