"""The ``assess`` analysis: the coordinated effects of a merger, as an experiment kind (see
:mod:`sim.runner.kinds`)."""

from __future__ import annotations

import contextlib
import math

from sim.antitrust.assess import (
    ASSESS_TABLES,
    PreparedAssessment,
    assessment_from_dict,
    finite_or_none,
    headline_scheme,
    prepare_assessment,
    run_assessment,
)
from sim.runner.kinds import CellResult, Kind

# --------------------------------------------------------------------------------------------------
# Experiment kind (one cell of ``supergame run``)
# --------------------------------------------------------------------------------------------------


def _prepare_cell(doc: dict) -> PreparedAssessment:
    kw = assessment_from_dict(doc)
    kw.pop("name")
    return prepare_assessment(**kw)


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
    return out


def _direction_code(d: str) -> float:
    return {"easier": -1.0, "unchanged": 0.0, "harder": 1.0}[d]


#: While :func:`keep_assessments` is active: the (cell, Assessment) pairs of the cells run in this process.
_KEPT: list | None = None


@contextlib.contextmanager
def keep_assessments():
    """Keep the full :class:`Assessment` of every cell of the ``assess`` kind run in this process
    within the block (a list of ``(cell, Assessment)``).

    ``supergame assess`` runs its file through :func:`sim.runner.runs.run_experiment` (one cell, run in
    this process) and prints its terminal summary and ``--json`` from the cell's assessment. The
    evidence bundle is not written from it: it is read from the stored cell (``arrays["assessment"]``,
    :meth:`Assessment.to_dict`), as ``supergame report`` reads it.
    """
    global _KEPT
    outer, _KEPT = _KEPT, []
    try:
        yield _KEPT
    finally:
        _KEPT = outer


def _run_cell(p: PreparedAssessment, ctx):

    a = run_assessment(p, progress=ctx.progress, key=ctx.key, threads=ctx.threads)
    if _KEPT is not None:
        _KEPT.append((ctx.index, a))
    c = a.conclusion
    m = {"threshold.before": finite_or_none(c["threshold_before"]),
         "threshold.after": finite_or_none(c["threshold_after"]),
         "threshold.change": c["change"], "direction": _direction_code(c["direction"]),
         "sustainable.before": c["sustainable_before"], "sustainable.after": c["sustainable_after"],
         "binding.before": headline_scheme(a.before, p.opts).binding + 1,
         "binding.after": headline_scheme(a.after, p.opts).binding + 1}
    for side in (a.before, a.after):
        rep = side.report
        m[f"threshold.grim.{side.label}"] = rep.grim.market
        for i, x in enumerate(rep.grim.per_firm):
            m[f"threshold.grim.{side.label}.firm{i + 1}"] = float(x)
        for j, f in enumerate(rep.finite):
            m[f"threshold.finite[{j + 1}].{side.label}"] = f.market
        m[f"threshold.stick_carrot.{side.label}"] = rep.stick_carrot.market
    mr = a.merger
    m.update({"hhi.before": mr.hhi_pre, "hhi.after": mr.hhi_post, "delta_hhi": mr.delta_hhi,
              "naive_delta_hhi": mr.naive_delta_hhi, "consumer_surplus.before": mr.consumer_surplus_pre,
              "consumer_surplus.after": mr.consumer_surplus_post})
    for r in mr.price_changes():
        m["price_change.market" if r["product"] == "market" else f"price_change.product{r['product']}"] = r["change"]
    Ts = p.opts["punishments"]
    for side in (a.before, a.after):
        for q in side.partial:
            j = p.opts["deltas"].index(q.delta) + 1
            name = (f"partial_gain.finite[{Ts.index(q.T) + 1}][{j}]" if q.scheme == "finite"
                    else f"partial_gain.{q.scheme}[{j}]")
            m[f"{name}.{side.label}"] = q.profit_gain
    if p.opts["simulate"]:
        for met in ("collusive_share", "first_breakdown"):
            for side in (a.before, a.after):
                e = side.simulation.metrics[met]
                m[f"{met}.{side.label}"] = e.value
                m[f"{met}.{side.label}.se"] = e.se
                m[f"{met}.{side.label}.low"] = e.low
                m[f"{met}.{side.label}.high"] = e.high
        m["persistence.difference"] = c["persistence"]["difference"]
        m["persistence.difference.se"] = c["persistence"]["difference_se"]
    if a.calibration is not None:
        m["calibration.max_relative_residual"] = a.calibration.max_relative_residual
    # the whole assessment, which its evidence bundle is read from (sim.evidence.assess)
    arrays = {"assessment": a.to_dict()}
    for name, s in a.sensitivity.items():
        if name == "delta":
            arrays["sensitivity.delta.values"] = s["values"]
            arrays["sensitivity.delta.profit_gain_before"] = s["profit_gain_before"]
            arrays["sensitivity.delta.profit_gain_after"] = s["profit_gain_after"]
        elif name == "noise":
            arrays["sensitivity.noise.scales"] = s["scales"]
            arrays["sensitivity.noise.collusive_share_before"] = s["collusive_share_before"]
            arrays["sensitivity.noise.collusive_share_after"] = s["collusive_share_after"]
        else:
            arrays[f"sensitivity.{name}.values"] = s["values"]
            arrays[f"sensitivity.{name}.threshold_before"] = [_val(x) for x in s["threshold_before"]]
            arrays[f"sensitivity.{name}.threshold_after"] = [_val(x) for x in s["threshold_after"]]
    return CellResult({k: (math.nan if v is None else v) for k, v in m.items()}, arrays)


def _val(x) -> float:
    return math.nan if x is None else float(x)


def describe_cell(doc: dict) -> list[str]:
    merger = doc.get("merger", {})
    src = "observed data ([data], calibrated)" if "data" in doc else "a given market ([market])"
    mon = doc.get("monitoring", {})
    return [f"Pre-merger market from {src}; demand {doc.get('data', doc.get('market', {})).get('demand', '?')}",
            f"Merging firms: {merger.get('firms')}; efficiency {merger.get('efficiency', 0.0)}",
            f"Monitoring: {mon.get('signal', 'perfect')}, sigma {mon.get('sigma', 0.0)}, perception error "
            f"{mon.get('perception_error', 0.0)}, implementation error {mon.get('implementation_error', 0.0)}"]



def _make_kind():

    return Kind(
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


KIND = _make_kind()
