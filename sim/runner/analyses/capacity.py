"""The ``capacity`` analysis: price competition with capacity constraints (static equilibrium, agreement, deviations,
minmax, critical discount factors) and, with a ``[merger]``, the merger's effect, as an experiment kind (see
:mod:`sim.runner.kinds`)."""

from __future__ import annotations

import math

from sim.antitrust.capacity_assess import CAPACITY_TABLES, CapacityResult, prepare_capacity, run_capacity
from sim.runner.cost import Cost
from sim.runner.kinds import CellContext, CellResult, Kind

__all__ = ["KIND", "capacity_metrics"]

#: seconds of the numeric static equilibrium per firm and side assumed by the time estimate
SECONDS_PER_FIRM = 1.0


def _prepare(doc: dict) -> dict:
    p = prepare_capacity(doc)
    n = p.market.spec().n_firms
    return {"prepared": p, "n_firms": n, "merger": p.plan is not None}


def _cost(cfg: dict) -> Cost:
    n = cfg["n_firms"]
    p = cfg["prepared"]
    sides = 2 if cfg["merger"] else 1
    evals = 0 if p.sensitivity is None else p.sensitivity["n_base"] * (len(p.sensitivity["inputs"]) + 2) * 2
    work = sides * n * SECONDS_PER_FIRM + evals * 1e-3
    return Cost(64.0 * 3 ** (n - 1) * 81 * n + 1e6, float(sides + evals), "static equilibria and threshold evaluations",
                work, "market.capacity")


def _names(cfg: dict) -> list[str]:
    n = cfg["n_firms"]
    out = ["n_firms"] + [f"capacity.firm{i + 1}" for i in range(n)]
    for who in ("collusive", "deviation", "nash", "minmax"):
        out += [f"profit.{who}.firm{i + 1}" for i in range(n)]
    out += ["static_mixed", "threshold.grim", "binding.grim", *(f"threshold.grim.firm{i + 1}" for i in range(n)),
            "threshold.minmax", "binding.minmax", *(f"threshold.minmax.firm{i + 1}" for i in range(n)),
            "capacity_share.largest", "spare_capacity", "rivals_cover"]
    if cfg["merger"]:
        for m in ("threshold.grim", "threshold.minmax", "binding.minmax", "capacity_share.largest", "rivals_cover",
                  "hhi"):
            out += [f"{m}.before", f"{m}.after"]
        out += ["threshold.grim.change", "threshold.minmax.change", "binding_changed", "naive_delta_hhi",
                "eu_safe_harbour", "us_presumption"]
    return out


def _num(x) -> float:
    return math.nan if x is None or not math.isfinite(float(x)) else float(x)


def capacity_metrics(res: CapacityResult) -> dict:
    """The flat metrics of a capacity result (the columns of ``results.csv``).

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    dict of str to float
    """
    th = res.thresholds
    c = th.collusion
    n = th.n_firms
    m: dict = {"n_firms": n}
    per = {"collusive": c.agreement.profits, "deviation": c.deviation_profits, "nash": c.nash_profits,
           "minmax": c.minmax_profits}
    for i in range(n):
        m[f"capacity.firm{i + 1}"] = float(c.capacity[i])
    for who, v in per.items():
        for i in range(n):
            m[f"profit.{who}.firm{i + 1}"] = float(v[i])
    m["static_mixed"] = float(th.equilibrium.kind == "mixed")
    for scheme, vals, market, binding in (("grim", c.grim, c.grim_market, c.grim_binding),
                                          ("minmax", c.harshest, c.harshest_market, c.harshest_binding)):
        m[f"threshold.{scheme}"] = _num(market)
        m[f"binding.{scheme}"] = binding + 1
        for i in range(n):
            m[f"threshold.{scheme}.firm{i + 1}"] = _num(vals[i])
    m["capacity_share.largest"] = th.symmetry["largest_share"]
    m["spare_capacity"] = th.spare_capacity
    m["rivals_cover"] = th.symmetry["rivals_cover"]
    mg = res.merger
    if mg is not None:
        for side, t in (("before", mg.before), ("after", mg.after)):
            m[f"threshold.grim.{side}"] = _num(t.collusion.grim_market)
            m[f"threshold.minmax.{side}"] = _num(t.collusion.harshest_market)
            m[f"binding.minmax.{side}"] = t.collusion.harshest_binding + 1
            m[f"capacity_share.largest.{side}"] = t.symmetry["largest_share"]
            m[f"rivals_cover.{side}"] = t.symmetry["rivals_cover"]
        m["hhi.before"], m["hhi.after"] = mg.concentration.hhi_pre, mg.concentration.hhi_post
        m["threshold.grim.change"] = _num(mg.change.grim_change)
        m["threshold.minmax.change"] = _num(mg.harshest_change)
        m["binding_changed"] = float(mg.harshest_binding_before != mg.harshest_binding_after)
        m["naive_delta_hhi"] = mg.concentration.change
        m["eu_safe_harbour"] = float(mg.concentration.eu_safe_harbour)
        m["us_presumption"] = float(mg.concentration.us_presumption)
    return m


def _run(cfg: dict, ctx: CellContext) -> CellResult:
    res = run_capacity(cfg["prepared"])
    return CellResult(capacity_metrics(res), result=res)


def _describe(doc: dict) -> list[str]:
    mk = doc.get("market", {})
    lines = [f"Market: price competition with capacities {mk.get('capacity')}, {mk.get('demand', 'inelastic')} demand "
             f"(reservation price {mk.get('reservation_price')}, market size {mk.get('market_size')}), cost "
             f"{mk.get('cost', 0)}, {mk.get('rationing', 'efficient')} rationing",
             f"Agreement: {doc.get('collusion', {}).get('agreement', 'proportional')}"]
    if "merger" in doc:
        lines.append(f"Merger: {doc['merger'].get('firms')}; capacity moves: "
                     f"{len(doc['merger'].get('capacity_moves', []))}")
    return lines


KIND = Kind(
    name="capacity",
    tables=CAPACITY_TABLES,
    prepare=_prepare,
    run=_run,
    metric_names=_names,
    cost=_cost,
    result_type=CapacityResult,
    seed_key=None,
    headline=("threshold.minmax", "threshold.grim", "binding.minmax"),
    describe=_describe,
    summary="price competition with capacity constraints: static equilibrium, critical discount factors, mergers",
    assumptions=(
        "A homogeneous good; firms set prices each period, each selling up to its capacity; buyers go to the cheapest "
        "firm first (efficient rationing unless the file says proportional); a common constant marginal cost.",
        "Critical discount factors assume perfect monitoring of prices and an infinite horizon; punishments are Nash "
        "reversion forever (Friedman, 1971) or the harshest punishment, each firm held to its minmax payoff (a lower "
        "bound of every punishment; Abreu, 1988; Lambson, 1987).",
        "The agreement splits the demand at the agreed price in proportion to capacities unless the file says "
        "otherwise (Compte, Jenny and Rey, 2002).",
        "The concentration screens are computed on capacity shares, which equal sales shares under the "
        "proportional agreement; the guidelines' screens are indicators, not findings.",
    ),
)
