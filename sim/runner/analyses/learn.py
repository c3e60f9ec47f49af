"""The ``learn`` analysis: sessions of Q-learning firms, as an experiment kind (see :mod:`sim.runner.kinds`)."""

from __future__ import annotations

import math
from pathlib import Path

from sim.core.errors import InputError
from sim.learning.analysis import LearnResult, LearnSpec, learn_analysis, measures_price_wars
from sim.learning.tables import learning_from_dict
from sim.runner.analyses.common import GENERAL_ASSUMPTIONS, describe_market
from sim.runner.analyses.learn_assumptions import COMMON, cell_assumptions
from sim.runner.kinds import CellContext, CellResult, Kind, PartAssumption
from strategies.qlearning import QLearner


def _prepare_learn(doc: dict) -> dict:

    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    cfg = learning_from_dict(doc)  # the line-up is compiled there: its state space is checked before any work
    cfg["n_firms"] = cfg["market"].spec().n_firms
    cfg["spec"] = LearnSpec(cfg["market"], cfg["learner"], cfg["settings"], cfg["start"], cfg["event"],
                            cfg["unused"])
    cfg["doc"] = doc
    return cfg


def _ready(doc: dict) -> None:
    """An event's saved learners must exist when the run starts (``check`` accepts them as still to come)."""
    name = (doc.get("learning") or {}).get("continue_from")
    if "event" in doc and isinstance(name, str) and Path(name).is_dir():
        raise InputError("learning.continue_from", f"{name} is a folder, not a file of saved learners")
    if "event" in doc and isinstance(name, str) and not Path(name).is_file():
        raise InputError("learning.continue_from", f"no such file: {name} (run the first step, which saves the "
                                                   "learners, before the event: supergame learn of it writes them "
                                                   "here; supergame run writes them in its run folder, with the "
                                                   "cell's number before the extension)")


def _inputs(doc: dict) -> list[tuple[str, str]]:
    """The files a learn cell reads besides the experiment file (key path, name as given): the saved learners it
    continues (``learning.continue_from``) and the saved policies of fixed seats (``policy_from``)."""
    out = []
    lt = doc.get("learning") if isinstance(doc.get("learning"), dict) else {}
    if isinstance(lt.get("continue_from"), str):
        out.append(("learning.continue_from", lt["continue_from"]))
    entries = doc.get("strategies") if isinstance(doc.get("strategies"), list) else []
    learners = [e for e in entries if isinstance(e, dict) and e.get("strategy") == QLearner.name]
    # a policy file is read by the seats of family "fixed" only: [learning]'s serves every learner without its own
    if isinstance(lt.get("policy_from"), str) and (
            (not entries and lt.get("family") == "fixed")
            or any(e.get("family", lt.get("family")) == "fixed" and "policy_from" not in e for e in learners)):
        out.append(("learning.policy_from", lt["policy_from"]))
    for i, entry in enumerate(entries):
        if (isinstance(entry, dict) and isinstance(entry.get("policy_from"), str)
                and entry.get("family", lt.get("family")) == "fixed"):
            out.append((f"strategies[{i + 1}].policy_from", entry["policy_from"]))
    return out


def _read(cfg: dict) -> list[tuple[str, str, str]]:
    """The saved learners a prepared cell continues, with the SHA-256 of the bytes it read (``Kind.read``)."""
    start, name = cfg.get("start"), (cfg["doc"].get("learning") or {}).get("continue_from")
    if start is None or not isinstance(name, str) or not getattr(start, "file_sha256", ""):
        return []
    return [("learning.continue_from", name, start.file_sha256)]


def saved_path(save_to: str | None, ctx: CellContext) -> Path | None:
    """Where a cell saves its learners (``learning.save_to``): the path as given, or, in a run folder, that name
    inside the folder with the cell's number before the extension (``learners.npz`` -> ``learners-cell1.npz``),
    so that the run's manifest records its SHA-256.

    Parameters
    ----------
    save_to : str or None
        ``learning.save_to`` (a relative path, checked when the file was read).
    ctx : CellContext

    Returns
    -------
    Path or None
    """
    if save_to is None:
        return None
    if ctx.folder is None:
        return Path(save_to)
    p = Path(save_to)
    return Path(ctx.folder) / p.with_name(f"{p.stem}-cell{ctx.index + 1}{p.suffix}")


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
            "deviation_gain.low", "deviation_gain.high", "deviation_pays", "returned", "periods_to_return"]
    # intervals of the limit profits and of the deviation's shares (after the columns above, which keep their place)
    out += [f"limit_profit.firm{i + 1}{q}" for i in range(n) for q in (".low", ".high")]
    out += [f"{stem}{q}" for stem in ("deviation_pays", "returned", "periods_to_return") for q in (".low", ".high")]
    for i in range(n):
        f = f"firm{i + 1}"
        out += [f"analytic.nash_price.{f}", f"analytic.collusive_price.{f}", f"analytic.nash_profit.{f}",
                f"analytic.collusive_profit.{f}"]
    for i in _automaton_seats(cfg["learner"]):
        out += trigger_names(i + 1)
    if cfg.get("event") is not None:
        out += event_names(n)
        if cfg["event"].kind == "merger":
            out += [f"analytic.merger_nash_price.firm{i + 1}" for i in range(n)]
            out += [f"profit_gain_after_merger{q}" for q in ("", ".low", ".high")]
            out += [f"limit_price_above_merger_nash.firm{i + 1}{q}" for i in range(n) for q in ("", ".low", ".high")]
    if cfg["settings"].get("timing") == "alternating":
        out += list(ALTERNATING_NAMES)
    if measures_price_wars(cfg["settings"], cfg.get("event")):
        out += [f"{stem}{q}" for stem in SIGNAL_NAMES for q in ("", ".low", ".high")]
    if cfg["settings"].get("observe") == "noisy_prices":
        out += error_play_names(n)
    return out


def error_play_names(n_firms: int) -> list[str]:
    """The columns of play with error after learning from noisy prices (sim.learning.analysis.noisy_play).

    Parameters
    ----------
    n_firms : int

    Returns
    -------
    list of str
    """
    out = [f"{stem}{q}" for stem in ("error_play_profit_gain", "error_play_gain_change") for q in ("", ".low", ".high")]
    return out + [f"error_play_price.firm{i + 1}{q}" for i in range(n_firms) for q in ("", ".low", ".high")]


#: the columns of the profit signal's learned price wars (sim.learning.signals), with the entry of
#: ``shock_response`` each comes from (sim.learning.analysis.signal_response)
SIGNAL_NAMES = {"price_war_share": "price_war", "price_cut_share": "cut", "temporary_cut_share": "temporary",
                "price_cut_depth": "depth", "price_war_length": "duration"}


#: the columns of alternating sessions' account (after every other column of a learn cell): where the sessions end,
#: a fixed price pair or a cycle (Klein, 2021), with each entry of ``summary["alternating"]`` they come from
ALTERNATING_NAMES = {
    "fixed_price_share": ("fixed_price", "share"), "fixed_price_share.low": ("fixed_price", "low"),
    "fixed_price_share.high": ("fixed_price", "high"),
    "fixed_above_nash_share": ("fixed_above_nash", "share"), "fixed_above_nash_share.low": ("fixed_above_nash", "low"),
    "fixed_above_nash_share.high": ("fixed_above_nash", "high"),
    "fixed_not_stage_nash_share": ("fixed_not_stage_nash", "share"),
    "fixed_not_stage_nash_share.low": ("fixed_not_stage_nash", "low"),
    "fixed_not_stage_nash_share.high": ("fixed_not_stage_nash", "high"),
    "fixed_collusive_share": ("fixed_collusive", "share"),
    "cycle_share": ("cycle", "share"), "cycle_share.low": ("cycle", "low"), "cycle_share.high": ("cycle", "high"),
    "cycle_length": ("cycle_length", "mean"), "cycle_length.low": ("cycle_length", "low"),
    "cycle_length.high": ("cycle_length", "high"),
    "profit_gain_fixed": ("profit_gain_fixed", "mean"), "profit_gain_cycle": ("profit_gain_cycle", "mean"),
}


def event_names(n_firms: int) -> list[str]:
    """The columns of an event's account (after every other column of a learn cell).

    Parameters
    ----------
    n_firms : int
        Firms after the event.

    Returns
    -------
    list of str
    """
    out = ["settled_again", "settled_again.low", "settled_again.high", "periods_to_settle", "periods_to_settle.low",
           "periods_to_settle.high", "periods_to_settle.q50"]
    for i in range(n_firms):
        f = f"firm{i + 1}"
        out += [f"event_price_before.{f}", f"event_price_before.{f}.low", f"event_price_before.{f}.high",
                f"event_price_change.{f}", f"event_price_change.{f}.low", f"event_price_change.{f}.high"]
    return out


def _automaton_seats(learner) -> list[int]:
    """The seats (from 0) an automaton holds in a line-up (none when every seat holds a learner)."""
    if not isinstance(learner, list):
        return []
    return [i for i, s in enumerate(learner) if not isinstance(s, QLearner)]


def trigger_names(firm: int) -> list[str]:
    """The columns of an automaton's punishments during learning (after every other column of a learn cell).

    Parameters
    ----------
    firm : int
        The automaton's firm, from 1.

    Returns
    -------
    list of str
    """
    f = f"firm{firm}"
    return [f"triggered.{f}", f"triggered.{f}.low", f"triggered.{f}.high", f"triggers.{f}", f"triggers.{f}.low",
            f"triggers.{f}.high", f"first_trigger.{f}", f"last_trigger.{f}", f"punishment_share.{f}",
            f"punishment_share.{f}.low", f"punishment_share.{f}.high", f"exploration_at_first_trigger.{f}",
            f"exploration_at_last_trigger.{f}", f"punishing_at_end.{f}"]


def _run_learn(cfg: dict, ctx: CellContext) -> CellResult:
    if cfg.get("waiting"):
        # an event's saved learners, written by a first run after this file was checked: read them now
        _ready(cfg["doc"])
        cfg = _prepare_learn(cfg["doc"])
    res = learn_analysis(cfg["spec"], cell=ctx.index, workers=ctx.threads, progress=ctx.progress,
                         save_to=saved_path(cfg.get("save_to"), ctx))
    return CellResult(learn_metrics(res), learn_arrays(res), result=res)


def learn_metrics(res: LearnResult) -> dict:
    """The flat metrics of a learn result (the columns of ``results.csv``).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    dict of str to float
        None where a value is not defined (stored as nan).
    """
    sm = res.summary
    n = res.n_firms
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
    for stem in ("deviation_pays", "returned", "periods_to_return"):
        m[stem], m[f"{stem}.low"], m[f"{stem}.high"] = sm[stem]["mean"], sm[stem]["low"], sm[stem]["high"]
    for i in range(n):
        lp = sm["limit_profits"][i]
        m[f"limit_profit.firm{i + 1}.low"], m[f"limit_profit.firm{i + 1}.high"] = lp["low"], lp["high"]
    bm = sm["benchmarks"]
    for i in range(n):
        f = f"firm{i + 1}"
        m[f"analytic.nash_price.{f}"] = bm["nash_prices"][i]
        m[f"analytic.collusive_price.{f}"] = bm["collusive_prices"][i]
        m[f"analytic.nash_profit.{f}"] = bm["nash_profits"][i]
        m[f"analytic.collusive_profit.{f}"] = bm["collusive_profits"][i]
    for a in res.automata:
        f = f"firm{a['firm']}"
        for stem in ("triggered", "triggers", "punishment_share"):
            est = a[stem]
            m[f"{stem}.{f}"] = est["share"] if "share" in est else est["mean"]
            m[f"{stem}.{f}.low"], m[f"{stem}.{f}.high"] = est["low"], est["high"]
        m[f"first_trigger.{f}"] = a["first_trigger"]["median"]
        m[f"last_trigger.{f}"] = a["last_trigger"]["median"]
        m[f"exploration_at_first_trigger.{f}"] = a["exploration_first"]["median"]
        m[f"exploration_at_last_trigger.{f}"] = a["exploration_last"]["median"]
        m[f"punishing_at_end.{f}"] = a["punishing_at_end"]["share"]
    if res.event:
        ev = res.event
        for k, src in (("", "share"), (".low", "low"), (".high", "high")):
            m[f"settled_again{k}"] = ev["settled"][src]
        sp = ev["settle_periods"]
        for k, src in (("", "mean"), (".low", "low"), (".high", "high"), (".q50", "q50")):
            m[f"periods_to_settle{k}"] = sp[src]
        for i in range(n):
            f = f"firm{i + 1}"
            ch = ev["change"][i]
            for k, src in (("", "mean"), (".low", "low"), (".high", "high")):
                m[f"event_price_before.{f}{k}"] = ev["before"][i][src]
                m[f"event_price_change.{f}{k}"] = ch[src]
        mg = ev.get("merger", {})
        for i, p in enumerate(mg.get("nash_prices", [])):
            m[f"analytic.merger_nash_price.firm{i + 1}"] = p
        if "merger" in ev:
            # nan where the static merger effect is not available (a homogeneous good)
            nan = {"mean": math.nan, "low": math.nan, "high": math.nan}
            pg = mg.get("profit_gain_after") or nan
            for k, src in (("", "mean"), (".low", "low"), (".high", "high")):
                m[f"profit_gain_after_merger{k}"] = pg[src]
                for i in range(n):
                    above = (mg.get("above_nash_after") or [nan] * n)[i]
                    m[f"limit_price_above_merger_nash.firm{i + 1}{k}"] = above[src]
    alt = sm.get("alternating")
    if alt:
        for name, (entry, src) in ALTERNATING_NAMES.items():
            m[name] = alt[entry][src]
    for stem, entry in SIGNAL_NAMES.items() if res.shock_response else ():
        e = res.shock_response[entry]
        m[stem], m[f"{stem}.low"], m[f"{stem}.high"] = e["value"], e.get("low"), e.get("high")
    ep = res.error_play
    if ep:
        named = [("error_play_profit_gain", ep["profit_gain"]), ("error_play_gain_change", ep["gain_change"])]
        named += [(f"error_play_price.firm{i + 1}", e) for i, e in enumerate(ep["prices"])]
        for stem, e in named:
            m[stem], m[f"{stem}.low"], m[f"{stem}.high"] = e["value"], e.get("low"), e.get("high")
    return m


def learn_arrays(res: LearnResult) -> dict:
    """The arrays of a learn result stored with its cell (``arrays.json``).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    dict of str to list
        ``impulse.prices`` (T + 2 rows of n_firms mean prices, when any session was analysed) and the histogram
        of profit gains (``profit_gain_histogram.edges``, ``.counts``).
    """
    sm = res.summary
    arrays = {}
    ir = sm["impulse_response"]["prices"]
    if ir["mean"]:
        arrays["impulse.prices"] = ir["mean"]
    arrays["profit_gain_histogram.edges"] = sm["profit_gain_histogram"]["edges"]
    arrays["profit_gain_histogram.counts"] = sm["profit_gain_histogram"]["counts"]
    return arrays


# what the learners are, by [learning] family, for the setup line of the evidence
_FAMILY_WORDS = {"q": "Q-learning", "ucb": "upper-confidence-bound bandits", "thompson": "Thompson-sampling bandits",
                 "fixed": "fixed policies read from a saved run"}


def _setting(v) -> str:
    # a whole number written as a float in the file (max_periods = 2e6) reads as the number, not as 2000000.0
    if isinstance(v, float) and v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    return str(v)


# one seat of a family, for the line-up's setup line
_SEAT_WORDS = {"q": "Q-learner", "ucb": "upper-confidence-bound bandit", "thompson": "Thompson-sampling bandit",
               "fixed": "fixed policy read from a saved run"}


def _lineup_words(doc: dict, family: str) -> str:
    """The seats of a ``[[strategies]]`` line-up in words, in order: each entry's family (a learner) or strategy (an
    automaton), with its number of seats (``"all"``: the market's firms)."""
    parts = []
    for e in doc.get("strategies") or []:
        if not isinstance(e, dict):
            continue
        name = e.get("strategy")
        if name == "qlearning":
            fam = e.get("family", family)
            name = _SEAT_WORDS.get(fam, str(fam))
        seats = e.get("seats", 1)
        if seats == "all":
            seats = (doc.get("market") or {}).get("n_firms", "all")
        parts.append(f"{name} ({seats} seats)" if seats != 1 else str(name))
    return "; ".join(parts)


def _describe_learn(doc: dict) -> list[str]:
    lt = doc.get("learning", {})
    run = doc.get("run", {})
    params = ", ".join(f"{k} {_setting(v)}" for k, v in lt.items() if k != "family") or "the published defaults"
    who = f"Learners: {_FAMILY_WORDS.get(lt.get('family', 'q'), str(lt.get('family')))} ({params})"
    if doc.get("strategies"):
        # a line-up: its seats in order, and [learning]'s settings, which serve every learner without its own
        who = f"Line-up: {_lineup_words(doc, lt.get('family', 'q'))}; [learning]: {params}"
    return [f"Market: {describe_market(doc.get('market', {}))}",
            who,
            f"Sessions: {run.get('sessions', 100)}, seed {run.get('seed', 0)}"]


KIND = Kind(
    name="learn",
    tables=("market", "learning", "impulse", "run", "strategies", "event"),
    prepare=_prepare_learn,
    ready=_ready,
    inputs=_inputs,
    read=_read,
    run=_run_learn,
    metric_names=_learn_names,
    result_type=LearnResult,
    headline=("profit_gain", "converged", "near_collusive", "rival_price_cut", "deviation_pays"),
    describe=_describe_learn,
    summary="sessions of pricing algorithms (learners, and automata beside them): limit outcomes, profit gain and "
            "impulse response",
    assumptions=GENERAL_ASSUMPTIONS + COMMON + (
        PartAssumption("Learned price wars are measured after one forced demand draw three standard deviations below "
                       "the median, the sessions learning on from their final states, and say what such learners can "
                       "learn in this model, not what any firm did.", "price_cut_share"),
    ),
    cell_assumptions=cell_assumptions,
)
