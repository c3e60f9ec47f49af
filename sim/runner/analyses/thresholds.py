"""The ``thresholds`` analysis: the stage game and critical discount factors of a market (analytic), as an
experiment kind (see :mod:`sim.runner.kinds`)."""

from __future__ import annotations

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Integer, Real
from sim.core.tables import refuse_unknown
from sim.models.market import market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.runner.analyses.common import GENERAL_ASSUMPTIONS, collusion_of, describe_market, nan_if_none, stage_of
from sim.runner.analyses.thresholds_parts import (
    PART_TABLES,
    describe_parts,
    part_metrics,
    part_names,
    prepare_parts,
)
from sim.runner.cost import Cost
from sim.runner.kinds import CellContext, CellResult, Kind, PartAssumption
from sim.theory.analysis import ThresholdsResult, ThresholdsSpec, thresholds_analysis
from sim.theory.any_punishment import TABLE_KEYS as _AP_KEYS
from sim.theory.any_punishment import check_any_punishment, estimate_any_punishment

_TH_KEYS = ("punishments", "deltas")
#: the longest lists of punishment lengths and discount factors a cell takes (each is a set of solver calls)
MAX_PUNISHMENTS, MAX_DELTAS = 100, 1000
#: seconds of one solver call per firm assumed by the time estimate
SECONDS_PER_CALL = 0.005


def thresholds_cost(cfg: dict) -> Cost:
    """The estimated work of a thresholds cell: solver calls (see :mod:`sim.runner.cost`).

    Parameters
    ----------
    cfg : dict

    Returns
    -------
    Cost
    """
    schemes = len(cfg["punishments"]) + 2
    calls = 3 + schemes + len(cfg["deltas"]) * (schemes * 20 + (1 if cfg["trigger_price"] else 0))
    memory, seconds = 64.0 * cfg["n_firms"] ** 2 * 1000, calls * SECONDS_PER_CALL * cfg["n_firms"]
    ap = cfg.get("any_punishment")
    if ap is not None:
        # the payoff arrays and the sets of the any-punishment part dwarf the schemes: they name the setting
        est = estimate_any_punishment(ap)
        # the largest grid names the setting to lower: the main grid or the finest of the refinement table
        key = "any_punishment.refine" if ap.refine and max(ap.refine) > max(ap.grid) else "any_punishment.grid"
        return Cost(memory + est["bytes"], float(calls + est["sets"]), "solver calls",
                    seconds + est["seconds"], key)
    return Cost(memory, float(calls), "solver calls", seconds, "thresholds.deltas")


def _prepare_thresholds(doc: dict) -> dict:

    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    market = market_from_dict(doc["market"])
    ms = market.spec()
    agreement, actions = collusion_of(doc)
    th = refuse_unknown(doc.get("thresholds", {}), "thresholds", _TH_KEYS)
    Ts = th.get("punishments", [1, 2, 3, 5, 10])
    ds = th.get("deltas", [])
    for key, v in (("thresholds.punishments", Ts), ("thresholds.deltas", ds)):
        if not isinstance(v, list):
            raise InputError(key, f"must be a list, got {v!r}")
    for key, v, most in (("thresholds.punishments", Ts, MAX_PUNISHMENTS), ("thresholds.deltas", ds, MAX_DELTAS)):
        if len(v) > most:
            raise InputError(key, f"lists {len(v)} values, more than {most}; sweep a longer list with [sweep]")
    Ts = [Integer(1, 10_000_000).check(f"thresholds.punishments[{i + 1}]", T) for i, T in enumerate(Ts)]
    ds = [Real(0, 1, closed="neither").check(f"thresholds.deltas[{i + 1}]", d) for i, d in enumerate(ds)]
    mon = monitoring_from_dict(doc.get("monitoring", {})).validated()
    trigger = mon["signal"] == "price" and mon["sigma"] > 0
    if trigger and not ds:
        raise InputError("thresholds.deltas", "the trigger-price equilibrium (monitoring.signal = 'price' with a "
                                              "demand shock) needs at least one discount factor")
    if trigger and not (ms.quantity_setting and ms.homogeneous_good and ms.symmetric):
        raise InputError("monitoring.signal", "the trigger-price equilibrium needs a symmetric homogeneous-good "
                                              "Cournot market; use signal = 'perfect' here")
    if trigger and not ms.demand.provides("price_signal", "price_signal_slope"):
        raise ms.demand.missing("the trigger-price equilibrium", "the price distribution")
    # the stage game checks the agreement (given actions: their number and range) before any work starts
    stage_of(ms, doc["market"], agreement, actions)
    ap = None
    if "any_punishment" in doc:
        table = refuse_unknown(doc["any_punishment"], "any_punishment", _AP_KEYS)
        ap = check_any_punishment(table, market, agreement, actions)
    parts = prepare_parts(doc, market, agreement, ds)
    spec = ThresholdsSpec(market, agreement, actions, tuple(Ts), tuple(ds), mon["noise"] if trigger else None,
                          float(mon["sigma"]), ap, **parts)
    return {"spec": spec, "market": market, "n_firms": ms.n_firms, "agreement": agreement, "actions": actions,
            "punishments": Ts, "deltas": ds, "monitoring": mon, "trigger_price": trigger, "any_punishment": ap}


def _threshold_names(cfg: dict) -> list[str]:
    n = cfg["n_firms"]
    out = ["n_firms"]
    for who in ("collusive", "deviation", "nash"):
        out += [f"profit.{who}.firm{i + 1}" for i in range(n)]
    out += ["threshold.grim", "binding.grim"] + [f"threshold.grim.firm{i + 1}" for i in range(n)]
    for j in range(len(cfg["punishments"])):
        out += [f"punishment[{j + 1}]", f"threshold.finite[{j + 1}]", f"binding.finite[{j + 1}]"]
    out += ["threshold.stick_carrot", "binding.stick_carrot", "punishment_level.stick_carrot"]
    out += [f"threshold.stick_carrot.firm{i + 1}" for i in range(n)]
    for j in range(len(cfg["deltas"])):
        out.append(f"delta[{j + 1}]")
        out += [f"partial_gain.grim[{j + 1}]", f"partial_gain.stick_carrot[{j + 1}]"]
        out += [f"partial_gain.finite[{k + 1}][{j + 1}]" for k in range(len(cfg["punishments"]))]
        if cfg["trigger_price"]:
            out += [f"trigger_price.{x}[{j + 1}]" for x in _TP_FIELDS]
    out += ["tied_firms.grim"] + [f"tied_firms.finite[{j + 1}]" for j in range(len(cfg["punishments"]))]
    out.append("tied_firms.stick_carrot")
    if cfg.get("any_punishment") is not None:
        out += _any_punishment_names(n)
        out += _refinement_names(len(cfg["any_punishment"].refine))
    return out + part_names(cfg)


def _any_punishment_names(n: int) -> list[str]:
    out = [f"any_punishment.grid.firm{i + 1}" for i in range(n)]
    out += ["any_punishment.directions", "any_punishment.threshold.lower", "any_punishment.threshold.upper",
            "any_punishment.on_grid.grim", "any_punishment.on_grid.stick_carrot", "any_punishment.on_grid.two_phase",
            "any_punishment.delta", "any_punishment.sustained", "any_punishment.accuracy"]
    out += [f"any_punishment.worst.lower.firm{i + 1}" for i in range(n)]
    out += [f"any_punishment.worst.upper.firm{i + 1}" for i in range(n)]
    if n >= 3:  # the symmetric slice (two firms: the set is drawn whole, and their columns stay as they were)
        out += [f"any_punishment.symmetric_slice.{e}" for e in _SLICE_ENDS]
    out += ["any_punishment.best_joint.lower", "any_punishment.best_joint.upper"]
    out += [f"any_punishment.best_profit.{end}.firm{i + 1}" for end in ("lower", "upper") for i in range(n)]
    if n == 2:  # three firms or more: the upper ends of the symmetric slice
        out += ["any_punishment.best_equal_profit.lower", "any_punishment.best_equal_profit.upper"]
    return out


def _refinement_names(k: int) -> list[str]:
    return [f"any_punishment.refine.{f}[{j + 1}]" for j in range(k) for f in _REFINE_FIELDS]


#: the columns of each grid of the refinement table
_REFINE_FIELDS = ("actions", "threshold.lower", "threshold.upper", "grim", "stick_carrot", "accuracy")


def _refinement_metrics(ap) -> dict:
    m: dict = {}
    for j, r in enumerate(ap.refinement.rows if ap.refinement is not None else ()):
        vals = (max(r.n_actions), r.threshold[0], r.threshold[1], r.grim, r.stick_carrot, r.accuracy)
        m.update({f"any_punishment.refine.{f}[{j + 1}]": float(v) for f, v in zip(_REFINE_FIELDS, vals)})
    return m


def _any_punishment_metrics(ap, n: int) -> dict:
    m: dict = {f"any_punishment.grid.firm{i + 1}": ap.grid[i] for i in range(n)}
    sustained = {"sustained": 1.0, "refuted": 0.0}.get(ap.verdict, float("nan"))
    m.update({"any_punishment.directions": ap.directions, "any_punishment.threshold.lower": ap.low,
              "any_punishment.threshold.upper": ap.high, "any_punishment.on_grid.grim": ap.grim,
              "any_punishment.on_grid.stick_carrot": ap.stick_carrot,
              "any_punishment.on_grid.two_phase": ap.two_phase, "any_punishment.delta": ap.delta,
              "any_punishment.sustained": sustained, "any_punishment.accuracy": ap.accuracy})
    for i in range(n):
        m[f"any_punishment.worst.lower.firm{i + 1}"] = float(ap.worst_low[i])
    for i in range(n):
        m[f"any_punishment.worst.upper.firm{i + 1}"] = float(ap.worst_high[i])
    if n >= 3:
        m.update({f"any_punishment.symmetric_slice.{e}": float(v) for e, v in zip(_SLICE_ENDS, ap.symmetric)})
    m.update(_frontier_metrics(ap, n))
    m.update(_refinement_metrics(ap))
    return m


def _frontier_metrics(ap, n: int) -> dict:
    """The best joint profit and each firm's best payoff at the set's discount factor (lower end: inner set, upper
    end: outer set); nan for a result stored before they were kept."""
    joint = np.asarray(ap.best_joint, float).reshape(-1)
    best = np.asarray(ap.best_profits, float).reshape(-1, 2)
    if best.shape[0] != n:
        best = np.full((n, 2), np.nan)
    m = {"any_punishment.best_joint.lower": float(joint[0]), "any_punishment.best_joint.upper": float(joint[1])}
    for j, end in enumerate(("lower", "upper")):
        m.update({f"any_punishment.best_profit.{end}.firm{i + 1}": float(best[i, j]) for i in range(n)})
    if n == 2:
        equal = np.asarray(ap.best_equal, float).reshape(-1)
        m["any_punishment.best_equal_profit.lower"], m["any_punishment.best_equal_profit.upper"] = map(float, equal)
    return m


#: the ends of the symmetric slice, in the order of ``AnyPunishmentResult.symmetric``
_SLICE_ENDS = ("min_outer", "min_inner", "max_inner", "max_outer")


_TP_FIELDS = ("quantity", "trigger", "war_length", "war_probability", "expected_collusive_spell", "war_share",
              "value", "nash_value")




def _run_thresholds(cfg: dict, ctx: CellContext) -> CellResult:
    res = thresholds_analysis(cfg["spec"])
    return CellResult(threshold_metrics(res), result=res)


def threshold_metrics(res: ThresholdsResult) -> dict:
    """The flat metrics of a thresholds result (the columns of ``results.csv``).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    dict of str to float
    """
    rep = res.report
    n = res.n_firms
    m: dict = {"n_firms": n}
    for who in ("collusive", "deviation", "nash"):
        for i in range(n):
            m[f"profit.{who}.firm{i + 1}"] = float(rep["profits"][who][i])
    th = rep["thresholds"]
    m["threshold.grim"] = nan_if_none(th["grim"]["market"])
    m["binding.grim"] = th["grim"]["binding_firm"]
    for i in range(n):
        m[f"threshold.grim.firm{i + 1}"] = nan_if_none(th["grim"]["per_firm"][i])
    for j, f in enumerate(th["finite"]):
        m[f"punishment[{j + 1}]"] = f["T"]
        m[f"threshold.finite[{j + 1}]"] = nan_if_none(f["market"])
        m[f"binding.finite[{j + 1}]"] = f["binding_firm"]
    sc = th["stick_carrot"]
    m["threshold.stick_carrot"] = nan_if_none(sc["market"])
    m["binding.stick_carrot"] = sc["binding_firm"]
    m["punishment_level.stick_carrot"] = nan_if_none(sc["punishment_action"])
    for i in range(n):
        m[f"threshold.stick_carrot.firm{i + 1}"] = nan_if_none(sc["per_firm"][i])
    by_delta: dict = {}
    for p in rep["partial_collusion"]:
        by_delta.setdefault(p["delta"], []).append(p)
    for j, d in enumerate(res.deltas):
        m[f"delta[{j + 1}]"] = d
        fin = 0
        for p in by_delta.get(d, []):
            if p["scheme"] == "finite":
                fin += 1
                m[f"partial_gain.finite[{fin}][{j + 1}]"] = nan_if_none(p["profit_gain"])
            else:
                m[f"partial_gain.{p['scheme']}[{j + 1}]"] = nan_if_none(p["profit_gain"])
    for j, s in enumerate(res.trigger_price or ()):
        vals = {"quantity": s["quantity"], "trigger": s["trigger"], "war_length": s["T"],
                "war_probability": s["war_probability"], "expected_collusive_spell": s["expected_collusive_spell"],
                "war_share": s["war_share"], "value": s["value"], "nash_value": s["nash_value"]}
        for x in _TP_FIELDS:
            m[f"trigger_price.{x}[{j + 1}]"] = nan_if_none(vals[x])
    if res.any_punishment is not None:
        m.update(_any_punishment_metrics(res.any_punishment, n))
    m.update(_tie_metrics(th))
    m.update(part_metrics(res))
    return m


def _tie_metrics(th: dict) -> dict:
    """How many firms bind equally per scheme (:data:`sim.theory.verdicts.TIE_RTOL`); nan when the result predates
    the count or the scheme is not sustainable."""
    def count(s):
        return float(len(s["tied_firms"])) if s.get("tied_firms") and s["market"] is not None else float("nan")

    m = {"tied_firms.grim": count(th["grim"])}
    for j, f in enumerate(th["finite"]):
        m[f"tied_firms.finite[{j + 1}]"] = count(f)
    m["tied_firms.stick_carrot"] = count(th["stick_carrot"])
    return m


def _describe_thresholds(doc: dict) -> list[str]:
    coll = doc.get("collusion", {})
    th = doc.get("thresholds", {})
    return [f"Market: {describe_market(doc.get('market', {}))}",
            f"Agreement: {coll.get('agreement', 'given' if 'actions' in coll else 'joint')}",
            f"Punishment lengths T of Nash reversion: {th.get('punishments', [1, 2, 3, 5, 10])}",
            f"Discount factors for partial collusion: {th.get('deltas', [])}"] + (
        [f"Any punishment: {doc['any_punishment']}"] if "any_punishment" in doc else []) + describe_parts(doc)


KIND = Kind(
    name="thresholds",
    tables=("market", "collusion", "thresholds", "monitoring", "any_punishment") + PART_TABLES,
    prepare=_prepare_thresholds,
    run=_run_thresholds,
    metric_names=_threshold_names,
    cost=thresholds_cost,
    result_type=ThresholdsResult,
    seed_key=None,
    headline=("threshold.grim", "threshold.stick_carrot", "threshold.finite[1]"),
    describe=_describe_thresholds,
    summary="stage game and critical discount factors of a market (analytic)",
    assumptions=GENERAL_ASSUMPTIONS + (
        "Critical discount factors assume perfect monitoring of actions, an infinite horizon and punishments by "
        "static Nash reversion (forever or for T periods) or the optimal symmetric two-phase punishment (Abreu, "
        "1986); they are the lowest discount factors at which the agreement is a subgame-perfect equilibrium of "
        "the repeated game, not predictions that collusion occurs.",
        PartAssumption("Partial collusion is searched along the straight path from the static Nash actions to the "
                       "agreement.", "partial_gain."),
        PartAssumption("The trigger-price equilibrium (Green and Porter, 1984) assumes a symmetric homogeneous-good "
                       "Cournot market with an i.i.d. multiplicative demand shock and a public price signal.",
                       "trigger_price."),
        PartAssumption(
            "The any-punishment threshold (an [any_punishment] table) is computed on a finite action grid with pure "
            "strategies, perfect monitoring and public randomisation: the lowest discount factor at which the "
            "agreement is a subgame-perfect equilibrium outcome when deviations meet the deviator's worst "
            "equilibrium payoff (Abreu, 1988), bracketed between inner and outer equilibrium payoff sets (Abreu, "
            "Pearce and Stacchetti, 1990; Judd, Yeltekin and Conklin, 2003; Abreu and Sannikov, 2014).",
            "any_punishment."),
    ),
)
