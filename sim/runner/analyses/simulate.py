"""The ``simulate`` analysis: a line-up of strategies played many times, as an experiment kind (see
:mod:`sim.runner.kinds`).

It adds one table of its own, ``[deviation]``: a simulated incentive check. Seat ``firm``
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

import math
import pickle

import numpy as np

import sim.simulation.kernel as K
from sim.core.errors import InputError
from sim.core.parallel import usable_cores
from sim.core.params import Integer, Real
from sim.core.tables import refuse_unknown
from sim.core.text import plain_number
from sim.core.values import value_label
from sim.models.stagecore import market_owner
from sim.runner.analyses.common import (
    GENERAL_ASSUMPTIONS,
    collusion_of,
    describe_market,
    nan_if_none,
    put_estimate,
    stage_of,
    thin,
)
from sim.runner.analyses.simulate_capacity import prepare_capacity_game
from sim.runner.analyses.simulate_states import (
    CONTINGENT_WORDS,
    contingent_names,
    contingent_states,
    put_contingent,
    wants_contingent,
)
from sim.runner.cost import Cost
from sim.runner.kinds import CellContext, CellResult, Kind, PartAssumption
from sim.simulation.analysis import SimulateResult, simulate_analysis
from sim.simulation.baseline import scheme_of
from sim.simulation.enforced import enforcement_limits, is_deterministic
from sim.simulation.engine import RUN_DEFAULTS, check_run, compile_game, simulation_from_dict
from sim.simulation.states_run import state_factors
from sim.theory.capacity_analysis import is_capacity_market
from sim.theory.demand_states import DemandStates, markets_by_state
from sim.theory.enforcement import Enforcement
from sim.theory.stage_profits import StageProfits
from sim.theory.thresholds import grim_threshold
from sim.theory.trigger_price import trigger_price_equilibrium
from strategies import TableAutomaton, strategy_from_dict
from strategies.automata import FinitePunishment, GrimTrigger
from strategies.base import FirmContext
from strategies.registry import lineup_from_tables

_DEV_KEYS = ("firm", "strategy")
#: the level of the intervals (``run.confidence``)
CONFIDENCE = Real(0, 1, closed="neither")
#: the persistence metrics of :func:`sim.simulation.results.summarize`, in its order, and the mean length of a
#: punishment phase (``SimulationResult.punishment_length``) after the price wars
SIM_METRICS = ("collusive_share", "war_share", "wars_per_replication", "war_frequency", "spell_length", "war_length",
               "punishment_length", "first_breakdown", "broken_down", "price", "overcharge", "consumer_surplus",
               "joint_profit", "profit_gain")
_FIRM_METRICS = ("profit", "discounted_profit", "profit_gain")
_ANALYTIC = ("collusive_share", "war_share", "spell_length", "war_length", "punishment_length", "first_breakdown")
def _level_data(level):
    return list(level) if isinstance(level, tuple) else level


def one_shot_deviator(strategy, levels, seat: int, prefix: str = "deviation"):
    """The seat's own automaton with its best one-shot deviation played in the first period.

    A copy of the initial state, which cheats with probability one, becomes the initial state; its
    transitions are those of the original initial state, so after period 0 the deviator follows its
    strategy (reacting to its own deviation like any other). Strategies that already cheat at random
    are refused (give ``deviation.strategy`` instead).

    Parameters
    ----------
    strategy : Automaton
        The seat's strategy.
    levels : StageLevels
        The named profiles of the stage game the strategy's table is built on.
    seat : int
        The deviating seat, counted from 0.
    prefix : str
        Key path of the deviation's table in error messages.

    Returns
    -------
    TableAutomaton
        The strategy's states and a new initial state that cheats in period 0.

    Raises
    ------
    InputError
        ``prefix.firm`` when the seat's strategy already cheats at random.
    """

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

    sub = {k: v for k, v in doc.items() if k not in ("deviation", "enforcement", "demand_states")}
    confidence = 0.95
    if isinstance(doc.get("run"), dict):
        # the level of the intervals is the kind's own key of [run] (the engine's run settings do not use it)
        run_t = refuse_unknown(doc["run"], "run", (*RUN_DEFAULTS, "confidence"))
        if "confidence" in run_t:
            confidence = CONFIDENCE.check("run.confidence", run_t["confidence"])
        sub["run"] = {k: v for k, v in run_t.items() if k != "confidence"}
    if is_capacity_market(doc.get("market")):
        # price competition with capacity constraints: its own stage game, the same engine
        cfg = prepare_capacity_game(doc, sub.get("run", {}))
        stage, levels = cfg.pop("stage"), cfg.pop("levels")
        ms, lineup = cfg["spec"], cfg["lineup"]
        out = {**cfg, "deviation": None, "confidence": confidence, "trigger_scheme": None}
    else:
        out, stage, levels = _prepare_market(doc, sub, confidence)
        ms, lineup = out["spec"], out["lineup"]
    if "deviation" in doc:
        dt = refuse_unknown(doc["deviation"], "deviation", _DEV_KEYS)
        firm = dt.get("firm", "binding")
        if firm == "binding":

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
        dev_game = compile_game(stage, levels, dev_lineup, out["monitoring"], strict=False)
        out["deviation"] = {"seat": seat, "game": dev_game, "custom": "strategy" in dt}
    if "enforcement" in doc:
        enf = Enforcement.from_dict(doc["enforcement"])
        capacity = is_capacity_market(doc.get("market"))
        enforcement_limits(enf, float(out["monitoring"].sigma), capacity,
                           not capacity and is_deterministic(out["game"]), out["run"]["horizon"])
        out["enforcement"] = enf
        out["stage_profits"] = StageProfits.from_stage(stage)
    if "demand_states" in doc:
        out["demand_states"] = _states_of(doc, out)
    return out


def _states_of(doc: dict, out: dict) -> dict:
    """The ``[demand_states]`` table of a simulation: the states, the parameter, its values and the verified
    profit factor of each state (:func:`sim.simulation.states_run.state_factors`)."""
    if wants_contingent(doc["demand_states"]):
        return contingent_states(doc, out)
    for other in ("enforcement", "deviation"):
        if other in doc:
            raise InputError("demand_states", f"is not simulated together with [{other}]: the line-up's profits move "
                                              f"with the state, which the [{other}] accounting does not follow")
    if is_capacity_market(doc.get("market")) or float(out["monitoring"].sigma) > 0:
        raise InputError("demand_states", "is simulated without a demand shock (monitoring.sigma = 0) and outside "
                                          "capacity markets, where each state scales the profits by one factor")
    table = doc["demand_states"]
    if not isinstance(table, dict):
        raise InputError("demand_states", f"must be a table, got {table!r}")
    d = dict(table)
    parameter, values = d.pop("parameter", None), d.pop("values", None)
    states = DemandStates.from_dict(d, "demand_states")
    if not isinstance(parameter, str):
        raise InputError("demand_states.parameter", f"missing: the market parameter that moves with the state "
                                                    f"(e.g. 'size'), got {parameter!r}")
    if not isinstance(values, list) or len(values) != states.n_states:
        raise InputError("demand_states.values", f"must list one value per state ({states.n_states}), got {values!r}")
    markets = markets_by_state(out["market"], parameter, values)
    factors = state_factors(out["game"], markets, out["agreement"], out["actions"])
    return {"states": states, "parameter": parameter, "values": [float(v) for v in values], "factors": factors}


def _prepare_market(doc: dict, sub: dict, confidence: float) -> tuple:
    """The prepared cell of a market of :mod:`sim.models.market`, its stage game and levels."""
    cfg = simulation_from_dict(sub, check_tables=True)
    scheme = _equilibrium_triggers(cfg)
    ms = cfg["market"].spec()
    agreement, actions = collusion_of(doc)
    lineup = lineup_from_tables(cfg["strategies"], ms.n_firms, "strategies")
    P = int(market_owner(ms).shape[0])
    r = cfg["run"]
    run = check_run(r["periods"], r["replications"], r["delta"], r["seed"], r["horizon"], r["continuation"],
                    r["paths"], P)
    stage, levels = stage_of(ms, doc["market"], agreement, actions)
    game = compile_game(stage, levels, lineup, cfg["monitoring"])
    out = {"market": cfg["market"], "market_table": doc["market"], "spec": ms, "agreement": agreement,
           "actions": actions, "lineup": lineup, "monitoring": cfg["monitoring"], "run": run, "game": game,
           "deviation": None, "confidence": confidence, "trigger_scheme": scheme}
    return out, stage, levels


def _equilibrium_triggers(cfg: dict):
    """Line-up entries with ``trigger = "equilibrium"`` play the best trigger-price equilibrium of the cell's market
    (Green and Porter, 1984; :func:`sim.theory.trigger_price.trigger_price_equilibrium`): its trigger, its war
    length and its common quantity, computed for this cell and stored with its results. Where no output below
    static Nash can be sustained, the entries compete (``always_compete``) and the cell is marked degenerate.
    Returns the scheme (None when no entry asks for it)."""

    ents = cfg["strategies"]
    wants = [k for k, e in enumerate(ents) if isinstance(e, dict) and e.get("strategy") == "trigger_price"
             and e.get("trigger") == "equilibrium"]
    if not wants:
        return None
    mon = cfg["monitoring"]
    key = f"strategies[{wants[0] + 1}].trigger"
    if mon.signal != "price" or not mon.sigma > 0:
        raise InputError(key, "'equilibrium' needs firms that see only a noisy market price (monitoring.signal = "
                              "\"price\" and monitoring.sigma above 0)")
    try:
        scheme = _equilibrium_of(cfg["market"].spec(), cfg["run"]["delta"], mon.noise, mon.sigma)
    except InputError as exc:
        raise InputError(key, f"no trigger-price equilibrium in this market: {exc.message}") from None
    for k in wants:
        if scheme.trigger == 0.0:
            # no output below static Nash can be sustained: the firms compete, and the cell says so
            # (trigger_price.degenerate) rather than counting static Nash play as collusion
            ents[k] = {"strategy": "always_compete", **({"seats": ents[k]["seats"]} if "seats" in ents[k] else {})}
        else:
            ents[k] = {**ents[k], "trigger": float(scheme.trigger), "collude": float(scheme.quantity),
                       "length": "forever" if scheme.T is None else int(scheme.T)}
    return scheme


#: the best trigger-price equilibrium of a market, computed once per process: a cell's document is prepared several
#: times (validation, planning, running, reporting) and the search takes seconds; the scheme is a frozen record and
#: the same inputs give the same scheme, so results do not depend on the cache
_EQUILIBRIA: dict = {}
_EQUILIBRIA_KEPT = 256


def _equilibrium_of(spec, delta: float, noise: str, sigma: float):
    key = (pickle.dumps(spec), float(delta), str(noise), float(sigma))
    if key not in _EQUILIBRIA:
        if len(_EQUILIBRIA) >= _EQUILIBRIA_KEPT:
            _EQUILIBRIA.pop(next(iter(_EQUILIBRIA)))
        _EQUILIBRIA[key] = trigger_price_equilibrium(spec, delta, noise, sigma)
    return _EQUILIBRIA[key]


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
    if cfg.get("trigger_scheme") is not None:
        out += ["trigger_price.trigger", "trigger_price.war_length", "trigger_price.quantity",
                "trigger_price.degenerate"]
    if cfg["deviation"] is not None:
        out += ["deviation.firm", "deviation.gain", "deviation.gain.se", "deviation.gain.low", "deviation.gain.high",
                "deviation.pays", "deviation.conform_value", "deviation.deviate_value", "analytic.deviation.gain"]
    if cfg.get("enforcement") is not None:
        out += ENFORCED_METRICS
        for m in ENFORCED_FIRM_METRICS:
            out += [f"{m}.firm{i + 1}{s}" for i in range(n) for s in ("", ".low", ".high")]
    if cfg.get("demand_states") is not None:
        out += state_play_names(cfg["demand_states"]["states"].n_states, n)
        if cfg["demand_states"].get("game") is not None:
            out += contingent_names(cfg["demand_states"]["states"].n_states)
    return out


def _scheme_key(entry: dict) -> str:
    s = entry["scheme"]
    if s.startswith("Nash reversion"):
        return "finite_T" + s.split("T=")[1]
    return {"grim trigger": "grim", "stick and carrot": "stick_carrot"}.get(s, s.replace(" ", "_"))


def _schemes(cfg: dict) -> list[str]:
    """Keys of the punishment schemes the line-up plays, by the analytic baseline's own reading of the
    strategies (an opportunist that never punishes plays none)."""

    keys = set()
    for s in cfg["lineup"]:
        sch = scheme_of(s)
        if sch is None:
            continue
        kind, T = sch
        keys.add(f"finite_T{T}" if kind == "finite" else kind)
    return sorted(keys)


def _analytic_gain(cfg: dict, seat: int) -> float:
    """Closed-form gain of the one-shot deviation against grim trigger or T-period Nash reversion, without
    noise, over the fixed horizon: ``(pi_d - pi_c) - sum_{t=1}^{min(T, H-1)} delta^t (pi_c - pi_N)``."""

    dev = cfg["deviation"]
    mon = cfg["game"].monitoring
    run = cfg["run"]
    if cfg.get("demand_states") is not None:  # the closed form is the experiment's market's
        return math.nan
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


def simulate_metrics(result: SimulateResult) -> dict:
    """The simulated metrics of a simulate result: persistence and outcome estimates with their bounds, each firm's
    profits and profit gain, the reference prices and the deviation check (the columns of ``results.csv`` that the
    result itself holds; the analytic predictions are added by the cell from its configuration).

    Parameters
    ----------
    result : SimulateResult

    Returns
    -------
    dict
        Stored metric name -> float.
    """
    res = result.simulation
    m: dict = {}
    for k in SIM_METRICS:
        put_estimate(m, k, res.punishment_length if k == "punishment_length" else res.metrics[k])
    for k in _FIRM_METRICS:
        for i, e in enumerate(res.firm_metrics[k]):
            m[f"{k}.firm{i + 1}"] = e.value
            m[f"{k}.firm{i + 1}.low"] = e.low
            m[f"{k}.firm{i + 1}.high"] = e.high
    m["nash_price"] = res.reference["nash_price"]
    m["collusive_price"] = res.reference["collusive_price"]
    return m | _deviation_metrics(result.deviation)


def _deviation_metrics(dev) -> dict:
    if dev is None:
        return {}
    m = {"deviation.firm": dev.firm}
    put_estimate(m, "deviation.gain", dev.gain)
    m["deviation.pays"] = float(dev.pays)
    m["deviation.conform_value"] = dev.conform_value
    m["deviation.deviate_value"] = dev.deviate_value
    m["analytic.deviation.gain"] = dev.analytic_gain
    return m


def _run_simulate(cfg: dict, ctx: CellContext) -> CellResult:

    run = cfg["run"]
    result, res = simulate_analysis(cfg, ctx.key, ctx.threads, ctx.progress,
                                    analytic_gain=lambda seat: _analytic_gain(cfg, seat))
    own = simulate_metrics(result)
    dev_keys = _deviation_metrics(result.deviation)
    # the stored order: simulated metrics, analytic predictions, the trigger scheme, the deviation check
    m = {k: v for k, v in own.items() if k not in dev_keys}
    b = res.baseline
    tp, fb = b.get("trigger_price"), b.get("first_breakdown")
    a = dict.fromkeys(_ANALYTIC, math.nan)
    if b.get("collusive_share") is not None:
        a["collusive_share"] = b["collusive_share"]
        a["war_share"] = 1.0 - b["collusive_share"]
    if tp is not None:
        a["war_share"] = tp["war_share"]
        a["spell_length"] = tp["expected_collusive_spell"]
        a["war_length"] = nan_if_none(tp["war_length"])
        a["first_breakdown"] = tp["expected_first_breakdown"]
    if b.get("punishment_length") is not None:
        a["punishment_length"] = b["punishment_length"]["value"]
    if fb is not None:
        a["first_breakdown"] = fb["expected_within_horizon"] if fb["expected_within_horizon"] is not None \
            else fb["expected"]
    for k, v in a.items():
        m[f"analytic.{k}"] = v
    th = b.get("thresholds") or []
    crit = {_scheme_key(t): nan_if_none(t["market"]) for t in th}
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
    t, share = thin(res.collusive_by_period)
    arrays["period"] = t
    arrays["collusive_by_period"] = share
    if b.get("collusive_by_period") is not None:
        arrays["analytic.collusive_by_period"] = thin(b["collusive_by_period"])[1]
    sch = cfg.get("trigger_scheme")
    if sch is not None:
        m["trigger_price.trigger"] = float(sch.trigger)
        m["trigger_price.war_length"] = math.inf if sch.T is None else float(sch.T)  # stored empty: forever
        m["trigger_price.quantity"] = float(sch.quantity)
        # no output below static Nash can be sustained: the "equilibrium" is static Nash (trigger 0)
        m["trigger_price.degenerate"] = float(sch.trigger == 0.0)
    m.update(dev_keys)
    if result.enforcement is not None:
        put_enforced(m, result.enforcement)
    if result.states is not None:
        put_state_play(m, result.states)
        if result.states.contingent is not None:
            put_contingent(m, result.states)
    return CellResult(m, arrays, result)


#: firm-periods per second of the simulation kernel on one core assumed by the time estimate (a conservative
#: figure: ``supergame bench --only engine`` measures the machine's own)
THROUGHPUT = 2e7


def simulate_cost(cfg: dict) -> Cost:
    """The estimated peak memory and work of a simulate cell (see :mod:`sim.runner.cost`).

    Parameters
    ----------
    cfg : dict
        The prepared cell.

    Returns
    -------
    Cost
    """
    r = cfg["run"]
    n, n_products = cfg["spec"].n_firms, cfg["spec"].n_products
    periods, reps, paths = int(r["periods"]), int(r["replications"]), int(r["paths"])
    chunks = 4 * usable_cores()
    # per replication: profits and discounted profits, counters, generator state; per period: the chunks'
    # histograms and the merged ones, the summaries' curves; recorded paths: prices, market, flags per firm
    per_rep = 8 * (2 * n + K.N_RINT + K.N_RFLT + 4)
    per_period = 8 * (chunks * (K.N_HIST + 1) + K.N_HIST + 20)
    memory = reps * per_rep + periods * per_period + 8 * paths * periods * (2 * n_products + 3 * n + 4)
    if cfg.get("demand_states") is not None or (cfg.get("enforcement") is not None
                                                and cfg["enforcement"].after_detection is None):
        # enforcement records every replication's path (see sim.simulation.enforced)
        memory += 8 * (reps - paths) * periods * (2 * n_products + 3 * n + 4)
    if cfg.get("demand_states") is not None and cfg["demand_states"].get("game") is not None:
        memory += 8 * reps * periods  # the drawn demand state of every period
    work = (2 if cfg["deviation"] is not None else 1) * float(periods) * reps * n
    key = "run.periods" if periods * per_period >= reps * per_rep else "run.replications"
    return Cost(memory, work, "firm-periods", work / THROUGHPUT, key)


def _describe_simulate(doc: dict) -> list[str]:

    run = {"periods": 1000, "replications": 1000, "horizon": "fixed", "delta": 0.95, "seed": 0, **doc.get("run", {})}
    mon = {"signal": "perfect", "noise": "lognormal", "sigma": 0.0, "perception_error": 0.0,
           "implementation_error": 0.0, **doc.get("monitoring", {})}
    coll = doc.get("collusion", {})
    seats = "; ".join(value_label(e) + (f" x {e['seats']}" if "seats" in e else "")
                      for e in doc.get("strategies", []) if isinstance(e, dict))
    lines = [f"Market: {describe_market(doc.get('market', {}))}",
             f"Agreement: {coll.get('agreement', 'given' if 'actions' in coll else 'joint')}",
             f"Line-up (seat order): {seats}",
             f"Monitoring: signal {mon['signal']}, {mon['noise']} demand shock sigma {plain_number(mon['sigma'])}, "
             f"perception error {plain_number(mon['perception_error'])}, implementation error "
             f"{plain_number(mon['implementation_error'])}",
             f"Run: {run['periods']} periods ({run['horizon']} horizon), {run['replications']} replications, delta "
             f"{plain_number(run['delta'])}, seed {run['seed']}"]
    if "deviation" in doc:
        d = doc["deviation"]
        who = d.get("firm", "binding")
        who = "the firm that binds under grim trigger" if who == "binding" else f"firm {who}"
        lines.append(f"Deviation check: {who} deviates once in the first period"
                     + (f" ({value_label(d['strategy'])})" if "strategy" in d else ", then follows its strategy"))
    if "enforcement" in doc:
        e = doc["enforcement"]
        lines.append(f"Enforcement: detection rate {value_label(e.get('detection', 0.0))} per colluding period, fine "
                     f"{e.get('fine', 0.0)} ({e.get('fine_basis', 'fixed')}); static Nash "
                     + ("forever after a conviction" if e.get("after_detection") is None else
                        f"for {e['after_detection']} periods after a conviction, then the strategies start afresh"))
    if "demand_states" in doc and isinstance(doc["demand_states"], dict):
        d = doc["demand_states"]
        play = "plays the same actions in every state" if not wants_contingent(d) else \
            "colludes on " + CONTINGENT_WORDS.get(d.get("collusive_path", "given"), "a state-contingent path")
        lines.append(f"Demand states: {d.get('kind', 'iid')}, {d.get('parameter')} per state {d.get('values')}; the "
                     f"line-up {play}")
    return lines


#: the cell's enforcement metrics (:class:`sim.simulation.enforced.EnforcedSimulation`), estimates with their
#: interval, then the rates
ENFORCED_METRICS = ("enforced.detections", "enforced.detections.low", "enforced.detections.high",
                    "enforced.detected_share", "enforced.detected_share.low", "enforced.detected_share.high",
                    "enforced.collusive_share", "enforced.collusive_share.low", "enforced.collusive_share.high",
                    "enforced.convictions_per_collusive_period", "enforcement.conviction_rate")
ENFORCED_FIRM_METRICS = ("enforced.fines", "enforced.discounted_fines", "enforced.net_profit",
                         "enforced.net_discounted_profit")


def put_enforced(m: dict, e) -> None:
    """Write an :class:`~sim.simulation.enforced.EnforcedSimulation` into the cell's metrics.

    Parameters
    ----------
    m : dict
        The metrics (added to).
    e : EnforcedSimulation
    """
    for k in ("detections", "detected_share", "collusive_share"):
        est = getattr(e, k)
        m[f"enforced.{k}"], m[f"enforced.{k}.low"], m[f"enforced.{k}.high"] = est.value, est.low, est.high
    m["enforced.convictions_per_collusive_period"] = e.convictions_per_collusive_period.value
    m["enforcement.conviction_rate"] = e.conviction_rate
    for k in ENFORCED_FIRM_METRICS:
        for i, est in enumerate(getattr(e, k.split(".")[1])):
            m[f"{k}.firm{i + 1}"], m[f"{k}.firm{i + 1}.low"], m[f"{k}.firm{i + 1}.high"] = est.value, est.low, est.high


def state_play_names(n_states: int, n_firms: int) -> list[str]:
    """The metric names of a simulation with demand states.

    Parameters
    ----------
    n_states : int
    n_firms : int

    Returns
    -------
    list of str
    """
    out = []
    for k in range(1, n_states + 1):
        out += [f"state_play.frequency[{k}]", f"state_play.frequency[{k}].se", f"state_play.expected[{k}]",
                f"state_play.factor[{k}]"]
        out += [f"state_play.profit_by_state[{k}].firm{i + 1}" for i in range(n_firms)]
    for m in ("state_play.profit", "state_play.discounted_profit"):
        out += [f"{m}.firm{i + 1}{s}" for i in range(n_firms) for s in ("", ".low", ".high")]
    return out


def put_state_play(m: dict, sp) -> None:
    """Write a :class:`~sim.simulation.states_run.StatePlay` into the cell's metrics.

    Parameters
    ----------
    m : dict
        The metrics (added to).
    sp : StatePlay
    """
    for k in range(len(sp.labels)):
        m[f"state_play.frequency[{k + 1}]"] = float(sp.frequencies[k])
        m[f"state_play.frequency[{k + 1}].se"] = float(sp.frequency_se[k])
        m[f"state_play.expected[{k + 1}]"] = float(sp.expected[k])
        m[f"state_play.factor[{k + 1}]"] = float(sp.factors[k])
        for i in range(sp.profit_by_state.shape[1]):
            m[f"state_play.profit_by_state[{k + 1}].firm{i + 1}"] = float(sp.profit_by_state[k, i])
    for name in ("profit", "discounted_profit"):
        for i, est in enumerate(getattr(sp, name)):
            key = f"state_play.{name}.firm{i + 1}"
            m[key], m[f"{key}.low"], m[f"{key}.high"] = est.value, est.low, est.high


KIND = Kind(
    name="simulate",
    tables=("market", "collusion", "monitoring", "strategies", "run", "deviation", "enforcement", "demand_states"),
    prepare=_prepare_simulate,
    run=_run_simulate,
    metric_names=_simulate_names,
    result_type=SimulateResult,
    cost=simulate_cost,
    headline=("collusive_share", "profit_gain", "war_share", "first_breakdown"),
    analytic={"collusive_share": "analytic.collusive_share", "war_share": "analytic.war_share",
              "spell_length": "analytic.spell_length", "war_length": "analytic.war_length",
              "punishment_length": "analytic.punishment_length", "first_breakdown": "analytic.first_breakdown",
              "deviation.gain": "analytic.deviation.gain"},
    threshold={"run.delta": "analytic.critical_delta"},
    describe=_describe_simulate,
    summary="repeated-game simulation of a line-up of strategies: persistence of collusion",
    assumptions=GENERAL_ASSUMPTIONS + (
        "Strategies are fixed automata: they do not re-optimise when the discount factor or the noise changes; the "
        "discount factor enters through discounted profits, the deviation check and the analytic thresholds.",
        "Noise is i.i.d. across periods and firms: a multiplicative mean-one demand shock seen only through the "
        "market price, perception errors (each firm misreads each rival's conduct independently) and "
        "implementation errors (an intended action replaced by cheating).",
        "The horizon is finite (or ends at random): discounted profits and spell lengths are truncated by it; "
        "lengths cut off by the horizon are treated as censored (Kaplan-Meier), so their means are lower bounds.",
        "Confidence intervals (95 %) are taken across independent replications: Student's t for means, Wilson's "
        "score interval for shares, the delta method for ratios and Kaplan-Meier for lengths; they measure "
        "simulation error only, not uncertainty about the model or its parameters.",
        PartAssumption("The deviation check tests one unilateral deviation (a one-shot deviation then the strategy, "
                       "unless another is given): a deviation that pays shows the line-up is not an equilibrium; one "
                       "that does not pay is necessary, not sufficient, for equilibrium.", "deviation."),
    ),
)
