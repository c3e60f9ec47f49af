"""The tables of a learning experiment, read and validated: the one reader of ``[learning]``, ``[impulse]``,
``[run]`` and a learning ``[[strategies]]`` line-up (the ``learn`` kind, the tournament's learning entrants and the
library use it).
"""

from __future__ import annotations

from pathlib import Path

from sim.core.errors import InputError
from sim.core.files import relative_file_name
from sim.core.parallel import usable_cores
from sim.core.params import Integer, Options, Real, optional
from sim.core.tables import refuse_unknown
from sim.learning.alternating import TIMINGS, check_alternating
from sim.learning.events import (
    EVENT_KEYS,
    EVENT_KINDS,
    EVENT_PERIODS,
    EVENT_PERIODS_DEFAULT,
    check_event,
    event_from_table,
    with_saved_grids,
)
from sim.learning.lineup import MEMORY_SHARE, available_memory, compile_lineup
from sim.learning.merger import refuse_merged
from sim.learning.noisy_prices import PRICE_NOISE, check_noisy_lineup
from sim.learning.results import LIMIT_PERIODS
from sim.learning.saved import check_start, check_states, load_learners
from sim.learning.shocks import SHOCK_CONSTRAINTS, measures_price_wars, shock_code
from sim.learning.signals import SIGNAL_BAND, SIGNAL_CONSTRAINTS, check_saved_observe, check_signal_lineup
from sim.models.market import market_from_dict
from strategies import strategy_from_dict
from strategies.qlearning import QLearner
from strategies.registry import check_seats, known_names

__all__ = [
    "EXPERIMENT_KEYS",
    "IMPULSE_KEYS",
    "LEARNER_PARAMS",
    "LEARNING_KEYS",
    "RUN_CONSTRAINTS",
    "RUN_KEYS",
    "SETTING_DEFAULTS",
    "learner_from_entry",
    "learning_from_dict",
    "settings_listing",
]

#: the settings of a run of learning sessions (arguments of :func:`sim.learning.session.learn`), as data
RUN_CONSTRAINTS = {
    "sessions": Integer(1, 10_000_000),
    "seed": Integer(0, 2**63 - 1),
    "convergence": Integer(1, 10**12),
    "max_periods": Integer(1, 10**15),
    "deviator": Integer(0, 3),
    "response_periods": Integer(0, 10_000),
    "limit_periods": Integer(1, 100_000_000),
    "near": Real(0, 1),
    "workers": optional(Integer(1, 1024)),
    "cell": Integer(0, 2**31),
    "confidence": Real(0, 1, closed="neither"),
    "timing": Options(*TIMINGS),
    **SHOCK_CONSTRAINTS,
    **SIGNAL_CONSTRAINTS,
}
#: the defaults of the run's settings (:func:`learning_from_dict`; listed by ``supergame list learners``)
SETTING_DEFAULTS = {"convergence": 100_000, "max_periods": 1_000_000_000, "near": 0.1, "limit_periods": LIMIT_PERIODS,
                    "sessions": 100, "seed": 0, "workers": None, "confidence": 0.95, "response_periods": 15,
                    "timing": "simultaneous", "demand_noise": "lognormal", "demand_sigma": 0.0, "observe": "prices",
                    "signal_band": SIGNAL_BAND, "price_noise": PRICE_NOISE}
#: parameters of a Q-learner in [learning] and in a ``strategy = "qlearning"`` entry
LEARNER_PARAMS = ("alpha", "beta", "delta", "m", "xi", "grid", "k", "init", "update", "counterfactual_share", "family",
                  "exploration", "noise", "policy_from", "firm", "session")
#: keys of the tables a learning experiment reads, in the order error messages list them
LEARNING_KEYS = (*LEARNER_PARAMS, "convergence", "max_periods", "near", "limit_periods", "save_to", "continue_from",
                 "timing", "demand_noise", "demand_sigma", "observe", "signal_band", "price_noise")
IMPULSE_KEYS = ("firm", "action", "periods")
RUN_KEYS = ("sessions", "seed", "workers", "confidence")
EXPERIMENT_KEYS = ("name", "kind", "description")
_READERS = {"market": None, "learning": LEARNING_KEYS, "impulse": IMPULSE_KEYS, "run": RUN_KEYS, "event": EVENT_KEYS}


def learner_from_entry(entry: dict, base: dict, key: str, skip=("strategy",), validate: bool = True):
    """A :class:`~strategies.qlearning.QLearner` from an experiment-file entry with ``strategy = "qlearning"``:
    the parameters ``base`` (the [learning] table's) overridden by the entry's own.

    Parameters
    ----------
    entry : dict
        The entry (``strategy = "qlearning"``, learner parameters, and the keys in ``skip``).
    base : dict
        Default learner parameters (keys of :data:`LEARNER_PARAMS`).
    key : str
        Key path of the entry in error messages, e.g. ``"strategies[2]"``.
    skip : tuple of str
        Keys of the entry that are not learner parameters (read by the caller).
    validate : bool
        Check the parameters now (errors name ``key.parameter``).

    Returns
    -------
    strategies.qlearning.QLearner

    Raises
    ------
    InputError
        ``key.name`` for an unknown parameter or a bad value.
    """
    params = dict(base)
    for name, v in entry.items():
        if name in skip:
            continue
        if name not in LEARNER_PARAMS:
            raise InputError(f"{key}.{name}", f"unknown parameter of qlearning; allowed: {', '.join(LEARNER_PARAMS)}")
        params[name] = v
    if isinstance(params.get("policy_from"), str):
        # an experiment file names files relative to the current folder, as save_to and continue_from
        relative_file_name(f"{key}.policy_from", params["policy_from"])
    strat = QLearner(**params)
    if validate:
        strat.spec(prefix=key)
    return strat


def _lineup_from_entries(entries, base: dict, n_firms: int) -> list:
    """One strategy per firm from ``[[strategies]]``: ``strategy = "qlearning"`` entries take the
    [learning] parameters, overridden by their own; any other name is an automaton of the engine's
    registry (see ``supergame simulate``)."""
    if not isinstance(entries, list) or not entries:
        raise InputError("strategies", "must be a non-empty list of [[strategies]] entries")
    out = []
    total = 0
    for k, t in enumerate(entries):
        key = f"strategies[{k + 1}]"
        if not isinstance(t, dict):
            raise InputError(key, f"must be a table with a 'strategy' key, got {t!r}")
        name = t.get("strategy")
        if name != QLearner.name and (not isinstance(name, str) or name not in known_names()):
            what = "missing" if name is None else f"unknown: {name!r}"
            raise InputError(f"{key}.strategy", f"{what}; 'qlearning' for a learner (any family: q, ucb, thompson or "
                                                f"fixed), or an automaton: {', '.join(known_names())}")
        seats = check_seats(f"{key}.seats", t.get("seats", 1), n_firms)
        if name == QLearner.name:
            strat = learner_from_entry(t, base, key, skip=("strategy", "seats"))
        else:
            strat = strategy_from_dict(t, key)
        total += seats
        if total <= n_firms:  # no clones beyond the market's firms (refused below)
            out.extend(strat.clone() for _ in range(seats))
    if total != n_firms:
        raise InputError("strategies", f"the line-up has {total} seats but the market has {n_firms} firms; give "
                                       "one strategy per firm (use seats to repeat one)")
    if not any(isinstance(x, QLearner) for x in out):
        raise InputError("strategies", "the line-up has no learner (strategy = 'qlearning'); use `supergame "
                                       "simulate` for automata only")
    return out


def learning_from_dict(doc: dict, overrides: dict | None = None) -> dict:
    """Validated settings of a learning experiment from its tables.

    Reads ``[experiment]`` (``kind``, if given, must be ``"learn"``), ``[market]``
    (:func:`sim.market_from_dict`), ``[learning]`` (the learners' parameters, ``convergence``,
    ``max_periods``, ``near``, ``limit_periods``, ``timing``), ``[impulse]`` (``firm`` counted from 1, ``action``
    -- ``"best_response"`` or a number -- and ``periods``), ``[run]`` (``sessions``, ``seed``,
    ``workers``, ``confidence``) and an optional ``[[strategies]]`` line-up (``strategy = "qlearning"`` entries
    take the [learning] parameters, overridden by their own; any other name is an automaton). Unknown keys
    are refused (:func:`sim.core.tables.refuse_unknown`), and the line-up is compiled, so that a state
    space too large for the memory is refused here, before any work.

    Parameters
    ----------
    doc : dict
        The experiment document (a dict of tables).
    overrides : dict, optional
        ``"table.key" -> (value, name)``: the value replaces the table's (a market key, or a key of
        [learning], [impulse] or [run]), and an error about it names ``name`` instead of the key path.

    Returns
    -------
    dict
        ``market`` (:class:`sim.Market`), ``learner`` (a QLearner for every seat, or one strategy per
        seat), ``settings`` (keyword arguments of :func:`sim.learning.session.learn`; ``deviator`` counted
        from 0; ``timing`` only when it is ``"alternating"``), ``save_to`` (``learning.save_to``: where to save
        the learners at the end, or None) and ``start``
        (the :class:`sim.learning.saved.SavedLearners` of ``learning.continue_from``, read and checked against
        the line-up, or None), ``event`` (the :class:`sim.learning.events.Event` of an ``[event]`` table, or None)
        ``waiting`` (an event whose saved file does not exist yet: it is read when the run starts, once the
        first run has written it) and ``unused`` (``[learning]`` keys given but not used by these learners, key
        path -> reason, for the report).

    Raises
    ------
    InputError
        With the key path (or the override's name) of the first bad value.
    """
    overrides = dict(overrides or {})
    try:
        return _read_tables(doc, overrides)
    except InputError as exc:
        for path, (_value, name) in overrides.items():
            if exc.key == path or exc.key.startswith((path + ".", path + "[")):
                raise InputError(name, exc.message) from None
        raise


def _table(doc: dict, name: str, overrides: dict) -> dict:
    """Table ``name`` of the document (unknown keys refused), with the overrides of its keys applied."""
    if name == "market":
        tab = doc.get("market", {})
        if not isinstance(tab, dict):
            raise InputError("market", f"must be a table, got {tab!r}")
        tab = dict(tab)
    else:
        tab = dict(refuse_unknown(doc.get(name, {}), name, _READERS[name]))
    for path, (value, _name) in overrides.items():
        t, _, key = path.partition(".")
        if t == name:
            tab[key] = value
    return tab


def _setting(tab: dict, table: str, key: str, name: str, default):
    return RUN_CONSTRAINTS[name].check(f"{table}.{key}", tab.get(key, default))


def _impulse_action(it: dict):
    """``impulse.action``: ``"best_response"`` or a number (a number given as text is read as one)."""
    action = it.get("action", "best_response")
    if isinstance(action, str) and action != "best_response":
        try:
            action = float(action)
        except ValueError:
            raise InputError("impulse.action", f"must be 'best_response' or a number, got {action!r}") from None
    if not isinstance(action, str):
        action = Real(0, None).check("impulse.action", action)
    return action


def _read_tables(doc: dict, overrides: dict) -> dict:
    if not isinstance(doc, dict):
        raise InputError("experiment", f"must be a document of tables, got {doc!r}")
    for path in overrides:
        table, _, key = path.partition(".")
        allowed = _READERS.get(table, ())
        if table not in _READERS or not key or (allowed is not None and key not in allowed):
            raise ValueError(f"cannot override {path!r}")
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", EXPERIMENT_KEYS)
    if "kind" in exp and exp["kind"] != "learn":
        raise InputError("experiment.kind", f"this command runs kind = 'learn' experiments, got {exp['kind']!r}")
    if "market" not in doc and not any(p.startswith("market.") for p in overrides):
        raise InputError("market", "missing: the [market] table describes the market")
    market = market_from_dict(_table(doc, "market", overrides))
    n_firms = market.spec().n_firms
    lt, it, rt = (_table(doc, name, overrides) for name in ("learning", "impulse", "run"))
    base = {k: lt[k] for k in LEARNER_PARAMS if k in lt}
    if isinstance(base.get("policy_from"), str):
        relative_file_name("learning.policy_from", base["policy_from"])
    learner = QLearner(**base)
    learner.spec(prefix="learning")
    if "strategies" in doc:
        learner = _lineup_from_entries(doc["strategies"], base, n_firms)
    event, start = _event(doc, overrides, lt), None
    if event is not None and Path(lt["continue_from"]).is_file():
        # after an event the learners keep the saved grids, whatever the changed market's own grid would be
        start = load_learners(lt["continue_from"], "learning.continue_from")
        learner = with_saved_grids(learner, start, n_firms, event)
    d = SETTING_DEFAULTS
    settings = {
        "convergence": _setting(lt, "learning", "convergence", "convergence", d["convergence"]),
        "max_periods": _setting(lt, "learning", "max_periods", "max_periods", d["max_periods"]),
        "near": _setting(lt, "learning", "near", "near", d["near"]),
        "limit_periods": _setting(lt, "learning", "limit_periods", "limit_periods", d["limit_periods"]),
        "sessions": _setting(rt, "run", "sessions", "sessions", d["sessions"]),
        "seed": _setting(rt, "run", "seed", "seed", d["seed"]),
        "workers": _setting(rt, "run", "workers", "workers", d["workers"]),
        "confidence": _setting(rt, "run", "confidence", "confidence", d["confidence"]),
        "response_periods": _setting(it, "impulse", "periods", "response_periods", d["response_periods"]),
    }
    if _setting(lt, "learning", "timing", "timing", d["timing"]) != "simultaneous":
        settings["timing"] = lt["timing"]
    _demand_shock(lt, settings, doc)
    _signal(lt, settings, doc)
    firm = Integer(1, n_firms).check("impulse.firm", it.get("firm", 1))
    settings["deviator"] = firm - 1  # learn() counts seats from 0; every output counts firms from 1
    unused = _unused(lt, settings, doc.get("strategies"), n_firms)
    settings["deviation"] = _impulse_action(it)
    # the line-up and its memory, checked before any work (the run repeats this, cheaply)
    workers = settings["workers"] or usable_cores()
    lineup = compile_lineup(market, learner, workers=min(workers, settings["sessions"]), random_automata="estimate",
                            alternating="timing" in settings)
    if "limit_periods" in lt and lineup.limit_exact:
        unused["learning.limit_periods"] = ("no automaton acts at random, so greedy play after learning is a "
                                            "deterministic path whose cycle is found exactly, not simulated")
    if settings.get("observe") == "noisy_prices":
        check_noisy_lineup(lineup)
    elif "observe" in settings:
        check_signal_lineup(lineup)
    save_to = _file_name(lt, "save_to")
    _check_kept_memory(lineup, settings, save_to is not None, event)
    continue_from = _file_name(lt, "continue_from")
    if "timing" in settings:
        check_alternating(lineup, continue_from, save_to is not None, event)
    if continue_from is not None and event is None:
        start = load_learners(continue_from, "learning.continue_from")
        refuse_merged(start, "learning.continue_from")
        check_start(start, lineup, market.to_dict(), settings["sessions"], "learning.continue_from")
    elif start is not None:
        check_event(start, lineup, event, settings["sessions"], "learning.continue_from", market.to_dict())
    if start is not None:
        check_saved_observe(start.header, settings.get("observe", "prices"), "learning.observe")
        check_states(start, lineup, settings.get("observe", "prices"), event is not None and event.kind == "entry")
    return {"market": market, "learner": learner, "settings": settings, "save_to": save_to, "start": start,
            "event": event, "waiting": event is not None and start is None, "unused": unused}


def _demand_shock(lt: dict, settings: dict, doc: dict) -> None:
    """``learning.demand_noise`` and ``learning.demand_sigma`` (:mod:`sim.learning.shocks`), written into the
    settings only with a shock (``demand_sigma > 0``), which needs simultaneous moves and no event."""
    code, sigma = shock_code(lt.get("demand_noise", SETTING_DEFAULTS["demand_noise"]),
                             lt.get("demand_sigma", SETTING_DEFAULTS["demand_sigma"]))
    if not code:
        return
    if "timing" in settings or "event" in doc:
        raise InputError("learning.demand_sigma", "a demand shock needs simultaneous moves (learning.timing = "
                                                  "'simultaneous') and no [event]")
    settings["demand_noise"], settings["demand_sigma"] = lt.get("demand_noise", SETTING_DEFAULTS["demand_noise"]), sigma


def _signal(lt: dict, settings: dict, doc: dict) -> None:
    """``learning.observe`` with ``learning.signal_band`` (:mod:`sim.learning.signals`) or ``learning.price_noise``
    (:mod:`sim.learning.noisy_prices`), written into the settings only with the profit signal or noisy prices,
    which need simultaneous moves and no event."""
    d = SETTING_DEFAULTS
    observe = SIGNAL_CONSTRAINTS["observe"].check("learning.observe", lt.get("observe", d["observe"]))
    band = SIGNAL_CONSTRAINTS["signal_band"].check("learning.signal_band", lt.get("signal_band", d["signal_band"]))
    noise = SIGNAL_CONSTRAINTS["price_noise"].check("learning.price_noise", lt.get("price_noise", d["price_noise"]))
    if observe == "prices":
        return
    if "timing" in settings or "event" in doc:
        raise InputError("learning.observe", f"{observe!r} needs simultaneous moves (learning.timing = "
                                             "'simultaneous') and no [event]")
    settings["observe"] = observe
    if observe == "noisy_prices":
        settings["price_noise"] = float(noise)
    else:
        settings["signal_band"] = float(band)


#: the Q-learning parameters a bandit or a fixed policy does not use (``update`` and given initial values are refused)


#: the learner keys each family reads; a seat that deviates in the impulse response also reads ``delta`` (the value
#: of its deviation is discounted with it)
_USES = {"q": frozenset(("alpha", "beta", "delta", "k", "init", "m", "xi", "grid", "update", "counterfactual_share")),
         "ucb": frozenset(("m", "xi", "grid", "exploration", "noise")),
         "thompson": frozenset(("m", "xi", "grid", "exploration", "noise")),
         "fixed": frozenset()}
_WHY = {"q": "a Q-learner does not use it",
        "ucb": "an upper-confidence-bound bandit keeps no state and learns by its own rule",
        "thompson": "a Thompson-sampling bandit keeps no state and learns by its own rule",
        "fixed": "a fixed policy neither learns nor explores; its grid and memory are the saved learner's"}
#: the learner keys whose use is checked (the policy file's keys are checked where they are read)
_CHECKED = ("alpha", "beta", "delta", "k", "init", "m", "xi", "grid", "update", "counterfactual_share", "exploration",
            "noise")


def _unused(lt: dict, settings: dict, entries, n_firms: int) -> dict:
    """The keys a run accepts but does not use, each with the reason, for the report (key path -> words): the signal
    band without the profit signal, the price error without noisy prices, a learner key of ``[learning]`` that no
    seat taking it from there uses, and a ``[[strategies]]`` entry's own learner key that none of its seats uses
    (``entries``: the line-up's entries, or None; ``settings["deviator"]``: the seat whose ``delta`` values its
    deviation)."""
    out = {}
    observe = settings.get("observe", "prices")
    if "signal_band" in lt and observe != "own_profit":
        out["learning.signal_band"] = f"the learners do not see the profit signal (observe = {observe!r})"
    if "price_noise" in lt and observe != "noisy_prices":
        out["learning.price_noise"] = f"the learners do not see prices with error (observe = {observe!r})"
    family = lt.get("family", "q")
    # every seat as (its entry, its family); an automaton's family is None, and without a line-up every seat is
    # [learning]'s
    seats = [(None, family)] * n_firms
    if entries:
        seats = []
        for k, e in enumerate(entries):
            fam = e.get("family", family) if e.get("strategy") == "qlearning" else None
            seats += [(k, fam)] * check_seats(f"strategies[{k + 1}].seats", e.get("seats", 1), n_firms)
    dev = settings.get("deviator", 0)
    if seats[dev][1] is None:
        # an automaton deviates: its deviation is valued with the first learner's discount factor
        # (sim.learning.results.deviator_discount)
        dev = next(i for i, (_k, fam) in enumerate(seats) if fam is not None)

    def uses(i: int, key: str) -> bool:
        fam = seats[i][1]
        return fam is not None and (key in _USES[fam] or (key == "delta" and i == dev))

    for key in _CHECKED:
        if key in lt:
            takers = [i for i, (k, fam) in enumerate(seats) if fam is not None and (k is None or key not in entries[k])]
            if not any(uses(i, key) for i in takers):
                fams = sorted({seats[i][1] for i in takers})
                out[f"learning.{key}"] = (_WHY[fams[0]] if len(fams) == 1 else
                                          "every learner's entry gives its own" if not fams else
                                          "none of the seats that take it from [learning] uses it")
    for k, e in enumerate(entries or []):
        mine = [i for i, (kk, fam) in enumerate(seats) if kk == k and fam is not None]
        for key in _CHECKED:
            if mine and key in e and not any(uses(i, key) for i in mine):
                out[f"strategies[{k + 1}].{key}"] = _WHY[seats[mine[0]][1]]
    return out


def _check_kept_memory(lineup, settings: dict, saving: bool, event) -> None:
    """Refuse, before any work, a run that keeps every session's learners in memory (to save them, or to go on from
    each session's final state: the response to an adverse demand draw, play with noisy prices after learning) when
    they would not fit: ``run.sessions`` times one session's Q-values, greedy actions and bandit statistics."""
    noisy = settings.get("observe") == "noisy_prices"
    if not (saving or noisy or measures_price_wars(settings, event)):
        return
    q = lineup.q0
    per = q.nbytes + q[..., 0].nbytes + 2 * q.shape[0] * q.shape[2] * 8 + 8 * (lineup.n_seats * 5 + 8)
    need, avail = settings["sessions"] * per, MEMORY_SHARE * available_memory()
    if need > avail:
        why = "to save them (learning.save_to)" if saving else "to go on from each session's final state"
        raise InputError("run.sessions", f"{settings['sessions']} sessions' learners kept {why} need "
                                         f"{need / 1e9:.3g} GB, more than the {avail / 1e9:.3g} GB that may be used; "
                                         "run fewer sessions or reduce m, k or the number of firms")


def _event(doc: dict, overrides: dict, lt: dict):
    """The ``[event]`` table (None without one); it continues the saved learners of ``learning.continue_from``."""
    if "event" not in doc:
        return None
    event = event_from_table(_table(doc, "event", overrides))
    if _file_name(lt, "continue_from") is None:
        raise InputError("learning.continue_from", "an [event] continues saved learners: give the file a first run "
                                                   "saved them to (learning.save_to)")
    return event


def _file_name(tab: dict, key: str) -> str | None:
    """``learning.save_to`` or ``learning.continue_from``: a relative path (to the current folder, or to the run
    folder for ``save_to`` in a run), without ``..``."""
    value = tab.get(key)
    if value is None:
        return None
    return relative_file_name(f"learning.{key}", value)


def settings_listing() -> list[dict]:
    """The settings of a learn experiment besides the learners' parameters, for ``supergame list learners``: each
    key path with what it accepts (the validator's own constraint where there is one) and its default.

    Returns
    -------
    list of dict
        ``name`` (key path), ``allowed`` and ``default`` (``None``: none).
    """
    c, d = RUN_CONSTRAINTS, SETTING_DEFAULTS
    rows = [(f"learning.{k}", c[k].describe(), d[k]) for k in
            ("convergence", "max_periods", "near", "limit_periods", "timing", "demand_noise", "demand_sigma",
             "observe", "signal_band", "price_noise")]
    rows += [("learning.save_to", "a relative file name (saved learners written there)", None),
             ("learning.continue_from", "a relative file name (saved learners read from there)", None)]
    rows += [(f"run.{k}", c[k].describe(), d[k]) for k in ("sessions", "seed", "workers", "confidence")]
    rows += [("impulse.firm", "an integer in [1, number of firms]", 1),
             ("impulse.action", "'best_response' or a number >= 0", "best_response"),
             ("impulse.periods", c["response_periods"].describe(), d["response_periods"]),
             ("event.kind", f"one of {', '.join(repr(k) for k in EVENT_KINDS)} (required in an [event])", None),
             ("event.periods", EVENT_PERIODS.describe(), EVENT_PERIODS_DEFAULT),
             ("event.firms", "the merging firms by number from 1 (kind = 'merger' only)", None)]
    out = [{"name": n, "allowed": a, "default": v} for n, a, v in rows]
    for row in out:
        if row["name"] == "run.workers":
            row["default_words"] = "every usable core"
    return out
