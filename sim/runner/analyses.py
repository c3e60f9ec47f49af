"""The built-in experiment kinds: ``thresholds``, ``simulate`` and ``learn`` (see :mod:`sim.runner.kinds`).

Each adapter validates a cell's tables with the component's own validators (``market_from_dict``, the
engine's line-up, monitoring and run checks, the learner's spec and ``supergame learn``'s table
reader) and runs the cell through the component's public API, returning flat metrics.

``simulate`` adds one table of its own, ``[deviation]``: a simulated incentive check. Seat ``firm``
(default: the firm that binds under grim trigger) is replaced by a one-shot deviator -- its own
strategy, except that it plays its best one-shot deviation in the first period and then follows the
strategy (its own deviation included in what it observes) -- and the line-up is simulated again with
the same seeds. The paired difference of the seat's discounted profits is the gain from deviating
under the experiment's monitoring and noise, with its confidence interval; collusion is an
equilibrium of the simulated game only if no such deviation pays (one-shot deviation principle,
e.g. Mailath and Samuelson, 2006, "Repeated Games and Reputations", section 2.2). Without noise and
with a fixed horizon, the gain of grim trigger and of T-period Nash reversion has the closed form
reported as ``analytic.deviation.gain`` (Friedman, 1971).
"""

from __future__ import annotations

import copy
import math
from collections import OrderedDict

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real
from sim.core.tables import refuse_unknown
from sim.runner.kinds import CellContext, CellResult, Kind

__all__ = ["LEARN", "SIMULATE", "THRESHOLDS"]

_GENERAL_ASSUMPTIONS = (
    "Firms interact repeatedly in the stage game derived from the stated demand system, constant marginal "
    "costs and mode of competition (Cournot quantities or Bertrand prices); the collusive outcome is the stated "
    "agreement rule, not an estimate of actual conduct.",
    "Discount factors are common to all firms and constant over time; results are conditional on the parameter "
    "values in the experiment file and its sweep.",
)


def _describe_market(table: dict) -> str:
    t = dict(table or {})
    model = str(t.pop("model", "cournot")).capitalize()
    demand = t.pop("demand", "linear")
    cost = t.pop("cost", None)
    n = t.pop("n_firms", None)
    params = ", ".join(f"{k} {v}" for k, v in t.items())
    firms = f", {n} firms" if n is not None else (f", {len(cost)} firms" if isinstance(cost, list) else "")
    return f"{model} competition, {demand} demand ({params}), marginal cost {cost}{firms}"


def _estimate(out: dict, name: str, e) -> None:
    out[name] = e.value
    out[f"{name}.se"] = e.se
    out[f"{name}.low"] = e.low
    out[f"{name}.high"] = e.high


def _thin(x, max_points: int = 200) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    if n == 0:
        return np.zeros(0), np.zeros(0)
    idx = np.unique(np.round(np.linspace(0, n - 1, min(n, max_points))).astype(int))
    return (idx + 1).astype(float), x[idx]


# ==================================================================================================
# thresholds
# ==================================================================================================

_TH_KEYS = ("punishments", "deltas")
_COLL_KEYS = ("agreement", "actions")
_AGREEMENTS = Options("joint", "symmetric", "proportional", "given")


def _collusion(doc: dict) -> tuple[str, list | None]:
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", _COLL_KEYS)
    actions = coll.get("actions")
    agreement = _AGREEMENTS.check("collusion.agreement", coll.get("agreement", "given" if actions else "joint"))
    if actions is not None:
        if not isinstance(actions, list) or not actions:
            raise InputError("collusion.actions", f"must be a list of numbers (one per product), got {actions!r}")
        agreement = "given"
    elif agreement == "given":
        raise InputError("collusion.actions", "missing: agreement = 'given' needs the agreed actions")
    return agreement, actions


def _prepare_thresholds(doc: dict) -> dict:
    from sim.models.market import market_from_dict
    from sim.models.monitoring import monitoring_from_dict

    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    market = market_from_dict(doc["market"])
    ms = market.spec()
    agreement, actions = _collusion(doc)
    th = refuse_unknown(doc.get("thresholds", {}), "thresholds", _TH_KEYS)
    Ts = th.get("punishments", [1, 2, 3, 5, 10])
    ds = th.get("deltas", [])
    for key, v in (("thresholds.punishments", Ts), ("thresholds.deltas", ds)):
        if not isinstance(v, list):
            raise InputError(key, f"must be a list, got {v!r}")
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
    # the stage game checks the agreement (given actions: their number and range) before any work starts
    _stage(ms, doc["market"], agreement, actions)
    return {"market": market, "n_firms": ms.n_firms, "agreement": agreement, "actions": actions, "punishments": Ts,
            "deltas": ds, "monitoring": mon, "trigger_price": trigger}


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
    return out


_TP_FIELDS = ("quantity", "trigger", "war_length", "war_probability", "expected_collusive_spell", "war_share",
              "value", "nash_value")


def _nan(x) -> float:
    return math.nan if x is None else float(x)


def _run_thresholds(cfg: dict, ctx: CellContext) -> CellResult:
    from sim.theory.thresholds import critical_discount_factors

    rep = critical_discount_factors(cfg["market"], punishments=cfg["punishments"], deltas=cfg["deltas"],
                                    agreement=cfg["agreement"], actions=cfg["actions"])
    st = rep.stage
    n = cfg["n_firms"]
    m: dict = {"n_firms": n}
    for who, vals in (("collusive", st.collusive.firm_profits), ("deviation", st.deviation_profits),
                      ("nash", st.nash.firm_profits)):
        for i in range(n):
            m[f"profit.{who}.firm{i + 1}"] = float(vals[i])
    m["threshold.grim"] = rep.grim.market
    m["binding.grim"] = rep.grim.binding + 1
    for i in range(n):
        m[f"threshold.grim.firm{i + 1}"] = float(rep.grim.per_firm[i])
    for j, f in enumerate(rep.finite):
        m[f"punishment[{j + 1}]"] = f.T
        m[f"threshold.finite[{j + 1}]"] = f.market
        m[f"binding.finite[{j + 1}]"] = f.binding + 1
    sc = rep.stick_carrot
    m["threshold.stick_carrot"] = sc.market
    m["binding.stick_carrot"] = sc.binding + 1
    m["punishment_level.stick_carrot"] = sc.punishment_level
    for i in range(n):
        m[f"threshold.stick_carrot.firm{i + 1}"] = float(sc.per_firm[i])
    by_delta: dict = {}
    for p in rep.partial:
        by_delta.setdefault(p.delta, []).append(p)
    for j, d in enumerate(cfg["deltas"]):
        m[f"delta[{j + 1}]"] = d
        fin = 0
        for p in by_delta.get(d, []):
            if p.scheme == "finite":
                fin += 1
                m[f"partial_gain.finite[{fin}][{j + 1}]"] = p.profit_gain
            else:
                m[f"partial_gain.{p.scheme}[{j + 1}]"] = p.profit_gain
    if cfg["trigger_price"]:
        from sim.theory.trigger_price import trigger_price_equilibrium

        mon = cfg["monitoring"]
        for j, d in enumerate(cfg["deltas"]):
            s = trigger_price_equilibrium(cfg["market"], d, mon["noise"], mon["sigma"])
            vals = {"quantity": s.quantity, "trigger": s.trigger, "war_length": _nan(s.T),
                    "war_probability": s.war_probability, "expected_collusive_spell": s.expected_collusive_spell,
                    "war_share": s.war_share, "value": s.value, "nash_value": s.nash_value}
            for x in _TP_FIELDS:
                m[f"trigger_price.{x}[{j + 1}]"] = vals[x]
    return CellResult({k: _nan(v) if v is None else v for k, v in m.items()})


def _describe_thresholds(doc: dict) -> list[str]:
    coll = doc.get("collusion", {})
    th = doc.get("thresholds", {})
    return [f"Market: {_describe_market(doc.get('market', {}))}",
            f"Agreement: {coll.get('agreement', 'given' if 'actions' in coll else 'joint')}",
            f"Punishment lengths T of Nash reversion: {th.get('punishments', [1, 2, 3, 5, 10])}",
            f"Discount factors for partial collusion: {th.get('deltas', [])}"]


THRESHOLDS = Kind(
    name="thresholds",
    tables=("market", "collusion", "thresholds", "monitoring"),
    prepare=_prepare_thresholds,
    run=_run_thresholds,
    metric_names=_threshold_names,
    seed_key=None,
    headline=("threshold.grim", "threshold.stick_carrot", "threshold.finite[1]"),
    describe=_describe_thresholds,
    summary="stage game and critical discount factors of a market (analytic)",
    assumptions=_GENERAL_ASSUMPTIONS + (
        "Critical discount factors assume perfect monitoring of actions, an infinite horizon and punishments by "
        "static Nash reversion (forever or for T periods) or the optimal symmetric two-phase punishment (Abreu, "
        "1986); they are the lowest discount factors at which the agreement is a subgame-perfect equilibrium of "
        "the repeated game, not predictions that collusion occurs.",
        "Partial collusion is searched along the straight path from the static Nash actions to the agreement.",
        "The trigger-price equilibrium (Green and Porter, 1984) assumes a symmetric homogeneous-good Cournot market "
        "with an i.i.d. multiplicative demand shock and a public price signal.",
    ),
)


# ==================================================================================================
# simulate
# ==================================================================================================

_DEV_KEYS = ("firm", "strategy")
#: the persistence metrics of :func:`sim.simulation.results.summarize`, in its order, and the mean length of a
#: punishment phase (``SimulationResult.punishment_length``) after the price wars
SIM_METRICS = ("collusive_share", "war_share", "wars_per_replication", "war_frequency", "spell_length", "war_length",
               "punishment_length", "first_breakdown", "broken_down", "price", "overcharge", "consumer_surplus",
               "joint_profit", "profit_gain")
_FIRM_METRICS = ("profit", "discounted_profit", "profit_gain")
_ANALYTIC = ("collusive_share", "war_share", "spell_length", "war_length", "punishment_length", "first_breakdown")
_STAGE_CACHE: OrderedDict = OrderedDict()
_STAGE_CACHE_SIZE = 32


def _stage(ms, market_table: dict, agreement: str, actions):
    """Stage game and levels of a market, solved once per process for each (market, agreement)."""
    from sim.runner.experiment import canonical_json
    from sim.simulation.engine import stage_levels

    key = canonical_json([market_table, agreement, actions])
    hit = _STAGE_CACHE.get(key)
    if hit is not None:
        _STAGE_CACHE.move_to_end(key)
        return hit
    out = stage_levels(ms, agreement, actions)
    _STAGE_CACHE[key] = out
    if len(_STAGE_CACHE) > _STAGE_CACHE_SIZE:
        _STAGE_CACHE.popitem(last=False)
    return out


def _level_data(level):
    return list(level) if isinstance(level, tuple) else level


def one_shot_deviator(strategy, levels, seat: int, prefix: str = "deviation"):
    """The seat's own automaton with its best one-shot deviation played in the first period.

    A copy of the initial state, which cheats with probability one, becomes the initial state; its
    transitions are those of the original initial state, so after period 0 the deviator follows its
    strategy (reacting to its own deviation like any other). Strategies that already cheat at random
    are refused (give ``deviation.strategy`` instead).
    """
    from strategies import TableAutomaton
    from strategies.base import FirmContext

    t = strategy.table(f"strategies[{seat + 1}]", FirmContext(levels, seat))
    names = [r.name for r in t.rows]
    if any(r.cheat > 0 for r in t.rows):
        raise InputError(f"{prefix}.firm", f"firm {seat + 1} plays {strategy.name}, which already cheats; give the "
                                           f"deviating strategy as [deviation.strategy]")
    states = {}
    for r in t.rows:
        st = {"action": _level_data(r.action), "watch": r.watch, "good": names[r.good], "bad": names[r.bad],
              "collusive": bool(r.collusive)}
        if r.watch in ("all", "rivals"):
            st["expect"] = _level_data(r.expect)
            st["judge"] = r.judge
        if r.watch in ("price", "profit"):
            st["threshold"] = r.threshold
        if r.forgive > 0:
            st["forgive"] = r.forgive
            st["forgive_to"] = names[r.forgive_to]
        if r.lapse > 0:
            st["lapse"] = r.lapse
            st["lapse_to"] = names[r.lapse_to]
        states[r.name] = st
    first = "deviate"
    while first in states:
        first += "_"
    dev = dict(states[names[t.initial]])
    dev["cheat"] = 1.0
    return TableAutomaton(states={first: dev, **states}, initial=first, cheat_action=_level_data(t.cheat_level),
                          start=0)


def _prepare_simulate(doc: dict) -> dict:
    from sim.models.stagecore import market_owner
    from sim.simulation.engine import check_run, compile_game, simulation_from_dict
    from strategies import strategy_from_dict
    from strategies.registry import lineup_from_tables

    sub = {k: v for k, v in doc.items() if k != "deviation"}
    cfg = simulation_from_dict(sub, check_tables=True)
    ms = cfg["market"].spec()
    agreement, actions = _collusion(doc)
    lineup = lineup_from_tables(cfg["strategies"], ms.n_firms, "strategies")
    P = int(market_owner(ms).shape[0])
    r = cfg["run"]
    run = check_run(r["periods"], r["replications"], r["delta"], r["seed"], r["horizon"], r["continuation"],
                    r["paths"], P)
    stage, levels = _stage(ms, doc["market"], agreement, actions)
    game = compile_game(stage, levels, lineup, cfg["monitoring"])
    out = {"market": cfg["market"], "market_table": doc["market"], "spec": ms, "agreement": agreement,
           "actions": actions, "lineup": lineup, "monitoring": cfg["monitoring"], "run": run, "game": game,
           "deviation": None}
    if "deviation" in doc:
        dt = refuse_unknown(doc["deviation"], "deviation", _DEV_KEYS)
        firm = dt.get("firm", "binding")
        if firm == "binding":
            from sim.theory.thresholds import grim_threshold

            fp = levels.firm_profits
            per = np.nan_to_num(grim_threshold(fp["collusive"], fp["deviation"], fp["nash"]), nan=np.inf)
            seat = int(np.argmax(per))
        else:
            seat = Integer(1, ms.n_firms).check("deviation.firm", firm) - 1 if not isinstance(firm, str) else None
            if seat is None:
                raise InputError("deviation.firm", f"must be 'binding' or a firm number in [1, {ms.n_firms}], got "
                                                   f"{firm!r}")
        if "strategy" in dt:
            deviator = strategy_from_dict(dt["strategy"], "deviation.strategy")
        else:
            deviator = one_shot_deviator(lineup[seat], levels, seat)
        dev_lineup = [s.clone() for s in lineup]
        dev_lineup[seat] = deviator
        dev_game = compile_game(stage, levels, dev_lineup, cfg["monitoring"], strict=False)
        out["deviation"] = {"seat": seat, "game": dev_game, "custom": "strategy" in dt}
    return out


def _simulate_names(cfg: dict) -> list[str]:
    n = cfg["spec"].n_firms
    out = []
    for m in SIM_METRICS:
        out += [m, f"{m}.se", f"{m}.low", f"{m}.high"]
    for m in _FIRM_METRICS:
        for i in range(n):
            out += [f"{m}.firm{i + 1}", f"{m}.firm{i + 1}.low", f"{m}.firm{i + 1}.high"]
    out += ["nash_price", "collusive_price"]
    out += [f"analytic.{m}" for m in _ANALYTIC]
    out += ["analytic.critical_delta", "analytic.effective_delta", "analytic.clears"]
    out += [f"analytic.critical_delta.{s}" for s in _schemes(cfg)]
    out += ["analytic.war_probability", "analytic.war_share_long_run", "analytic.equilibrium"]
    if cfg["deviation"] is not None:
        out += ["deviation.firm", "deviation.gain", "deviation.gain.se", "deviation.gain.low", "deviation.gain.high",
                "deviation.pays", "deviation.conform_value", "deviation.deviate_value", "analytic.deviation.gain"]
    return out


def _scheme_key(entry: dict) -> str:
    s = entry["scheme"]
    if s.startswith("Nash reversion"):
        return "finite_T" + s.split("T=")[1]
    return {"grim trigger": "grim", "stick and carrot": "stick_carrot"}.get(s, s.replace(" ", "_"))


def _schemes(cfg: dict) -> list[str]:
    """Keys of the punishment schemes the line-up plays, by the analytic baseline's own reading of the
    strategies (an opportunist that never punishes plays none)."""
    from sim.simulation.baseline import _scheme_of

    keys = set()
    for s in cfg["lineup"]:
        sch = _scheme_of(s)
        if sch is None:
            continue
        kind, T = sch
        keys.add(f"finite_T{T}" if kind == "finite" else kind)
    return sorted(keys)


def _analytic_gain(cfg: dict, seat: int) -> float:
    """Closed-form gain of the one-shot deviation against grim trigger or T-period Nash reversion, without
    noise, over the fixed horizon: ``(pi_d - pi_c) - sum_{t=1}^{min(T, H-1)} delta^t (pi_c - pi_N)``."""
    from strategies.automata import FinitePunishment, GrimTrigger

    dev = cfg["deviation"]
    mon = cfg["game"].monitoring
    run = cfg["run"]
    if dev["custom"] or run["horizon"] != "fixed" or mon["sigma"] > 0 or mon["perception_error"] > 0 or \
            mon["implementation_error"] > 0:
        return math.nan
    lineup = cfg["lineup"]
    first = lineup[0]
    if not all(type(s) is type(first) and s.get_params() == first.get_params() for s in lineup):
        return math.nan
    if isinstance(first, GrimTrigger):
        T = run["periods"] - 1
    elif isinstance(first, FinitePunishment):
        T = min(int(first.length), run["periods"] - 1)
    else:
        return math.nan
    if first.collude != "collusive" or first.punish != "nash":
        return math.nan
    fp = cfg["game"].levels.firm_profits
    c, d, nsh = (float(fp[k][seat]) for k in ("collusive", "deviation", "nash"))
    delta = run["delta"]
    loss = sum(delta**t for t in range(1, T + 1)) * (c - nsh)
    return (d - c) - loss


def _run_simulate(cfg: dict, ctx: CellContext) -> CellResult:
    from sim.simulation.engine import run_game
    from sim.simulation.results import mean_estimate, summarize

    run = cfg["run"]
    game = cfg["game"]

    def play(g):
        return run_game(g, run["periods"], run["replications"], run["delta"], run["seed"], ctx.key, run["horizon"],
                        run["continuation"], 0, ctx.threads, ctx.progress)

    raw = play(game)
    res = summarize(raw, game, {**run, "paths": 0}, confidence=0.95, baseline=True)
    m: dict = {}
    for k in SIM_METRICS:
        _estimate(m, k, res.punishment_length if k == "punishment_length" else res.metrics[k])
    for k in _FIRM_METRICS:
        for i, e in enumerate(res.firm_metrics[k]):
            m[f"{k}.firm{i + 1}"] = e.value
            m[f"{k}.firm{i + 1}.low"] = e.low
            m[f"{k}.firm{i + 1}.high"] = e.high
    m["nash_price"] = res.reference["nash_price"]
    m["collusive_price"] = res.reference["collusive_price"]
    b = res.baseline
    tp, fb = b.get("trigger_price"), b.get("first_breakdown")
    a = dict.fromkeys(_ANALYTIC, math.nan)
    if b.get("collusive_share") is not None:
        a["collusive_share"] = b["collusive_share"]
        a["war_share"] = 1.0 - b["collusive_share"]
    if tp is not None:
        a["war_share"] = tp["war_share"]
        a["spell_length"] = tp["expected_collusive_spell"]
        a["war_length"] = _nan(tp["war_length"])
        a["first_breakdown"] = tp["expected_first_breakdown"]
    if b.get("punishment_length") is not None:
        a["punishment_length"] = b["punishment_length"]["value"]
    if fb is not None:
        a["first_breakdown"] = fb["expected_within_horizon"] if fb["expected_within_horizon"] is not None \
            else fb["expected"]
    for k, v in a.items():
        m[f"analytic.{k}"] = v
    th = b.get("thresholds") or []
    crit = {_scheme_key(t): _nan(t["market"]) for t in th}
    for s in _schemes(cfg):
        m[f"analytic.critical_delta.{s}"] = crit.get(s, math.nan)
    vals = list(crit.values())
    m["analytic.critical_delta"] = max(vals) if vals and all(math.isfinite(v) for v in vals) else math.nan
    m["analytic.effective_delta"] = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    m["analytic.clears"] = float(all(t["clears"] for t in th)) if th else math.nan
    m["analytic.war_probability"] = tp["war_probability"] if tp else math.nan
    m["analytic.war_share_long_run"] = tp["war_share_long_run"] if tp else math.nan
    m["analytic.equilibrium"] = float(tp["equilibrium"]) if tp else math.nan
    arrays = {}
    t, share = _thin(res.collusive_by_period)
    arrays["period"] = t
    arrays["collusive_by_period"] = share
    if b.get("collusive_by_period") is not None:
        arrays["analytic.collusive_by_period"] = _thin(b["collusive_by_period"])[1]
    dev = cfg["deviation"]
    if dev is not None:
        k = dev["seat"]
        raw_d = play(dev["game"])
        gain = mean_estimate(raw_d.disc[:, k] - raw.disc[:, k])
        m["deviation.firm"] = k + 1
        _estimate(m, "deviation.gain", gain)
        m["deviation.pays"] = float(gain.value > 0)
        m["deviation.conform_value"] = float(raw.disc[:, k].mean())
        m["deviation.deviate_value"] = float(raw_d.disc[:, k].mean())
        m["analytic.deviation.gain"] = _analytic_gain(cfg, k)
    return CellResult(m, arrays)


def _describe_simulate(doc: dict) -> list[str]:
    from sim.runner.experiment import value_label

    run = {"periods": 1000, "replications": 1000, "horizon": "fixed", "delta": 0.95, "seed": 0, **doc.get("run", {})}
    mon = {"signal": "perfect", "noise": "lognormal", "sigma": 0.0, "perception_error": 0.0,
           "implementation_error": 0.0, **doc.get("monitoring", {})}
    coll = doc.get("collusion", {})
    seats = "; ".join(value_label(e) + (f" x {e['seats']}" if "seats" in e else "")
                      for e in doc.get("strategies", []) if isinstance(e, dict))
    lines = [f"Market: {_describe_market(doc.get('market', {}))}",
             f"Agreement: {coll.get('agreement', 'given' if 'actions' in coll else 'joint')}",
             f"Line-up (seat order): {seats}",
             f"Monitoring: signal {mon['signal']}, {mon['noise']} demand shock sigma {mon['sigma']}, perception error "
             f"{mon['perception_error']}, implementation error {mon['implementation_error']}",
             f"Run: {run['periods']} periods ({run['horizon']} horizon), {run['replications']} replications, delta "
             f"{run['delta']}, seed {run['seed']}"]
    if "deviation" in doc:
        d = doc["deviation"]
        who = d.get("firm", "binding")
        who = "the firm that binds under grim trigger" if who == "binding" else f"firm {who}"
        lines.append(f"Deviation check: {who} deviates once in the first period"
                     + (f" ({value_label(d['strategy'])})" if "strategy" in d else ", then follows its strategy"))
    return lines


SIMULATE = Kind(
    name="simulate",
    tables=("market", "collusion", "monitoring", "strategies", "run", "deviation"),
    prepare=_prepare_simulate,
    run=_run_simulate,
    metric_names=_simulate_names,
    headline=("collusive_share", "profit_gain", "war_share", "first_breakdown"),
    analytic={"collusive_share": "analytic.collusive_share", "war_share": "analytic.war_share",
              "spell_length": "analytic.spell_length", "war_length": "analytic.war_length",
              "punishment_length": "analytic.punishment_length", "first_breakdown": "analytic.first_breakdown",
              "deviation.gain": "analytic.deviation.gain"},
    threshold={"run.delta": "analytic.critical_delta"},
    describe=_describe_simulate,
    summary="repeated-game simulation of a line-up of strategies: persistence of collusion",
    assumptions=_GENERAL_ASSUMPTIONS + (
        "Strategies are fixed automata: they do not re-optimise when the discount factor or the noise changes; the "
        "discount factor enters through discounted profits, the deviation check and the analytic thresholds.",
        "Noise is i.i.d. across periods and firms: a multiplicative mean-one demand shock seen only through the "
        "market price, perception errors (each firm misreads each rival's conduct independently) and "
        "implementation errors (an intended action replaced by cheating).",
        "The horizon is finite (or ends at random): discounted profits and spell lengths are truncated by it; "
        "lengths cut off by the horizon are treated as censored (Kaplan-Meier), so their means are lower bounds.",
        "Confidence intervals are normal approximations across independent replications (95 %); they measure "
        "simulation error only, not uncertainty about the model or its parameters.",
        "The deviation check tests one unilateral deviation (a one-shot deviation then the strategy, unless another "
        "is given): a deviation that pays shows the line-up is not an equilibrium; one that does not pay is "
        "necessary, not sufficient, for equilibrium.",
    ),
)


# ==================================================================================================
# learn
# ==================================================================================================


class _NoFlags:
    """Stands in for the command line of ``supergame learn``: no flag given."""

    file = None

    def __getattr__(self, name):
        return None


def _prepare_learn(doc: dict) -> dict:
    from sim.learning.session import _build_without_flags as build
    from sim.learning.session import compile_lineup

    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    cfg = build(_NoFlags(), doc)
    lineup = compile_lineup(cfg["market"], cfg["learner"], workers=1)
    cfg["n_firms"] = lineup.n_seats
    return cfg


def _learn_names(cfg: dict) -> list[str]:
    n = cfg["n_firms"]
    out = ["sessions", "converged", "converged.low", "converged.high", "periods", "periods.low", "periods.high"]
    out += ["profit_gain", "profit_gain.se", "profit_gain.low", "profit_gain.high"]
    out += [f"profit_gain.{q}" for q in ("q05", "q25", "q50", "q75", "q95")]
    for i in range(n):
        f = f"firm{i + 1}"
        out += [f"limit_price.{f}", f"limit_price.{f}.low", f"limit_price.{f}.high", f"limit_profit.{f}",
                f"profit_gain.{f}"]
    out += ["near_collusive", "near_collusive.low", "near_collusive.high", "near_nash", "near_nash.low",
            "near_nash.high", "rival_price_cut", "rival_price_cut.low", "rival_price_cut.high", "deviation_gain",
            "deviation_gain.low", "deviation_gain.high", "deviation_pays", "returned", "return_periods"]
    for i in range(n):
        f = f"firm{i + 1}"
        out += [f"analytic.nash_price.{f}", f"analytic.collusive_price.{f}", f"analytic.nash_profit.{f}",
                f"analytic.collusive_profit.{f}"]
    return out


def _run_learn(cfg: dict, ctx: CellContext) -> CellResult:
    from sim.learning.session import learn

    s = dict(cfg["settings"])
    s["workers"] = max(1, ctx.threads)
    res = learn(cfg["market"], copy.deepcopy(cfg["learner"]), progress=ctx.progress, cell=ctx.index, **s)
    sm = res.summary()
    n = res.lineup.n_seats
    m: dict = {"sessions": sm["sessions"]}
    c = sm["converged"]
    m["converged"], m["converged.low"], m["converged.high"] = c["share"], c["low"], c["high"]
    p = sm["periods"]
    m["periods"], m["periods.low"], m["periods.high"] = p["mean"], p["low"], p["high"]
    pg = sm["profit_gain"]
    for k, src in (("profit_gain", "mean"), ("profit_gain.se", "se"), ("profit_gain.low", "low"),
                   ("profit_gain.high", "high")):
        m[k] = pg[src]
    for q in ("q05", "q25", "q50", "q75", "q95"):
        m[f"profit_gain.{q}"] = pg[q]
    for i in range(n):
        f = f"firm{i + 1}"
        lp = sm["limit_prices"][i]
        m[f"limit_price.{f}"], m[f"limit_price.{f}.low"], m[f"limit_price.{f}.high"] = lp["mean"], lp["low"], lp["high"]
        m[f"limit_profit.{f}"] = sm["limit_profits"][i]["mean"]
        m[f"profit_gain.{f}"] = sm["firm_profit_gain"][i]["mean"]
    for k in ("near_collusive", "near_nash"):
        m[k], m[f"{k}.low"], m[f"{k}.high"] = sm[k]["share"], sm[k]["low"], sm[k]["high"]
    rc = sm["rival_price_cut"] or {"mean": math.nan, "low": math.nan, "high": math.nan}
    m["rival_price_cut"], m["rival_price_cut.low"], m["rival_price_cut.high"] = rc["mean"], rc["low"], rc["high"]
    g = sm["deviation_gain"]
    m["deviation_gain"], m["deviation_gain.low"], m["deviation_gain.high"] = g["mean"], g["low"], g["high"]
    m["deviation_pays"] = sm["deviation_pays"]["mean"]
    m["returned"] = sm["returned"]["mean"]
    m["return_periods"] = sm["return_periods"]["mean"]
    bm = sm["benchmarks"]
    for i in range(n):
        f = f"firm{i + 1}"
        m[f"analytic.nash_price.{f}"] = bm["nash_prices"][i]
        m[f"analytic.collusive_price.{f}"] = bm["collusive_prices"][i]
        m[f"analytic.nash_profit.{f}"] = bm["nash_profits"][i]
        m[f"analytic.collusive_profit.{f}"] = bm["collusive_profits"][i]
    arrays = {}
    ir = sm["impulse_response"]["prices"]
    if ir["mean"]:
        arrays["impulse.prices"] = ir["mean"]
    arrays["profit_gain_histogram.edges"] = sm["profit_gain_histogram"]["edges"]
    arrays["profit_gain_histogram.counts"] = sm["profit_gain_histogram"]["counts"]
    return CellResult(m, arrays)


def _describe_learn(doc: dict) -> list[str]:
    lt = doc.get("learning", {})
    run = doc.get("run", {})
    params = ", ".join(f"{k} {v}" for k, v in lt.items()) or "the published defaults"
    return [f"Market: {_describe_market(doc.get('market', {}))}",
            f"Learners: Q-learning ({params})",
            f"Sessions: {run.get('sessions', 100)}, seed {run.get('seed', 0)}"]


LEARN = Kind(
    name="learn",
    tables=("market", "learning", "impulse", "run", "strategies"),
    prepare=_prepare_learn,
    run=_run_learn,
    metric_names=_learn_names,
    headline=("profit_gain", "converged", "near_collusive", "rival_price_cut"),
    describe=_describe_learn,
    summary="sessions of Q-learning firms: limit outcomes, profit gain and impulse response",
    assumptions=_GENERAL_ASSUMPTIONS + (
        "Firms are tabular Q-learners on a finite grid of actions, playing synchronously with epsilon-greedy "
        "exploration decaying as exp(-beta t), as in Calvano, Calzolari, Denicolo and Pastorello (2020); a "
        "session counts as converged once no greedy strategy changed for the stated number of periods.",
        "Limit outcomes are those of greedy play from the final state; statistics are across independent sessions "
        "(95 % intervals: Student t for means, Wilson for shares) and measure simulation error only.",
        "Learned outcomes depend on the algorithm's settings (learning rate, exploration, grid, memory); they show "
        "what such algorithms can learn in this model, not what a particular pricing software does.",
    ),
)
