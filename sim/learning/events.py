"""Learners that keep running after their market changes: saved sessions continued after an event.

A run of learning sessions is saved (``[learning] save_to``) once the learners have converged; a second run continues
every saved session (``[learning] continue_from``) after an *event*, given in its ``[event]`` table:

``kind = "market"``
    a cost or demand shock: the second run's ``[market]`` differs from the saved one (same firms); the learners keep
    their grids, Q-values, history and random stream, and go on learning in the changed market;
``kind = "entry"``
    a new firm enters, playing an automaton or priced by a new learner: the second run's market has one more firm,
    and its line-up is the saved one with the entrant's strategy as the last ``[[strategies]]`` entry. The learners'
    states now include the entrant's last price; each learner starts from what it knew, whatever the entrant's price
    (the Q-values of every new state are those of the saved state it extends). An automaton entrant starts in its
    initial state, its last price taken to be the one it plays there; a learner entrant starts as a new learner of
    its table would (its initial Q-values and greedy actions, no bandit statistics), its last price taken to be its
    initial greedy action in the first state (the same in every state under the usual initial values), and its
    exploration follows the session's clock like everyone's (``exp(-beta t)``, ``t`` from the saved session's start).
``kind = "merger"``
    two or more learners' products merge into one firm (``firms``: the merging firms, numbered from 1): the market
    and the line-up are the saved ones; each merged product is still priced by its own learner, which keeps its
    grid, Q-values, history and random stream, but is rewarded with the merged firm's profit (the sum of the merged
    products' profits; :mod:`sim.learning.merger`, which also gives the static Nash prices after the merger).
``kind = "protocol"``
    the learners' settings change (update rule, learning rate, exploration, discount factor, a bandit's exploration
    and noise) in the saved market with the saved line-up: each learner goes on from its saved state under its new
    settings (:mod:`sim.learning.protocol`, which refuses a changed market and an event that changes nothing).

Whatever the event, the convergence counter is reset at the event (a session counts as settled again once no greedy
strategy has changed for ``convergence`` periods after it), ``max_periods`` counts the periods after the event, and the
learners' exploration goes on from where it was (``exp(-beta t)``, ``t`` counted from the start of the saved
session). The path of prices played in the ``periods`` periods after the event is recorded in bins (means over
equal spans of periods; the bin before the event holds the prices of the last period before it), and the periods
from the event until the last change of a greedy strategy measure how long the learners took to settle again.
Calvano, Calzolari, Denicolo and Pastorello (2020, AER) study learned responses to a forced one-period deviation;
Asker, Fershtman and Pakes (2022, AEA Papers and Proceedings 112) stress that learned prices depend on how the
algorithms keep learning: here the learners keep learning through a lasting change.
"""

from __future__ import annotations

import copy
import json
import math
from dataclasses import dataclass

import numpy as np

import strategies.step as SS
from sim.core.errors import InputError
from sim.core.params import Integer
from sim.core.records import to_plain
from sim.core.tables import refuse_unknown
from sim.learning import kernel as K
from sim.learning.inputs import STATUS_CAP, STATUS_CONVERGED, new_triggers
from sim.learning.merger import check_merger, refuse_merged
from sim.learning.protocol import check_protocol, protocol_changes, protocol_words
from sim.learning.saved import SavedLearners, _first_difference, check_family, describe_layout
from sim.simulation.results import mean_estimate, wilson_estimate
from strategies.qlearning import QLearner

__all__ = ["EVENT_KEYS", "EVENT_KINDS", "EVENT_PERIODS", "EVENT_PERIODS_DEFAULT", "Event", "adapt_saved",
           "event_from_table", "event_summary", "run_tracked",
           "with_saved_grids"]

#: keys of the [event] table
EVENT_KEYS = ("kind", "periods", "firms")
#: what may happen: a changed market (cost or demand shock), the entry of a firm playing an automaton, or a merger
#: of learners' products into one firm, or a change of the learners' protocol (their learning settings)
EVENT_KINDS = ("market", "entry", "merger", "protocol")
#: periods of the price path recorded after an event: what they may be, and the default
EVENT_PERIODS = Integer(1, 10_000_000)
EVENT_PERIODS_DEFAULT = 1000
#: the price path after an event is kept in at most this many bins
TRACK_BINS = 100


@dataclass(frozen=True)
class Event:
    """A validated ``[event]`` table.

    Attributes
    ----------
    kind : str
        ``"market"``, ``"entry"``, ``"merger"`` or ``"protocol"``.
    periods : int
        Periods after the event whose prices are recorded (a multiple of the number of bins).
    bins : int
        Bins of the recorded price path.
    firms : tuple of int
        A merger's merging firms, numbered from 1, increasing (empty for other events).
    """

    kind: str
    periods: int
    bins: int
    firms: tuple = ()


def event_from_table(tab) -> Event:
    """Read the ``[event]`` table.

    Parameters
    ----------
    tab : dict
        ``kind`` (required: ``"market"``, ``"entry"``, ``"merger"`` or ``"protocol"``), ``periods`` (default 1000,
        1 to 10**7) and, for a merger only (required there), ``firms``: two or more distinct firm numbers from 1.

    Returns
    -------
    Event
        ``periods`` rounded down to a multiple of the bins (at most :data:`TRACK_BINS`).

    Raises
    ------
    InputError
        Naming ``event.kind``, ``event.periods`` or ``event.firms``.
    """
    tab = refuse_unknown(tab, "event", EVENT_KEYS)
    kind = tab.get("kind")
    if kind not in EVENT_KINDS:
        raise InputError("event.kind", f"must be one of {', '.join(repr(k) for k in EVENT_KINDS)}, got {kind!r}")
    periods = EVENT_PERIODS.check("event.periods", tab.get("periods", EVENT_PERIODS_DEFAULT))
    bins = min(TRACK_BINS, periods)
    return Event(kind, periods // bins * bins, bins, _merging_firms(tab, kind))


def _merging_firms(tab: dict, kind: str) -> tuple:
    """``event.firms``: required for a merger (two or more distinct firm numbers from 1), refused otherwise."""
    firms = tab.get("firms")
    if kind != "merger":
        if firms is not None:
            raise InputError("event.firms", f"names the merging firms of kind = 'merger'; this event is {kind!r}")
        return ()
    if not isinstance(firms, list | tuple) or any(isinstance(f, bool) or not isinstance(f, int) for f in firms):
        raise InputError("event.firms", f"must list the merging firms by number from 1 (e.g. [1, 2]), got {firms!r}")
    if len(set(firms)) < 2:
        raise InputError("event.firms", f"a merger joins two or more distinct firms, got {list(firms)}")
    if min(firms) < 1:
        raise InputError("event.firms", f"firms are numbered from 1, got {list(firms)}")
    return tuple(sorted(set(firms)))


def with_saved_grids(learner, saved: SavedLearners, n_firms: int, event: Event) -> list:
    """The line-up of the run after the event, its learners on the saved grids.

    Parameters
    ----------
    learner : QLearner or list
        The run's learner for every seat, or one strategy per seat.
    saved : SavedLearners
    n_firms : int
        Firms of the market after the event.
    event : Event

    Returns
    -------
    list
        One strategy per seat; a learner given without its own grid takes the saved seat's grid (the grids do not
        move with the market: the learners keep their prices). An entrant learner without a grid gets the grid a new
        learner of the market after the entry would.

    Raises
    ------
    InputError
        ``market.n_firms`` when the firms do not fit the event, ``event.firms`` when a merging firm is not a
        learner's seat.
    """
    seats = saved.header.get("seats") or []
    want = len(seats) + (event.kind == "entry")
    if n_firms != want:
        what = "one more firm than the saved run (the entrant)" if event.kind == "entry" else "the saved run's firms"
        raise InputError("market.n_firms", f"an event of kind {event.kind!r} needs {what}: {want} firms, got {n_firms}")
    if isinstance(learner, list):
        lineup = [copy.deepcopy(x) for x in learner]
    else:
        lineup = [copy.deepcopy(learner) for _ in range(n_firms)]
    for f in event.firms:
        if not 1 <= f <= n_firms:
            raise InputError("event.firms", f"firm {f} is not a firm of the market (1 to {n_firms}), got "
                                            f"{list(event.firms)}")
        if not isinstance(lineup[f - 1], QLearner):
            raise InputError("event.firms", f"firm {f} plays an automaton; a merger joins the products of learners "
                                            "(strategy = 'qlearning')")
    for i, seat in enumerate(seats):
        if isinstance(lineup[i], QLearner) and lineup[i].grid is None and seat.get("strategy") == "qlearning":
            m = lineup[i].m
            if m is not None and not isinstance(learner, list) and m != len(seat["grid"]):
                raise InputError("learning.m", f"after an event the learners keep the saved grids, of "
                                               f"{len(seat['grid'])} prices for firm {i + 1}; got m = {m} (leave "
                                               "learning.m out)")
            lineup[i].grid = list(seat["grid"])
    return lineup


def check_event(saved: SavedLearners, lineup, event: Event, sessions: int, key: str = "learning.continue_from",
                market: dict | None = None) -> None:
    """Refuse saved sessions that cannot go on after the event: other seats, grids or memories, or another number of
    sessions.

    Parameters
    ----------
    saved : SavedLearners
    lineup : sim.learning.lineup.Lineup
        The line-up after the event.
    event : Event
    sessions : int
        Sessions of the run.
    key : str
        Key path of the saved file, for error messages.
    market : dict, optional
        The run's market (:meth:`sim.Market.to_dict`): a change of protocol must keep the saved one.

    Raises
    ------
    InputError
        Naming ``key``; for a change of protocol, ``market.<setting>`` or ``event.kind``
        (:func:`sim.learning.protocol.check_protocol`).
    """
    refuse_merged(saved, key)
    if event.kind in ("merger", "entry") and market is not None:
        _same_market(saved.header.get("market"), market, event.kind)
    old, new = saved.header.get("seats") or [], describe_layout(lineup)
    for i, (a, b) in enumerate(zip(old, new)):
        firm = f"firm {i + 1}"
        if a.get("strategy") != b["strategy"]:
            raise InputError(key, f"{firm} was {a.get('strategy')!r} in the saved run, {b['strategy']!r} here")
        check_family(a, b, firm, key)
        if event.kind == "merger" and b["strategy"] != "qlearning" and "actions" in b:
            # an automaton beside a merger plays as it did (the market is the saved one, so are its levels): a
            # changed rule is another event, not this one
            ga, gb = np.asarray(a.get("actions", []), dtype=float), np.asarray(b["actions"], dtype=float)
            if ga.shape != gb.shape or not np.array_equal(ga, gb):
                raise InputError(f"strategies[{i + 1}]", f"{firm}'s automaton plays other actions than in the saved "
                                                         f"run ({ga.tolist()} there, {gb.tolist()} here); an event "
                                                         f"of kind {event.kind!r} keeps the seated automata as they "
                                                         "were")
        if b["strategy"] == "qlearning":
            ga, gb = np.asarray(a.get("grid", []), dtype=float), np.asarray(b["grid"], dtype=float)
            if ga.shape != gb.shape or not np.array_equal(ga, gb):
                raise InputError(key, f"{firm}'s grid differs from the saved one; after an event the learners keep "
                                      "their grids (leave learning.grid out to use the saved one)")
            if a.get("k") != b["k"]:
                raise InputError(key, f"{firm}'s memory k is {b['k']} here, {a.get('k')} in the saved run")
    if saved.n_sessions != sessions:
        raise InputError(key, f"holds {saved.n_sessions} saved sessions; the run has {sessions} (run.sessions must "
                              "match: each session continues one saved session)")
    if event.kind == "merger":
        check_merger(event.firms, lineup)
    if event.kind == "protocol":
        check_protocol(saved, lineup, market)
    if event.kind == "market":
        changes = protocol_changes(saved.header.get("seats") or [], lineup)
        if changes:
            raise InputError("event.kind", f"'market' keeps the learners' settings, but {protocol_words(changes)}; "
                                           "a change of how they learn is kind = 'protocol', in an event of its own")
    if event.kind == "entry" and lineup.learners[-1] is not None:
        k_old = max([int(a.get("k") or 0) for a in old] + [1])
        if lineup.learners[-1].k > k_old:
            raise InputError("strategies", f"the entrant learner's memory k = {lineup.learners[-1].k} exceeds the "
                                           f"saved sessions' longest memory {k_old}, whose history holds {k_old} "
                                           f"period(s); give the entrant k <= {k_old}")
    if event.kind != "entry" and saved.Q.shape[1:] != lineup.q0.shape:
        raise InputError(key, f"its Q-values have shape {saved.Q.shape[1:]} per session, this line-up "
                              f"{lineup.q0.shape}")


def _same_market(saved_market, market: dict, kind: str) -> None:
    """A merger or an entry changes who sells, not the market: refuse any other difference from the saved market,
    naming its key (one change at a time; a changed market is ``kind = "market"``)."""
    here = json.loads(json.dumps(to_plain(market)))
    there = dict(saved_market) if isinstance(saved_market, dict) else {}
    if kind == "entry":
        # the entrant adds a firm: a per-firm list grows by the entrant's own value, the incumbents' stay
        n_old = there.pop("n_firms", None)
        here.pop("n_firms", None)
        for key, new in list(here.items()):
            old = there.get(key)
            if isinstance(new, list) and isinstance(n_old, int) and len(new) == n_old + 1:
                incumbents = new[:n_old]
                if old == incumbents or (not isinstance(old, list) and all(v == old for v in incumbents)):
                    here[key] = there[key] = None
            elif isinstance(old, list) and not isinstance(new, list) and all(v == new for v in old):
                here[key] = there[key] = None
    diff = _first_difference(there, here)
    if diff is not None:
        was, now = there.get(diff, "not given"), here.get(diff, "not given")
        raise InputError(f"market.{diff}", f"an event of kind {kind!r} keeps the saved market ({was!r} there, "
                                           f"{now!r} here); change the market in an event of its own "
                                           "(kind = 'market'), before or after")


def _entrant_action(lineup) -> int:
    """The action index the entrant (the last seat) plays in its initial state: an automaton's action there, or a
    new learner's greedy action in the first state."""
    au, i = lineup.automata, lineup.n_seats - 1
    if lineup.learners[i] is not None:
        return int(lineup.initial_greedy()[int(lineup.seats.lidx[i]), 0])
    z0 = int(lineup.z0[i])
    return int(au.act_of_level[i, au.states[i, z0, SS.ACTION]])


def _old_state(s_new: np.ndarray, k: int, m_new: int, m_old: int) -> np.ndarray:
    """The state before the entry that a state after it extends: each lag's profile without the entrant's action
    (the entrant is the last seat, so its action is the highest digit of a profile)."""
    out = np.zeros_like(s_new)
    for lag in range(k):
        prof = (s_new // m_new**lag) % m_new
        out += (prof % m_old) * m_old**lag
    return out


def adapt_saved(saved: SavedLearners, lineup, event: Event) -> SavedLearners:
    """The saved sessions as the run after the event starts them: the convergence counter and the record of the
    automata's punishments reset and, after an entry, the learners' states extended by the entrant's price.

    Parameters
    ----------
    saved : SavedLearners
    lineup : sim.learning.lineup.Lineup
        The line-up after the event.
    event : Event

    Returns
    -------
    SavedLearners
        A new object; ``saved`` is left unchanged.
    """
    clock = saved.clock.copy()
    clock[:, 1] = 0
    # the automata's punishments are recorded afresh from the event (the report's counts and shares are those of
    # the learning after it)
    triggers = np.repeat(new_triggers(lineup.n_seats)[None], saved.n_sessions, axis=0)
    if event.kind != "entry":
        # a changed market or a merger: the same seats and states, only the learners' rewards change
        return SavedLearners(saved.Q.copy(), saved.greedy.copy(), saved.history.copy(), saved.z.copy(),
                             saved.rng.copy(), clock, saved.status.copy(), triggers, dict(saved.header),
                             saved.counts.copy(), saved.sums.copy())
    n = saved.n_sessions
    m_new = int(lineup.stage.M)
    m_old = m_new // int(lineup.seats.radix[-1])
    # every learner starts as a new one would; the incumbents then take what they knew (an entrant learner keeps
    # its initial values and greedy actions)
    q = np.repeat(lineup.q0[None], n, axis=0)
    greedy = np.zeros((n, *lineup.q0.shape[:2]), dtype=np.int64)
    n_old = saved.z.shape[1]
    if lineup.learners[-1] is not None:
        li_e = int(lineup.seats.lidx[-1])
        greedy[:, li_e] = lineup.initial_greedy()[li_e]
    for i in [i for i in lineup.learner_seats if i < n_old]:
        li, k, m = int(lineup.seats.lidx[i]), lineup.learners[i].k, int(lineup.seats.radix[i])
        s_new = np.arange(m_new**k)
        s_old = _old_state(s_new, k, m_new, m_old)
        q[:, li, : s_new.size, :m] = saved.Q[:, li, s_old, :m]
        greedy[:, li, : s_new.size] = saved.greedy[:, li, s_old]
    big_k = int(lineup.stage.K)
    a_e = _entrant_action(lineup)
    history = np.zeros(n, dtype=np.int64)
    for lag in range(big_k):
        prof = (saved.history // m_old**lag) % m_old
        history += (prof + a_e * m_old) * m_new**lag
    z = np.concatenate([saved.z, np.full((n, 1), int(lineup.z0[-1]), dtype=np.int64)], axis=1)
    # a bandit's statistics do not depend on the state; an entrant learner starts with none
    counts = np.zeros((n, lineup.q0.shape[0], lineup.q0.shape[2]), dtype=np.int64)
    sums = np.zeros(counts.shape)
    l_old, m_old_max = saved.counts.shape[1], saved.counts.shape[2]
    counts[:, :l_old, :m_old_max], sums[:, :l_old, :m_old_max] = saved.counts, saved.sums
    return SavedLearners(q, greedy, history, z, saved.rng.copy(), clock, saved.status.copy(), triggers,
                         dict(saved.header), counts, sums)


def run_tracked(lineup, session, s: int, convergence: int, cap: int, path: np.ndarray,
                event: Event) -> tuple[int, int, int]:
    """Continue one session after the event, recording the prices of its first ``event.periods`` periods.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    session : sim.learning.inputs.SessionState
        At the event (modified in place, as by :func:`sim.learning.kernel.run_session`).
    s : int
        History state at the event.
    convergence : int
    cap : int
        Periods played in all (from the saved session's start) after which the session stops.
    path : ndarray of shape (event.bins + 1, n_seats)
        Receives the prices of the last period before the event (row 0; nan for an entrant) and the mean prices of
        each bin of periods after it; a session that settles, or reaches the cap, before the end keeps its last
        prices in the bins that follow.
    event : Event

    Returns
    -------
    status : int
    periods : int
        Periods played in all.
    s : int
        History state at the end.
    """
    stage = lineup.stage
    m = int(stage.M)
    path[0] = stage.prices[s % m]
    if event.kind == "entry":
        path[0, -1] = np.nan
    per = event.periods // event.bins
    status, t = STATUS_CAP, int(session.clock[0])
    last = path[0].copy()
    for b in range(event.bins):
        acc = np.zeros(lineup.n_seats)
        for _ in range(per):
            if status == STATUS_CONVERGED or t >= cap:
                acc += last
                continue
            status, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s, convergence,
                                         t + 1)
            if status == STATUS_CAP and t < cap:
                status = -1  # one period played, not settled: go on
            last = stage.prices[s % m]
            acc += last
        path[b + 1] = acc / per
    if status != STATUS_CONVERGED and t < cap:
        status, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s, convergence, cap)
    return (STATUS_CONVERGED if status == STATUS_CONVERGED else STATUS_CAP), t, s


def _mean(x, level: float) -> dict:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"mean": math.nan, "se": math.nan, "low": math.nan, "high": math.nan, "n": 0}
    e = mean_estimate(x, level)
    return {"mean": e.value, "se": e.se, "low": e.low, "high": e.high, "n": int(x.size)}


def event_summary(event: Event, path: np.ndarray, settle: np.ndarray, converged: np.ndarray,
                  limit_prices: np.ndarray, what: str, level: float = 0.95, merger: dict | None = None,
                  at_event: np.ndarray | None = None) -> dict:
    """How prices moved after the event and how long the learners took to settle again, across sessions.

    Parameters
    ----------
    event : Event
    path : ndarray of shape (n_sessions, bins + 1, n_firms)
        Every session's recorded prices (:func:`run_tracked`).
    settle : ndarray of shape (n_sessions,)
        Periods from the event to the last change of a greedy strategy (nan when the session did not settle).
    converged : ndarray of bool, shape (n_sessions,)
        Whether each session settled again (converged) before the cap.
    limit_prices : ndarray of shape (n_sessions, n_firms)
        Mean prices of each session's limit play after it settled.
    what : str
        The event in words.
    level : float
        Confidence level (Student's t for means, Wilson for shares, as in :mod:`sim.core.stats`).
    merger : dict, optional
        After a merger: its static benchmarks (:func:`sim.learning.merger.merger_benchmarks`), kept as ``merger``
        with ``learned_change`` added (per firm: the mean over settled sessions of the limit price minus the price
        before the event, as in ``change``).
    at_event : ndarray of shape (n_sessions, n_firms), optional
        The mean prices of greedy play from each session's state at the event (what the learners knew then, in the
        line-up after it). Given, the prices before the event are these limits; without them (a limit that is an
        estimate), the prices of the last period before the event.

    Returns
    -------
    dict
        ``kind``, ``what``, ``periods`` (recorded after the event), ``bin_periods`` (the last period of each bin,
        from 1; 0 for the row before the event), ``prices`` (``mean``, ``low``, ``high``: lists of bins + 1 rows
        of n_firms, across all sessions), ``before`` and ``change`` (per firm: the limit price at the event, or
        the price in the last period before it, and each session's limit price after settling minus it, over the
        settled sessions), ``before_method`` (``"limit at the event"`` or ``"last period"``),
        ``settled`` (share of sessions that settled again) and ``settle_periods`` (periods from the event to the
        last change of a greedy strategy over the settled sessions: mean with its interval, median, 5 % and 95 %);
        after a merger also ``merger``.
    """
    n, rows, f = path.shape
    per = event.periods // event.bins
    mean = np.full((rows, f), np.nan)
    low, high = mean.copy(), mean.copy()
    for r in range(rows):
        for i in range(f):
            e = _mean(path[:, r, i], level)
            mean[r, i], low[r, i], high[r, i] = e["mean"], e["low"], e["high"]
    ok = np.asarray(converged, dtype=bool)
    ref = path[:, 0, :] if at_event is None else np.asarray(at_event, dtype=float)
    st = np.asarray(settle, dtype=float)[ok]
    k = int(ok.sum())
    sh = wilson_estimate(k, n, level)
    q = np.quantile(st, (0.05, 0.5, 0.95)) if st.size else np.full(3, np.nan)
    out = {
        "kind": event.kind, "what": what, "periods": event.periods,
        "bin_periods": [0] + [per * (b + 1) for b in range(event.bins)],
        "prices": {"mean": mean.tolist(), "low": low.tolist(), "high": high.tolist()},
        "before": [_mean(ref[:, i], level) for i in range(f)],
        "before_method": "last period" if at_event is None else "limit at the event",
        "change": [_mean(limit_prices[ok, i] - ref[ok, i], level) for i in range(f)],
        "settled": {"share": sh.value, "low": sh.low, "high": sh.high, "count": k, "n": int(n)},
        "settle_periods": {**_mean(st, level), "q05": float(q[0]), "q50": float(q[1]), "q95": float(q[2])},
    }
    if merger is not None:
        out["merger"] = {**merger, "learned_change": [d["mean"] for d in out["change"]]}
    return out
