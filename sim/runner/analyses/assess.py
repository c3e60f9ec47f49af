"""The ``assess`` analysis: the coordinated effects of a merger, as an experiment kind (see
:mod:`sim.runner.kinds`).

A cell runs one assessment (:func:`sim.antitrust.assess.run_assessment`) and returns its
:class:`~sim.antitrust.result.Assessment` as the cell's result object (stored with the cell, rebuilt by
:meth:`sim.runner.runs.RunFolder.result`), the flat metrics of :func:`assessment_metrics` (the columns of
``results.csv``) and, in ``arrays``, the assessment's document under ``"assessment"`` with the sensitivity curves.
"""

from __future__ import annotations

import math

from sim.antitrust.assess import PreparedAssessment, prepare_assessment, run_assessment
from sim.antitrust.merger_sets import estimate_payoff_sets
from sim.antitrust.options import ASSESS_TABLES, assessment_from_dict
from sim.antitrust.result import Assessment
from sim.runner.cost import Cost
from sim.runner.kinds import CellResult, Kind

__all__ = ["KIND", "assessment_arrays", "assessment_cost", "assessment_metrics", "describe_cell"]


def _prepare_cell(doc: dict) -> PreparedAssessment:
    return prepare_assessment(**assessment_from_dict(doc))


#: seconds of one solver call per firm, and of one simulated firm-period, assumed by the time estimate
_SECONDS_PER_CALL, _SECONDS_PER_FIRM_PERIOD = 0.005, 2e-8


def assessment_cost(p: PreparedAssessment) -> Cost:
    """The estimated work of an assessment cell (see :mod:`sim.runner.cost`): solver calls of both sides and the
    simulations; with ``[assess.payoff_sets]`` the payoff sets dwarf the rest and name the setting.

    Parameters
    ----------
    p : PreparedAssessment

    Returns
    -------
    Cost
    """
    n = p.mres.pre.spec().n_firms
    calls = 2 * (5 + len(p.opts["punishments"]) + 20 * len(p.opts["deltas"])) + 4 * sum(map(len, p.sens.values()))
    seconds = calls * _SECONDS_PER_CALL * n
    if p.opts["simulate"]:
        seconds += 4 * p.runs["periods"] * p.runs["replications"] * n * _SECONDS_PER_FIRM_PERIOD
    if p.payoff_sets is not None:
        est = estimate_payoff_sets(p.payoff_sets)
        return Cost(float(est["bytes"]), float(calls + est["sets"]), "solver calls", seconds + est["seconds"],
                    "assess.payoff_sets.grid")
    return Cost(64.0 * n * n * 1000, float(calls), "solver calls", seconds, "assess.deltas")


def _metric_names(p: PreparedAssessment) -> list[str]:
    pre = p.mres.pre.spec()
    post = p.mres.post.spec()
    out = ["threshold.before", "threshold.after", "threshold.change", "direction", "sustainable.before",
           "sustainable.after", "binding.before", "binding.after"]
    for side, ms in (("before", pre), ("after", post)):
        out += [f"threshold.grim.{side}"] + [f"threshold.grim.{side}.firm{i + 1}" for i in range(ms.n_firms)]
        out += [f"threshold.finite[{j + 1}].{side}" for j in range(len(p.opts["punishments"]))]
        out += [f"threshold.stick_carrot.{side}"]
    out += ["hhi.before", "hhi.after", "delta_hhi", "naive_delta_hhi", "consumer_surplus.before",
            "consumer_surplus.after"]
    out += ([f"price_change.product{k + 1}" for k in range(post.n_products)] if not pre.homogeneous_good
            else ["price_change.market"])
    for j, _d in enumerate(p.opts["deltas"]):
        for sch in p.opts["partial"]:
            if sch == "finite":
                for t in range(len(p.opts["punishments"])):
                    base = f"partial_gain.finite[{t + 1}][{j + 1}]"
                    out += [f"{base}.before", f"{base}.after"]
            else:
                out += [f"partial_gain.{sch}[{j + 1}].before", f"partial_gain.{sch}[{j + 1}].after"]
    if p.opts["simulate"]:
        for m in ("collusive_share", "first_breakdown"):
            for side in ("before", "after"):
                out += [f"{m}.{side}", f"{m}.{side}.se", f"{m}.{side}.low", f"{m}.{side}.high"]
        out += ["persistence.difference", "persistence.difference.se"]
    if p.calibration is not None:
        out += ["calibration.max_relative_residual"]
    if p.payoff_sets is not None:
        out += _payoff_set_names(p.mres.pre.spec().n_firms, p.mres.post.spec().n_firms)
    if p.contact is not None:
        out += [f"contact.{what}.{side}" for what in ("alone", "pooled") for side in ("before", "after")]
    return out


def _payoff_set_names(n_before: int, n_after: int) -> list[str]:
    out = []
    for side, n in (("before", n_before), ("after", n_after)):
        out += [f"any_punishment.threshold.{e}.{side}" for e in ("lower", "upper")]
        out += [f"any_punishment.on_grid.{s}.{side}" for s in ("grim", "stick_carrot")]
        out += [f"any_punishment.worst.{e}.{side}.firm{i + 1}" for e in ("lower", "upper") for i in range(n)]
        out += [f"best_joint_profit.{e}.{side}" for e in ("inner", "outer")]
        out += [f"symmetric_slice.{e}.{side}" for e in ("min_outer", "min_inner", "max_inner", "max_outer")]
    return out


def _payoff_set_metrics(ps: dict) -> dict:
    m = {}
    for side in ("before", "after"):
        x = ps[side]
        ap = x["sets"]
        m[f"any_punishment.threshold.lower.{side}"] = ap["low"]
        m[f"any_punishment.threshold.upper.{side}"] = ap["high"]
        m[f"any_punishment.on_grid.grim.{side}"] = ap["grim"]
        m[f"any_punishment.on_grid.stick_carrot.{side}"] = ap["stick_carrot"]
        for e, k in (("lower", "worst_low"), ("upper", "worst_high")):
            for i, v in enumerate(ap[k]):
                m[f"any_punishment.worst.{e}.{side}.firm{i + 1}"] = v
        m[f"best_joint_profit.inner.{side}"], m[f"best_joint_profit.outer.{side}"] = x["joint"]
        for e, v in zip(("min_outer", "min_inner", "max_inner", "max_outer"), x["symmetric"]):
            m[f"symmetric_slice.{e}.{side}"] = v
    return m


_DIRECTION_CODES = {"easier": -1.0, "unchanged": 0.0, "harder": 1.0}


def _side_metrics(a: Assessment) -> dict:
    m = {}
    for label, side in a.sides():
        th = side.thresholds
        m[f"threshold.grim.{label}"] = th["grim"]["market"]
        for i, x in enumerate(th["grim"]["per_firm"]):
            m[f"threshold.grim.{label}.firm{i + 1}"] = x
        for j, f in enumerate(th["finite"]):
            m[f"threshold.finite[{j + 1}].{label}"] = f["market"]
        m[f"threshold.stick_carrot.{label}"] = th["stick_carrot"]["market"]
    return m


def _partial_metrics(a: Assessment) -> dict:
    m = {}
    Ts, ds = a.settings["punishments"], a.settings["deltas"]
    for label, side in a.sides():
        for q in side.partial_collusion:
            j = ds.index(q["delta"]) + 1
            name = (f"partial_gain.finite[{Ts.index(q['T']) + 1}][{j}]" if q["scheme"] == "finite"
                    else f"partial_gain.{q['scheme']}[{j}]")
            m[f"{name}.{label}"] = q["profit_gain"]
    return m


def assessment_metrics(a: Assessment) -> dict:
    """The flat metrics of an assessment (the columns of ``results.csv``).

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    dict of str to float
        None where a number is not defined (stored as nan).
    """
    c = a.conclusion
    m = {"threshold.before": c["threshold_before"], "threshold.after": c["threshold_after"],
         "threshold.change": c["change"], "direction": _DIRECTION_CODES[c["direction"]],
         "sustainable.before": c["sustainable_before"], "sustainable.after": c["sustainable_after"],
         "binding.before": a.headline(a.before)["binding_firm"], "binding.after": a.headline(a.after)["binding_firm"]}
    m.update(_side_metrics(a))
    mr = a.merger
    m.update({"hhi.before": mr["hhi_pre"], "hhi.after": mr["hhi_post"], "delta_hhi": mr["delta_hhi"],
              "naive_delta_hhi": mr["naive_delta_hhi"], "consumer_surplus.before": mr["consumer_surplus_pre"],
              "consumer_surplus.after": mr["consumer_surplus_post"]})
    for r in mr["price_changes"]:
        m["price_change.market" if r["product"] == "market" else f"price_change.product{r['product']}"] = r["change"]
    m.update(_partial_metrics(a))
    if a.settings["simulate"]:
        for met in ("collusive_share", "first_breakdown"):
            for label, side in a.sides():
                e = side.simulation[met]
                for k, suffix in (("value", ""), ("se", ".se"), ("low", ".low"), ("high", ".high")):
                    m[f"{met}.{label}{suffix}"] = e[k]
        m["persistence.difference"] = c["persistence"]["difference"]
        m["persistence.difference.se"] = c["persistence"]["difference_se"]
    if a.calibration is not None:
        m["calibration.max_relative_residual"] = a.calibration["max_relative_residual"]
    if a.payoff_sets is not None:
        m.update(_payoff_set_metrics(a.payoff_sets.to_dict()))
    contact = next((f for f in a.factors if f["key"] == "contact"), None)
    if contact is not None:
        for what in ("alone", "pooled"):
            for side in ("before", "after"):
                m[f"contact.{what}.{side}"] = contact["values"][side][what]
    return {k: (math.nan if v is None else v) for k, v in m.items()}


def _val(x) -> float:
    return math.nan if x is None else float(x)


def assessment_arrays(a: Assessment) -> dict:
    """The arrays a cell of the kind stores (``arrays.json``): the assessment's document and the sensitivity curves.

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    dict
        ``"assessment"`` -> :meth:`~sim.antitrust.result.Assessment.document`; ``"sensitivity.NAME.values"`` and
        the curves before and after (lists of length n_values) for each sensitivity range.
    """
    arrays = {"assessment": a.document()}
    for name, s in a.sensitivity.items():
        if name == "delta":
            arrays["sensitivity.delta.values"] = s["values"]
            arrays["sensitivity.delta.profit_gain_before"] = [_val(x) for x in s["profit_gain_before"]]
            arrays["sensitivity.delta.profit_gain_after"] = [_val(x) for x in s["profit_gain_after"]]
        elif name == "noise":
            arrays["sensitivity.noise.scales"] = s["scales"]
            arrays["sensitivity.noise.collusive_share_before"] = [_val(x) for x in s["collusive_share_before"]]
            arrays["sensitivity.noise.collusive_share_after"] = [_val(x) for x in s["collusive_share_after"]]
        else:
            arrays[f"sensitivity.{name}.values"] = s["values"]
            arrays[f"sensitivity.{name}.threshold_before"] = [_val(x) for x in s["threshold_before"]]
            arrays[f"sensitivity.{name}.threshold_after"] = [_val(x) for x in s["threshold_after"]]
    return arrays


def _run_cell(p: PreparedAssessment, ctx) -> CellResult:
    a = run_assessment(p, progress=ctx.progress, key=ctx.key, threads=ctx.threads)
    return CellResult(assessment_metrics(a), assessment_arrays(a), result=a)


def describe_cell(doc: dict) -> list[str]:
    """The setup of an assessment's document in words (for the report of a sweep).

    Parameters
    ----------
    doc : dict
        The experiment's tables.

    Returns
    -------
    list of str
    """
    merger = doc.get("merger", {})
    src = "observed data ([data], calibrated)" if "data" in doc else "a given market ([market])"
    mon = doc.get("monitoring", {})
    return [f"Pre-merger market from {src}; demand {doc.get('data', doc.get('market', {})).get('demand', '?')}",
            f"Merging firms: {merger.get('firms')}; efficiency {merger.get('efficiency', 0.0)}",
            f"Monitoring: {mon.get('signal', 'perfect')}, sigma {mon.get('sigma', 0.0)}, perception error "
            f"{mon.get('perception_error', 0.0)}, implementation error {mon.get('implementation_error', 0.0)}"]


KIND = Kind(
    name="assess",
    tables=tuple(t for t in ASSESS_TABLES if t != "experiment"),
    prepare=_prepare_cell,
    run=_run_cell,
    metric_names=_metric_names,
    seed_key="run.seed",
    headline=("threshold.before", "threshold.after", "direction", "collusive_share.before",
              "collusive_share.after"),
    describe=describe_cell,
    summary="coordinated effects of a merger: thresholds, partial collusion and persistence before and after",
    result_type=Assessment,
    cost=assessment_cost,
    assumptions=(
        "The pre-merger market is calibrated to observed data under static Nash conduct (or given); the "
        "post-merger market combines the merging firms' products (differentiated goods) or plants (a "
        "homogeneous good, at the lower marginal cost or a stated efficiency).",
        "Critical discount factors assume perfect monitoring of actions, an infinite horizon and the named "
        "punishment schemes; they say when an agreement can be sustained, not that firms coordinate.",
        "Simulated persistence assumes the firms follow the line-up's strategies under the stated monitoring "
        "noise; after the merger the merged firm plays the strategy of the lowest-numbered merging firm.",
    ),
)
