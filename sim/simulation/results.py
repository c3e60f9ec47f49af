"""Persistence metrics of simulated collusion, each with a confidence interval.

Definitions
-----------
A firm *colludes* in a period when its automaton is in a collusive state and it neither cheated nor
made an implementation error; a period is *collusive* when every firm colludes. A *collusive spell*
is a maximal run of collusive periods, a *price war* a maximal run of other periods: it counts the
period of the deviation that set it off (cheating, a tremble), so a war answering one deviation with
a T-period punishment lasts T + 1 periods. A *punishment phase* is a maximal run of periods in which
some firm's automaton is in a non-collusive state (the deviation period itself is not part of it);
under T-period Nash reversion every punishment phase lasts exactly T periods. The *time to first
breakdown* is the number (counting from 1) of the first period that is not collusive.

Estimators and intervals: :mod:`sim.core.stats`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

import sim.simulation.kernel as K
from sim.core.jsonutil import jsonable
from sim.core.stats import (
    Estimate,
    Survival,
    kaplan_meier,
    mean_estimate,
    normal_quantile,
    ratio_estimate,
    share_estimate,
    wilson_estimate,
)
from sim.core.text import CAUTION
from sim.models.stagecore import evaluate_py
from sim.simulation.baseline import analytic_baseline

__all__ = ["Estimate", "SimulationResult", "Survival", "kaplan_meier", "mean_estimate", "normal_quantile",
           "ratio_estimate", "summarize", "wilson_estimate"]


# --------------------------------------------------------------------------------------------------
# The result of a simulation
# --------------------------------------------------------------------------------------------------


@dataclass
class SimulationResult:
    """Everything a simulation produced.

    Plain data: :meth:`to_dict` gives JSON types only (nan stored as None) and :meth:`from_dict` reads
    them back, so that ``SimulationResult.from_dict(d).to_dict() == d`` for ``d = r.to_dict()``, also
    after a trip through JSON. The document holds the curves at no more than 1,000 periods and 200
    lengths (see :meth:`to_dict`); a result read back from it holds what the document holds.

    Parameters
    ----------
    settings : dict
        Market, agreement, line-up, monitoring and run settings (as given, validated).
    profits : ndarray of shape (n_reps, n_firms) or None
        Mean per-period profit of each firm in each replication (None when read from a document
        without the per-replication values).
    discounted : ndarray of shape (n_reps, n_firms) or None
        Discounted sum of each firm's profits, ``sum_t delta^t pi_t``, in each replication.
    periods : int ndarray of shape (n_reps,) or None
        Periods played in each replication.
    first_breakdown : int ndarray of shape (n_reps,) or None
        Number of the first period that was not collusive (0: none within the horizon).
    counts : dict of str to int ndarray of shape (n_reps,), or None
        Per-replication counts: collusive periods, wars, wars that ended, cheats, trembles, ...
    metrics : dict of str to Estimate
        Market-level persistence metrics (see the module notes).
    firm_metrics : dict of str to list of Estimate
        Per-firm metrics (mean and discounted profit, profit gain), one entry per firm.
    spells : Survival
        Survival curve of collusive spells.
    wars : Survival
        Survival curve of price wars.
    breakdown : Survival
        Survival curve of the time to first breakdown.
    collusive_by_period : ndarray of shape (n_periods,)
        Share of the replications still running in period t in which every firm colluded (nan in a
        period not stored in the document a result was read from).
    reference : dict
        Stage-game values the metrics refer to (Nash and collusive profits, Nash price, ...).
    baseline : dict
        The analytic baseline (:func:`sim.simulation.baseline.analytic_baseline`), empty when not asked for.
    paths : dict or None
        Full paths of the first ``run.paths`` replications.
    punishments : Survival or None
        Survival curve of punishment phases (see the module notes); its mean is
        :attr:`punishment_length`.
    """

    settings: dict
    profits: np.ndarray | None
    discounted: np.ndarray | None
    periods: np.ndarray | None
    first_breakdown: np.ndarray | None
    counts: dict | None
    metrics: dict
    firm_metrics: dict
    spells: Survival
    wars: Survival
    breakdown: Survival
    collusive_by_period: np.ndarray
    reference: dict
    baseline: dict = field(default_factory=dict)
    paths: dict | None = None
    punishments: Survival | None = None

    @property
    def n_reps(self) -> int:
        """Number of replications."""
        if self.periods is None:
            return int(self.settings["run"]["replications"])
        return int(self.periods.shape[0])

    @property
    def punishment_length(self) -> Estimate:
        """Mean length of a punishment phase (Kaplan-Meier, as the other lengths)."""
        if self.punishments is None:
            return Estimate(math.nan, math.nan, math.nan, math.nan, 0, "kaplan-meier", "undefined")
        return self.punishments.mean

    def to_dict(self, per_replication: bool = False) -> dict:
        """Plain data: JSON types only, nan and the infinities stored as None.

        The share colluding by period (simulated and analytic) is kept at no more than 1,000 periods
        and the survival curves at no more than 200 lengths, evenly spread (all of them in shorter
        runs; see :meth:`sim.core.stats.Survival.thinned`).

        Parameters
        ----------
        per_replication : bool
            Whether to add every replication's profits, discounted profits, length, first breakdown
            and counts (``replications``).

        Returns
        -------
        dict
            ``settings``, ``metrics``, ``firms``, ``survival``, ``collusive_by_period``, ``reference``,
            ``baseline``, ``definitions``, ``replications`` (when asked for and held), ``paths`` (when
            recorded) and ``caution``.
        """
        survival = {"spells": self.spells, "wars": self.wars, "first_breakdown": self.breakdown}
        if self.punishments is not None:
            survival["punishments"] = self.punishments
        out = {
            "settings": self.settings,
            "metrics": {k: v.to_dict() for k, v in self.metrics.items()},
            "firms": {k: [e.to_dict() for e in v] for k, v in self.firm_metrics.items()},
            "survival": {k: v.thinned(SURVIVAL_POINTS).to_dict() for k, v in survival.items()},
            "collusive_by_period": _thin(self.collusive_by_period),
            "reference": self.reference,
            "baseline": _baseline_dict(self.baseline),
            "definitions": DEFINITIONS,
        }
        if per_replication and self.periods is not None:
            out["replications"] = {
                "profits": self.profits, "discounted": self.discounted, "periods": self.periods,
                "first_breakdown": self.first_breakdown, **self.counts,
            }
        if self.paths is not None:
            out["paths"] = self.paths
        out["caution"] = CAUTION
        return jsonable(out)

    @classmethod
    def from_dict(cls, doc: dict) -> SimulationResult:
        """The result stored by :meth:`to_dict` (None read back as nan where a number belongs).

        Parameters
        ----------
        doc : dict
            Output of :meth:`to_dict`, possibly through JSON.

        Returns
        -------
        SimulationResult
        """
        sv = doc["survival"]
        per = doc.get("replications")
        if per is not None:
            per = dict(per)
            reps = {"profits": _floats(per.pop("profits")), "discounted": _floats(per.pop("discounted")),
                    "periods": np.asarray(per.pop("periods"), dtype=np.int64),
                    "first_breakdown": np.asarray(per.pop("first_breakdown"), dtype=np.int64),
                    "counts": {k: np.asarray(v, dtype=np.int64) for k, v in per.items()}}
        else:
            reps = dict.fromkeys(("profits", "discounted", "periods", "first_breakdown", "counts"))
        return cls(
            settings=doc["settings"], **reps,
            metrics={k: Estimate.from_dict(v) for k, v in doc["metrics"].items()},
            firm_metrics={k: [Estimate.from_dict(e) for e in v] for k, v in doc["firms"].items()},
            spells=Survival.from_dict(sv["spells"]), wars=Survival.from_dict(sv["wars"]),
            breakdown=Survival.from_dict(sv["first_breakdown"]),
            collusive_by_period=_unthin(doc["collusive_by_period"]),
            reference={k: ([_number(x) for x in v] if isinstance(v, list) else _number(v))
                       for k, v in doc["reference"].items()},
            baseline=_baseline_from_dict(doc["baseline"]),
            paths=_paths_from_dict(doc["paths"]) if doc.get("paths") is not None else None,
            punishments=Survival.from_dict(sv["punishments"]) if "punishments" in sv else None,
        )


#: most periods of the share colluding, and most lengths of a survival curve, in :meth:`SimulationResult.to_dict`
PERIOD_POINTS = 1000
SURVIVAL_POINTS = 200

#: what the lengths in the output count (see the module notes)
DEFINITIONS = {
    "collusive spell": "a maximal run of periods in which every firm colludes",
    "price war": "a maximal run of periods that are not collusive; it includes the period of the deviation "
                 "(cheating or a tremble) that set it off, so one deviation answered by a T-period punishment "
                 "makes a war of T + 1 periods",
    "punishment phase": "a maximal run of periods in which some firm's automaton is in a non-collusive state "
                        "(survival.punishments); the deviation period is not part of it",
    "first breakdown": "the number, counting from 1, of the first period that is not collusive",
}


def _number(x) -> float:
    return math.nan if x is None else float(x)


def _floats(x) -> np.ndarray:
    """Nested lists of numbers and None -> float array with nan."""
    return np.array(x, dtype=float)


def _thin(x: np.ndarray, max_points: int = PERIOD_POINTS) -> dict:
    n = x.shape[0]
    idx = np.unique(np.round(np.linspace(0, n - 1, min(n, max_points))).astype(int)) if n else np.zeros(0, int)
    return {"period": (idx + 1).tolist(), "share": x[idx].tolist()}


def _unthin(doc: dict) -> np.ndarray:
    """The share by period stored by :func:`_thin`: nan in the periods not stored (the last one always is)."""
    period = np.asarray(doc["period"], dtype=np.int64)
    out = np.full(int(period[-1]) if period.size else 0, np.nan)
    out[period - 1] = _floats(doc["share"])
    return out


def _baseline_dict(b: dict) -> dict:
    out = {k: v for k, v in b.items() if k != "collusive_by_period"}
    if b.get("collusive_by_period") is not None:
        out["collusive_by_period"] = _thin(np.asarray(b["collusive_by_period"]))
    return out


def _baseline_from_dict(doc: dict) -> dict:
    out = dict(doc)
    if "collusive_by_period" in out:
        out["collusive_by_period"] = _unthin(out["collusive_by_period"])
    elif out:
        out["collusive_by_period"] = None
    return out


_PATH_INTS = ("length", "states", "flags", "collusive")


def _paths_from_dict(doc: dict) -> dict:
    out = {}
    for k, v in doc.items():
        if k == "state_names":
            out[k] = [list(x) for x in v]
        else:
            out[k] = np.asarray(v, dtype=np.int64) if k in _PATH_INTS else _floats(v)
    return out


def summarize(raw, game, run: dict, confidence: float = 0.95, baseline: bool = True) -> SimulationResult:
    """Turn the driver's raw arrays into a :class:`SimulationResult`.

    Parameters
    ----------
    raw : RawRun
        The driver's output (:func:`sim.simulation.driver.run_game`).
    game : Game
        The game that was played.
    run : dict
        The validated run settings (:func:`sim.simulation.engine.check_run`).
    confidence : float in (0, 1)
        Level of the confidence intervals.
    baseline : bool
        Whether to compute the analytic baseline.

    Returns
    -------
    SimulationResult
    """

    ints = raw.ints
    periods = ints[:, K.R_PERIODS].astype(float)
    # the profiles the line-up plays (for homogeneous Bertrand with continuous prices they undercut
    # by the effective tick where the analytic outcome is a limit, see sim.simulation.game.stage_levels)
    nash_a = np.asarray(game.levels.profiles["nash"], dtype=float)
    coll_a = np.asarray(game.levels.profiles["collusive"], dtype=float)
    # a market with a mixed static equilibrium gives the expected outcome of its drawn level
    outcome = getattr(game.market, "expected_outcome", None) or (lambda a: evaluate_py(game.arrays, a))
    _, _, pi_n, p_n, cs_n = outcome(nash_a)
    _, _, pi_c, p_c, cs_c = outcome(coll_a)
    spells, wars, breakdown, punishments = _survival_curves(raw, run["periods"], confidence)
    metrics = _market_metrics(raw, periods, (spells, wars, breakdown), pi_n, pi_c, p_n, confidence)
    firm = _firm_metrics(raw, periods, pi_n, pi_c, confidence)
    alive = raw.by_period[1]
    with np.errstate(invalid="ignore", divide="ignore"):
        by_t = np.where(alive > 0, raw.by_period[0] / np.maximum(alive, 1), np.nan)
    reference = {"nash_profit": pi_n.tolist(), "collusive_profit": pi_c.tolist(),
                 "deviation_profit": np.asarray(game.levels.firm_profits["deviation"]).tolist(),
                 "nash_price": p_n, "collusive_price": p_c, "nash_surplus": cs_n, "collusive_surplus": cs_c}
    counts = {
        "collusive_periods": ints[:, K.R_COLLUSIVE].copy(), "wars": ints[:, K.R_WARS].copy(),
        "wars_ended": ints[:, K.R_WARS_ENDED].copy(), "war_periods": ints[:, K.R_WAR_PERIODS].copy(),
        "spells": ints[:, K.R_SPELLS].copy(), "spells_ended": ints[:, K.R_SPELLS_ENDED].copy(),
        "cheats": ints[:, K.R_CHEATS].copy(), "trembles": ints[:, K.R_TREMBLES].copy(),
    }
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_profit = raw.profit_sum / np.maximum(periods, 1)[:, None]
    settings = _settings(game, run, confidence)
    res = SimulationResult(settings, mean_profit, raw.disc.copy(), ints[:, K.R_PERIODS].copy(),
                           ints[:, K.R_FIRST_BREAKDOWN].copy(), counts, metrics, firm, spells, wars, breakdown, by_t,
                           reference, {}, _paths(raw, game), punishments)
    if baseline:
        res.baseline = analytic_baseline(game, run)
    return res


def _survival_curves(raw, n_periods: int, confidence: float) -> tuple:
    """Kaplan-Meier curves of collusive spells, price wars, the first breakdown and punishment phases."""
    # a spell or war cut off by the horizon after l periods is known to last at least l periods, i.e.
    # to outlive l - 1: it is censored at l - 1 (counting it at risk at l would bias the curve upward)
    spells = kaplan_meier(raw.hist[K.H_SPELL_ENDED], _cut_off(raw.hist[K.H_SPELL_CENSORED]), confidence)
    wars = kaplan_meier(raw.hist[K.H_WAR_ENDED], _cut_off(raw.hist[K.H_WAR_CENSORED]), confidence)
    fb = raw.ints[:, K.R_FIRST_BREAKDOWN]
    ended = np.bincount(fb[fb > 0], minlength=n_periods + 1)[: n_periods + 1]
    cens = np.bincount(raw.ints[fb == 0, K.R_PERIODS], minlength=n_periods + 1)[: n_periods + 1]
    breakdown = kaplan_meier(ended, cens, confidence, restrict=n_periods)
    punishments = kaplan_meier(raw.hist[K.H_PUNISH_ENDED], _cut_off(raw.hist[K.H_PUNISH_CENSORED]), confidence)
    return spells, wars, breakdown, punishments


def _market_metrics(raw, periods: np.ndarray, curves: tuple, pi_n, pi_c, p_n: float, confidence: float) -> dict:
    ints = raw.ints
    spells, wars, breakdown = curves
    fb = ints[:, K.R_FIRST_BREAKDOWN]
    metrics = {}
    # shares of periods: intervals that stay in [0, 1] (sim.core.stats.share_estimate)
    metrics["collusive_share"] = share_estimate(ints[:, K.R_COLLUSIVE], periods, confidence)
    metrics["war_share"] = share_estimate(ints[:, K.R_WAR_PERIODS], periods, confidence)
    metrics["wars_per_replication"] = mean_estimate(ints[:, K.R_WARS], confidence)
    metrics["war_frequency"] = share_estimate(ints[:, K.R_WARS], periods, confidence)
    metrics["spell_length"] = spells.mean
    metrics["war_length"] = wars.mean
    metrics["first_breakdown"] = breakdown.mean
    metrics["broken_down"] = wilson_estimate(int((fb > 0).sum()), fb.shape[0], confidence)
    metrics["price"] = ratio_estimate(raw.flts[:, K.F_PRICE_SUM], periods, confidence)
    metrics["overcharge"] = metrics["price"].affine(-1.0, 1.0 / p_n) if p_n > 0 else _nan_est("price")
    metrics["consumer_surplus"] = ratio_estimate(raw.flts[:, K.F_CS_SUM], periods, confidence)
    joint = raw.profit_sum.sum(axis=1)
    metrics["joint_profit"] = ratio_estimate(joint, periods, confidence)
    jn, jc = float(pi_n.sum()), float(pi_c.sum())
    metrics["profit_gain"] = (metrics["joint_profit"].affine(-jn / (jc - jn), 1.0 / (jc - jn))
                              if jc > jn else _nan_est("ratio"))
    return metrics


def _firm_metrics(raw, periods: np.ndarray, pi_n, pi_c, confidence: float) -> dict:
    firm = {"profit": [], "discounted_profit": [], "profit_gain": []}
    for i in range(raw.profit_sum.shape[1]):
        e = ratio_estimate(raw.profit_sum[:, i], periods, confidence)
        firm["profit"].append(e)
        firm["discounted_profit"].append(mean_estimate(raw.disc[:, i], confidence))
        gap = float(pi_c[i] - pi_n[i])
        firm["profit_gain"].append(e.affine(-float(pi_n[i]) / gap, 1.0 / gap) if abs(gap) > 1e-12 * max(
            1.0, abs(float(pi_c[i]))) else _nan_est("ratio"))
    return firm


def _cut_off(hist: np.ndarray) -> np.ndarray:
    """Lengths of runs cut off by the horizon -> censoring times (one period less, see summarize)."""
    out = np.zeros_like(hist)
    out[:-1] = hist[1:]
    return out


def _nan_est(method: str) -> Estimate:
    return Estimate(math.nan, math.nan, math.nan, math.nan, 0, method, "undefined")


def _settings(game, run: dict, confidence: float) -> dict:
    lu = game.lineup
    return {
        "n_firms": game.n_firms,
        "n_products": game.arrays.n_products,
        "model": game.market.model,
        "agreement": game.stage.agreement,
        "lineup": [s.to_dict() for s in lu.strategies],
        "monitoring": {k: v for k, v in game.monitoring.items() if k != "noise_code"},
        "run": dict(run),
        "confidence": confidence,
        "levels": {k: np.asarray(v).tolist() for k, v in game.levels.profiles.items()},
    }


def _paths(raw, game) -> dict | None:
    if raw.n_paths <= 0:
        return None
    k = raw.n_paths
    length = raw.ints[:k, K.R_PERIODS].copy()
    return {
        "length": length,
        "actions": raw.path_actions[:k], "prices": raw.path_prices[:k],
        "market_price": raw.path_market[:k, :, K.M_PRICE], "shock": raw.path_market[:k, :, K.M_THETA],
        "surplus": raw.path_market[:k, :, K.M_SURPLUS], "profits": raw.path_profit[:k],
        "states": raw.path_state[:k], "flags": raw.path_flags[:k], "collusive": raw.path_collude[:k],
        "state_names": [list(x) for x in game.lineup.state_names],
    }
