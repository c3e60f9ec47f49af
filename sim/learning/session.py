"""Learning pricing agents: sessions of Q-learning firms, their limit play and the punishment they learn.

The experiment of Calvano, Calzolari, Denicolo and Pastorello (2020, AER, "Artificial Intelligence,
Algorithmic Pricing, and Collusion") on any market of this package:

1. every firm is a :class:`strategies.qlearning.QLearner` with a grid of actions (a Q-learner, or with
   ``family = "ucb"`` or ``"thompson"`` a bandit over the grid that keeps no state: :mod:`sim.learning.bandits`);
2. a *session* lets them play and learn until every learner's greedy strategy has been unchanged for
   ``convergence`` consecutive periods (or ``max_periods`` is reached: not converged);
3. the learned strategies are then played greedily from the final state: the *limit path* ends in a
   cycle whose mean prices and profits give the session's *profit gain*
   ``(profit - Nash) / (collusive - Nash)``;
4. the *impulse response*: one firm is forced to deviate for one period (by default to its static
   best response on its grid), everyone then follows the learned strategies; a punishment shows as
   the rivals cutting their prices in the following period, and the exact discounted value of the
   deviation under the learned strategies says whether it paid.

Learners may be seated with automata of :mod:`strategies` (a learner facing grim trigger, tit for
tat, forgiving tit for tat, an opportunist...). Automata that act at random draw from the session's
stream in a fixed order; their line-ups get a simulated, seeded *estimate* of steps 3 and 4 instead
of the exact analysis, flagged as such in every result (see "Limit analysis" below).

With ``timing = "alternating"`` two Q-learners set their prices in turn instead, each price held for two periods
(Klein, 2021, RAND Journal of Economics 52(3); :mod:`sim.learning.alternating`): steps 1 to 3 as above on that
protocol, with the cycle of greedy play classified as a fixed price pair or a cycle, and no impulse response.

Many sessions run in parallel, each with its own random stream from
``sim.core.rng.stream_states(seed, (cell,), session, session + 1)``, so results do not depend on the
number of workers. Layers: :func:`learn` (validated public function) -> :func:`_run_sessions`
(driver: buffers, seeds, threads, progress) -> :mod:`sim.learning.kernel` and :mod:`sim.learning.limits` (numba,
release the GIL), whose plain-Python twins are in :mod:`sim.learning.twin`.

Limit analysis
--------------
*Deterministic line-ups* (learners, and automata without probabilities strictly between 0 and 1):
greedy play from the final state is a deterministic path that ends in a cycle. The cycle is found
exactly; limit outcomes are its means; the impulse response deviates from each of its points (at
most ``IR_POINTS``) and the value of the deviation is exact over the infinite horizon.

*Line-ups with automata that act at random* (forgiving tit for tat, opportunists, lapses): the
automata draw from the session's stream during learning, in the kernel's fixed order (see
:mod:`sim.learning.kernel`), and convergence is still judged on the learners' greedy strategies
alone. Greedy play after learning is then a Markov chain with no exact cycle, and the limit
analysis is a seeded estimate, drawn from the session's own stream continued after learning:
``LIMIT_BURN_IN`` periods of greedy play are discarded, the next ``limit_periods`` are averaged
(limit actions, prices, profits, profit gain), and at ``IR_POINTS`` evenly spaced periods among
them a deviation and the path without it are simulated from the same generator state (common
random numbers); the impulse response is the mean over those deviations and the deviation gain
the mean realised difference of discounted profits over the first ``H`` periods, ``H`` the
smallest horizon with ``delta**H < VALUE_TOL`` (at most ``VALUE_CAP``). The result says so:
:attr:`sim.learning.results.LearningResult.limit_exact` is False, cycle lengths and the return to the cycle are not
defined (``cycle_length`` 0, ``returned`` nan), and :meth:`sim.learning.results.LearningResult.summary` carries a
``limit`` entry with ``method = "estimate"`` and these settings.
"""

from __future__ import annotations

import sys
import time
from concurrent.futures import ThreadPoolExecutor, as_completed

import numpy as np
from tqdm import tqdm

import sim.learning.kernel as K
import sim.learning.limits as L
import sim.learning.signals as SG
from sim.core.compiling import announce_compile
from sim.core.errors import InputError
from sim.core.parallel import usable_cores
from sim.core.params import Real
from sim.core.rng import stream_states
from sim.learning.alternating import (
    AlternatingState,
    alternating_limit,
    alternating_start,
    check_alternating,
    run_alternating,
)
from sim.learning.bandits import with_estimates
from sim.learning.events import Event, adapt_saved, check_event, run_tracked
from sim.learning.inputs import OWN_PROFIT, STATUS_CONVERGED, DeviationInputs, LimitOutputs, SessionState
from sim.learning.lineup import Lineup, available_memory, compile_lineup
from sim.learning.merger import merged_lineup, merged_statistics, merger_benchmarks, merger_words, refuse_merged
from sim.learning.noisy_prices import PRICE_NOISE, check_noisy_lineup, noisy_start, true_profile
from sim.learning.protocol import protocol_changes, protocol_words
from sim.learning.results import (
    CYCLE_STORE,
    IR_POINTS,
    LIMIT_BURN_IN,
    LIMIT_PERIODS,
    LearningResult,
    deviator_discount,
    value_horizon,
)
from sim.learning.saved import SavedLearners, check_start, continued_record, describe_layout
from sim.learning.shocks import shock_code
from sim.learning.signals import (
    SIGNAL_BAND,
    SIGNAL_CONSTRAINTS,
    check_saved_observe,
    check_signal_lineup,
    signal_start,
)
from sim.learning.tables import RUN_CONSTRAINTS
from sim.learning.twin import reference_session as _reference
from sim.learning.twin_start import session_row

__all__ = ["alternating_state", "kernel_session", "learn", "reference_session"]


def _validate_run(**values) -> dict:
    return {name: RUN_CONSTRAINTS[name].check(name, value) for name, value in values.items()}


def learn(market, learners=None, *, sessions: int = 100, seed: int = 0, convergence: int = 100_000,
          max_periods: int = 1_000_000_000, deviator: int = 0, deviation="best_response", response_periods: int = 15,
          near: float = 0.1, workers: int | None = None, progress: bool | None = None, cell: int = 0,
          confidence: float = 0.95, limit_periods: int = LIMIT_PERIODS, start: SavedLearners | None = None,
          keep: bool = False, event: Event | None = None, timing: str = "simultaneous", demand_noise: str = "lognormal",
          demand_sigma: float = 0.0, observe: str = "prices", signal_band: float = SIGNAL_BAND,
          price_noise: float = PRICE_NOISE) -> LearningResult:
    """Run independent learning sessions and analyse what the learners converged to.

    Parameters
    ----------
    market : sim.Market
        Single-product market with 2 to 4 firms (logit Bertrand in the published baseline).
    learners : QLearner or list, optional
        The same learner on every seat (default ``QLearner()``), or one strategy per seat: learners
        and automata of :mod:`strategies` (see :func:`compile_lineup`).
    sessions : int
        Number of independent sessions.
    seed : int
        The user's seed; session ``j`` draws from ``stream_states(seed, (cell,), j, j + 1)``.
    convergence : int
        A session has converged once no learner's greedy action in any state has changed for this many
        consecutive periods (Calvano et al., 2020: 100,000).
    max_periods : int
        Cap on a session's length; a session reaching it is reported as not converged.
    deviator : int
        Seat (0-based) forced to deviate in the impulse response.
    deviation : "best_response" or float
        Its forced action: the static best response on its grid to the rivals' actions of the
        deviation period, or a number (the nearest grid point is used).
    response_periods : int
        Periods of greedy play recorded after the deviation.
    near : float
        Tolerance of "at or near" the collusive (and the Nash) outcome, as a share of each firm's
        distance between its Nash and collusive actions.
    workers : int, optional
        Sessions run at once, in threads (the kernel releases the GIL). Default: the usable cores.
        Results do not depend on it.
    progress : bool, optional
        Show a progress bar over sessions (default: when stderr is a terminal).
    cell : int
        Family of random streams (sweeps give each cell its own).
    confidence : float in (0, 1)
        Level of the confidence intervals of the summary (Student's t for means, Wilson for
        shares; see :mod:`sim.simulation.results`).
    limit_periods : int
        Only for line-ups with automata that act at random: periods of greedy play averaged by the
        limit estimate (see the module notes).
    start : sim.learning.saved.SavedLearners, optional
        Continue these saved sessions (one per session, on the same market and grids; checked by
        :func:`sim.learning.saved.check_start`) instead of starting new ones: each goes on from its saved state,
        random generator and counters, so ``max_periods`` counts from the saved session's start.
    keep : bool
        Keep every session's state at the end of learning (:attr:`LearningResult.saved`, to be written by
        :func:`sim.learning.saved.save_learners`).
    event : sim.learning.events.Event, optional
        With ``start``: the saved sessions go on after this event (a changed market, an entrant as the last
        seat, or a merger of learners' products; see :mod:`sim.learning.events` and :mod:`sim.learning.merger`): the
        convergence counter is reset, ``max_periods`` counts the periods after the event, and the prices of the first
        ``event.periods`` periods are recorded.
    timing : {"simultaneous", "alternating"}
        Move timing (:data:`sim.learning.alternating.TIMINGS`): every firm sets its price every period (Calvano et
        al., 2020), or two Q-learners set theirs in turn, each price held for two periods (Klein, 2021;
        :mod:`sim.learning.alternating`). Alternating sessions have no impulse response (its entries are nan) and
        cannot be saved, continued or followed by an event.
    demand_noise, demand_sigma : {"lognormal", "normal"}, float
        Mean-one demand shock scaling every realised profit, its standard deviation (0: none; sim.learning.shocks).
    observe, signal_band, price_noise : {"prices", "own_profit", "noisy_prices"}, float in (0, 1), float in (0, 100]
        A learner's state: the last periods' prices; its own last price and whether its profit fell below ``1 -
        signal_band`` times its reference profit (:mod:`sim.learning.signals`); or the last prices as it saw them,
        with an error of standard deviation ``price_noise`` grid steps (:mod:`sim.learning.noisy_prices`).

    Returns
    -------
    LearningResult

    See the module notes, "Limit analysis", for how the limit outcomes are found.
    """
    run = _validate_run(sessions=sessions, seed=seed, convergence=convergence, max_periods=max_periods,
                        deviator=deviator, response_periods=response_periods, near=near, workers=workers,
                        cell=cell, confidence=confidence, limit_periods=limit_periods, timing=timing)
    n_workers = min(run["workers"] or usable_cores(), run["sessions"])
    lineup = compile_lineup(market, learners, workers=n_workers, random_automata="estimate",
                            alternating=run["timing"] == "alternating")
    dev_index = _deviation_index(lineup, run["deviator"], deviation)
    settings = {**run, "workers": n_workers, "deviation": deviation,
                **_shock_settings(demand_noise, demand_sigma, run["timing"], event),
                **_signal_settings(lineup, observe, signal_band, run["timing"], event, price_noise)}
    if settings.pop("timing") == "alternating":
        # the key is written only where it changes the protocol: simultaneous results stay as they were
        check_alternating(lineup, start, keep, event)
        return _run_alternating(lineup, {**settings, "timing": "alternating"}, progress)
    market_doc = market.to_dict() if hasattr(market, "to_dict") else None
    if start is not None:
        check_saved_observe(start.header, settings.get("observe", "prices"), "observe")
    start, lineup, what = _checked_start(start, event, lineup, market_doc, run["sessions"], settings)
    if keep:
        _check_kept_memory(lineup, run["sessions"])
    return _run_sessions(lineup, settings, dev_index, progress, start, keep, market_doc,
                         (event, what) if what is not None else None)


def _checked_start(start, event, lineup: Lineup, market_doc: dict | None, sessions: int, settings: dict):
    """Saved sessions to continue, checked (and adapted to an event, whose words are returned, with the line-up
    after it). Without an event, ``settings["continued"]`` receives where they came from and what changed since
    the save (:func:`sim.learning.saved.continued_record`), for the report."""
    what = None
    if start is not None and event is not None:
        start, lineup, what = _after_event(start, lineup, event, sessions, market_doc)
    elif start is not None:
        refuse_merged(start)
        check_start(start, lineup, market_doc, sessions)
        settings["continued"] = continued_record(start, lineup, _shock_record(settings))
    return start, lineup, what


def _after_event(start: SavedLearners, lineup: Lineup, event: Event, sessions: int,
                 market: dict | None) -> tuple[SavedLearners, Lineup, str]:
    """The saved sessions and the line-up as the run after the event starts them, and the event in words."""
    check_event(start, lineup, event, sessions, market=market)
    what = _event_words(start, lineup, market, event)
    start = adapt_saved(start, lineup, event)
    if event.kind == "merger":
        lineup, before = merged_lineup(lineup, event.firms), lineup
        # merging bandits read the merged firm's profit on its own scale (sim.learning.merger)
        start = merged_statistics(start, before, lineup)
    return start, lineup, what


def _event_words(saved: SavedLearners, lineup: Lineup, market: dict | None, event: Event) -> str:
    """The event in words: the market settings that changed, or the entrant and its strategy."""
    if event.kind == "merger":
        return merger_words(event.firms)
    if event.kind == "protocol":
        return protocol_words(protocol_changes(saved.header.get("seats") or [], lineup))
    if event.kind == "entry" and lineup.learners[-1] is not None:
        return f"firm {lineup.n_seats} enters, priced by a new learner"
    if event.kind == "entry":
        return f"firm {lineup.n_seats} enters, playing {lineup.names[-1].replace('_', ' ')}"
    old = saved.header.get("market") or {}
    new = market or {}
    changed = [f"market.{k} {old.get(k, 'not given')!r} -> {new.get(k, 'not given')!r}"
               for k in [*new, *(k for k in old if k not in new)] if old.get(k) != new.get(k)]
    if not changed:
        # the control of another event continued from the same file: what the learners do without it
        return "the market as it was: no setting differs, the saved sessions simply continue"
    return "the market changes: " + "; ".join(changed)


def _check_kept_memory(lineup: Lineup, sessions: int) -> None:
    """Refuse to keep every session's Q-values when they cannot all be held."""
    need = sessions * (lineup.q0.nbytes + lineup.q0[..., 0].nbytes)
    avail = available_memory()
    if need > 0.8 * avail:
        raise InputError("learning.save_to", f"saving {sessions} sessions needs {need / 1e9:.3g} GB, more than the "
                                             f"{0.8 * avail / 1e9:.3g} GB that may be used; run fewer sessions")


def _deviation_index(lineup: Lineup, seat: int, deviation) -> int:
    """The forced action's index: -1 for the best response, else the grid point nearest the number (the deviating
    seat checked first)."""
    if seat >= lineup.n_seats:
        raise InputError("deviator", f"must be a firm of the market (0 to {lineup.n_seats - 1}), got {seat}")
    if isinstance(deviation, str):
        if deviation != "best_response":
            raise InputError("deviation", f"must be 'best_response' or a number, got {deviation!r}")
        return -1
    x = Real(0, None).check("deviation", deviation)
    grid = lineup.grids[seat]
    return int(np.argmin(np.abs(grid - x)))


class _Buffers:
    """Per-session outputs of a run: ``n`` sessions, ``f`` seats, ``T2 = response_periods + 2`` rows."""

    def __init__(self, n: int, f: int, T2: int):
        self.status = np.zeros(n, dtype=np.int64)
        self.periods = np.zeros(n, dtype=np.int64)
        self.cycle = np.full((n, CYCLE_STORE), -1, dtype=np.int64)
        self.lim_a, self.lim_p, self.lim_pi = np.zeros((n, f)), np.zeros((n, f)), np.zeros((n, f))
        self.ir_p, self.ir_pi = np.zeros((n, T2, f)), np.zeros((n, T2, f))
        self.cf_p, self.cf_pi = np.zeros((n, T2, f)), np.zeros((n, T2, f))
        self.info = np.zeros((n, 8))
        self.triggers = np.zeros((n, f, 4), dtype=np.int64)
        self.punishing_at_end = np.zeros((n, f), dtype=bool)
        self.saved = None
        self.event = None

    def track(self, event: Event) -> None:
        """Make room for the prices after an event and the periods until the learners settle again."""
        n, f = self.lim_p.shape
        self.event = event
        self.path = np.full((n, event.bins + 1, f), np.nan)
        self.settle = np.full(n, np.nan)
        self.start = np.zeros(n, dtype=np.int64)
        self.at_event = np.full((n, f), np.nan)

    def keep(self, lineup: Lineup) -> None:
        """Make room for every session's state at the end of learning."""
        n = self.status.size
        self.saved = {"Q": np.zeros((n, *lineup.q0.shape)), "greedy": np.zeros((n, *lineup.q0.shape[:2]), np.int64),
                      "history": np.zeros(n, np.int64), "z": np.zeros((n, lineup.n_seats), np.int64),
                      "rng": np.zeros((n, 4), np.uint64), "clock": np.zeros((n, 2), np.int64),
                      "triggers": np.zeros((n, lineup.n_seats, 4), np.int64),
                      "counts": np.zeros((n, lineup.q0.shape[0], lineup.q0.shape[2]), np.int64),
                      "sums": np.zeros((n, lineup.q0.shape[0], lineup.q0.shape[2]))}

    def store(self, j: int, session: SessionState, s: int) -> None:
        """Session ``j``'s state at the end of learning (when kept)."""
        if self.saved is not None:
            sv = self.saved
            sv["Q"][j], sv["greedy"][j], sv["history"][j] = session.Q, session.greedy, s
            sv["z"][j], sv["rng"][j], sv["clock"][j] = session.z, session.rng, session.clock
            sv["triggers"][j] = session.triggers
            sv["counts"][j], sv["sums"][j] = session.counts, session.sums

    def outputs(self, j: int) -> LimitOutputs:
        """Session ``j``'s rows, as the limit kernels write them."""
        return LimitOutputs(self.cycle[j], self.lim_a[j], self.lim_p[j], self.lim_pi[j], self.ir_p[j],
                            self.ir_pi[j], self.cf_p[j], self.cf_pi[j], self.info[j])


def _session(j: int, lineup: Lineup, state: np.ndarray, g0: np.ndarray, settings: dict, dev: DeviationInputs,
             buf: _Buffers, start: SavedLearners | None = None) -> None:
    """Session ``j``: learning (new, or continuing saved session ``j``), then the limit analysis (exact, or the
    estimate that continues the stream)."""
    if start is None:
        rng = state.copy()
        session = lineup.session_state(rng, g0)
        s = K.initial_state(rng, lineup.seats, lineup.stage)
        if settings.get("observe") == "own_profit":
            s = signal_start(s, lineup)
        elif settings.get("observe") == "noisy_prices":
            s = noisy_start(s, lineup)
    else:
        rng = start.rng[j].copy()
        # a bandit's estimates from its statistics, however the file rounded them (sim.learning.bandits)
        q, greedy = with_estimates(lineup.seats, start.Q[j], start.greedy[j], start.counts[j], start.sums[j])
        session = SessionState(q, greedy, start.z[j].copy(), rng,
                               start.clock[j].copy(), start.triggers[j].copy(), start.counts[j].copy(),
                               start.sums[j].copy())
        s = int(start.history[j])
    if settings.get("observe") == "noisy_prices":
        # learning with noisy prices; the limit is greedy play without error from the profile played last
        st, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s,
                                 settings["convergence"], settings["max_periods"], *_shock(settings), 2,
                                 settings["price_noise"])
        buf.status[j], buf.periods[j] = st, t
        buf.store(j, session, s)
        L.analyse_limit(true_profile(s, lineup), lineup.play(session.greedy, t), dev, buf.outputs(j))
        return
    if "observe" in settings:
        band = settings["signal_band"]
        st, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s,
                                 settings["convergence"], settings["max_periods"], *_shock(settings), 1, band)
        buf.status[j], buf.periods[j] = st, t
        buf.store(j, session, s)
        SG.signal_limit(s, session.greedy, lineup, band, buf.outputs(j))
        SG.signal_impulse(s, session.greedy, lineup, band, dev, buf.outputs(j))
        return
    if buf.event is None:
        st, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s,
                                 settings["convergence"], settings["max_periods"], *_shock(settings))
    else:
        t0 = int(session.clock[0])
        buf.start[j] = t0
        if lineup.limit_exact:
            # the limit of what the learners knew at the event, in the line-up after it: the prices the event is
            # measured from
            L.limit_prices_of(lineup.system_state(s, session.z), lineup.play(session.greedy, t0), buf.at_event[j])
        st, t, s = run_tracked(lineup, session, s, settings["convergence"], settings["max_periods"] + t0,
                               buf.path[j], buf.event)
        if st == STATUS_CONVERGED:
            buf.settle[j] = t - int(session.clock[1]) - t0
    buf.triggers[j] = session.triggers
    buf.status[j] = st
    buf.periods[j] = t
    buf.punishing_at_end[j] = lineup.punishing(session.z)
    buf.store(j, session, s)
    x = lineup.system_state(s, session.z)
    if lineup.limit_exact:
        L.analyse_limit(x, lineup.play(session.greedy, t), dev, buf.outputs(j))
    else:
        # the session's stream goes on from where learning left it
        L.estimate_limit(x, lineup.play(session.greedy, t, rng), dev, buf.outputs(j))


def _shock_settings(demand_noise: str, demand_sigma: float, timing: str, event: Event | None) -> dict:
    """The demand shock's entries of a run's settings: none without a shock, so that results without one stay as
    they were; a shock needs simultaneous moves and no event."""
    code, sigma = shock_code(demand_noise, demand_sigma, prefix="")
    if not code:
        return {}
    if timing != "simultaneous" or event is not None:
        raise InputError("demand_sigma", f"a demand shock needs simultaneous moves and no event; got timing = "
                                         f"{timing!r}" + (" and an event" if event is not None else ""))
    return {"demand_noise": demand_noise, "demand_sigma": sigma}


def _signal_settings(lineup: Lineup, observe: str, band: float, timing: str, event: Event | None,
                     noise: float = PRICE_NOISE) -> dict:
    """The entries of a run's settings of a protocol that observes something else than the prices: none with the
    price protocol (results stay as they were); the profit signal and noisy prices need Q-learners on every seat,
    simultaneous moves and no event."""
    observe = SIGNAL_CONSTRAINTS["observe"].check("observe", observe)
    if observe == "prices":
        return {}
    band = float(SIGNAL_CONSTRAINTS["signal_band"].check("signal_band", band))
    noise = float(SIGNAL_CONSTRAINTS["price_noise"].check("price_noise", noise))
    if timing != "simultaneous" or event is not None:
        raise InputError("observe", f"{observe!r} needs simultaneous moves and no event")
    if observe == "noisy_prices":
        check_noisy_lineup(lineup, "observe")
        return {"observe": observe, "price_noise": noise}
    check_signal_lineup(lineup, "observe")
    return {"observe": observe, "signal_band": band}


def _shock_record(settings: dict) -> dict:
    """The demand shock of a run's settings as a saved file's header records it: ``noise`` and ``sigma``
    (``"none"`` and 0 without a shock)."""
    if "demand_sigma" not in settings:
        return {"noise": "none", "sigma": 0.0}
    return {"noise": str(settings["demand_noise"]), "sigma": float(settings["demand_sigma"])}


def _shock(settings: dict) -> tuple[int, float]:
    """The kernel's demand-shock code and standard deviation of a run's settings ((0, 0.0) without a shock)."""
    if "demand_sigma" not in settings:
        return 0, 0.0
    return shock_code(settings["demand_noise"], settings["demand_sigma"], prefix="")


def _each(n: int, workers: int, one, progress: bool | None) -> None:
    """``one(j)`` for every session, in ``workers`` threads (the kernels release the GIL).

    Even one worker runs in a thread of its own: the main thread only waits, so an interrupt or SIGTERM reaches it
    at once, not when a session that may run for hours returns. A session in flight cannot be stopped inside its
    kernel; on an interrupt the pool is left without waiting for it (the command line then ends the process, see
    :func:`sim.cli.entry`), and sessions not started are cancelled.
    """
    show = sys.stderr.isatty() if progress is None else bool(progress)
    bar = tqdm(total=n, desc="sessions", unit="session", file=sys.stderr, leave=False) if show else None
    pool = ThreadPoolExecutor(max_workers=max(1, workers))
    try:
        futures = [pool.submit(one, j) for j in range(n)]
        for fut in as_completed(futures):
            fut.result()
            if bar is not None:
                bar.update(1)
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    else:
        pool.shutdown(wait=True)
    finally:
        if bar is not None:
            bar.close()


def _run_sessions(lineup: Lineup, settings: dict, dev_index: int, progress: bool | None,
                  start: SavedLearners | None = None, keep: bool = False, market: dict | None = None,
                  event: tuple | None = None) -> LearningResult:
    """Driver: per-session streams, buffers, a thread pool over sessions, a progress bar."""
    n = settings["sessions"]
    states = stream_states(settings["seed"], (settings["cell"],), 0, n)
    buf = _Buffers(n, lineup.n_seats, settings["response_periods"] + 2)
    if keep:
        buf.keep(lineup)
    if event is not None:
        buf.track(event[0])
    g0 = lineup.initial_greedy()
    seat = settings["deviator"]
    d_dev = deviator_discount(lineup, seat)
    # after a merger a deviation is valued with the deviator's owner's profit, what its learner is rewarded with
    value = OWN_PROFIT if lineup.reward is None else np.ascontiguousarray(lineup.reward[:, seat], dtype=np.float64)
    dev = DeviationInputs(seat, dev_index, d_dev, IR_POINTS, LIMIT_BURN_IN, settings["limit_periods"],
                          value_horizon(d_dev), value)
    announce_compile("learning", (K.run_session, L.analyse_limit if lineup.limit_exact else L.estimate_limit))
    t0 = time.perf_counter()
    _each(n, settings["workers"], lambda j: _session(j, lineup, states[j], g0, settings, dev, buf, start), progress)
    saved = None
    if keep:
        header = {"market": market, "seats": describe_layout(lineup), "sessions": n, "seed": settings["seed"],
                  "cell": settings["cell"]}
        if event is not None and event[0].kind == "merger":
            header["merged"] = list(event[0].firms)
        if "observe" in settings:
            header["observe"] = settings["observe"]  # written only where it is not the prices protocol
        # the demand shock of the run that saved them (of its last stretch, for sessions continued before), so that
        # a continuation can say whether it changed
        header["demand_shock"] = _shock_record(settings)
        saved = SavedLearners(**buf.saved, status=buf.status.copy(), header=header)
    ev = None if event is None else {"event": event[0], "what": event[1], "path": buf.path, "settle": buf.settle,
                                  "start": buf.start, "at_event": buf.at_event if lineup.limit_exact else None}
    if ev is not None and event[0].kind == "merger":
        ev["merger"] = merger_benchmarks(lineup, event[0].firms)
    return _assemble(lineup, settings, buf, time.perf_counter() - t0, saved, ev)


def _assemble(lineup: Lineup, settings: dict, buf: _Buffers, elapsed: float, saved=None,
              event: dict | None = None) -> LearningResult:
    """The result of a run from its filled buffers: cycles decoded, profit gains, nearness to the benchmarks."""
    lu, info = lineup, buf.info
    lam = info[:, 1].astype(np.int64)
    cycles = [lu.decode(buf.cycle[j, : min(lam[j], CYCLE_STORE)]) for j in range(info.shape[0])]
    nash, coll = lu.nash_profits, lu.collusive_profits
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = (buf.lim_pi.sum(axis=1) - nash.sum()) / (coll.sum() - nash.sum())
        firm_gain = (buf.lim_pi - nash) / (coll - nash)
    tol = settings["near"] * np.abs(lu.collusive_actions - lu.nash_actions)
    near_c = np.all(np.abs(buf.lim_a - lu.collusive_actions) <= tol + 1e-12, axis=1)
    near_n = np.all(np.abs(buf.lim_a - lu.nash_actions) <= tol + 1e-12, axis=1)
    return LearningResult(
        lineup=lu, settings=settings, converged=buf.status == STATUS_CONVERGED, periods=buf.periods,
        transient=info[:, 0].astype(np.int64), cycle_length=lam, cycles=cycles, limit_actions=buf.lim_a,
        limit_prices=buf.lim_p, limit_profits=buf.lim_pi, profit_gain=gain, firm_profit_gain=firm_gain,
        near_collusive=near_c, near_nash=near_n, ir_prices=buf.ir_p, ir_profits=buf.ir_pi, cf_prices=buf.cf_p,
        cf_profits=buf.cf_pi, deviation_action=info[:, 7].astype(np.int64), deviation_gain=info[:, 3],
        deviation_pays=info[:, 4], returned=info[:, 5], periods_to_return=info[:, 6], elapsed=elapsed, saved=saved,
        triggers=buf.triggers, punishing_at_end=buf.punishing_at_end, event=event,
    )


def alternating_state(lineup: Lineup, rng: np.ndarray) -> AlternatingState:
    """A new alternating session: the learners' initial values (the same in every state), their greedy actions,
    and the starting prices drawn from ``rng`` (:func:`sim.learning.alternating.alternating_start`).

    Parameters
    ----------
    lineup : Lineup
        Two Q-learner seats (:func:`sim.learning.alternating.check_alternating`).
    rng : ndarray of uint64, shape (4,)
        The session's generator state, advanced in place by the two starting draws.

    Returns
    -------
    sim.learning.alternating.AlternatingState
    """
    radix = lineup.seats.radix
    m = int(radix.max())
    Q = np.zeros((2, m, m))
    greedy = np.zeros((2, m), np.int64)
    for i in range(2):
        Q[i] = lineup.q0[int(lineup.seats.lidx[i]), 0, :m]
        greedy[i] = int(np.argmax(Q[i, 0, : radix[i]]))
    prices, seen = np.zeros(2, np.int64), np.zeros(2, np.int64)
    alternating_start(rng, radix, prices, seen)
    return AlternatingState(Q, greedy, prices, seen, rng, np.zeros(2, np.int64))


def _run_alternating(lineup: Lineup, settings: dict, progress: bool | None) -> LearningResult:
    """Driver of alternating sessions: per-session streams, learning, the exact limit cycle; no impulse response
    (its entries are nan, the deviation index -1)."""
    n = settings["sessions"]
    states = stream_states(settings["seed"], (settings["cell"],), 0, n)
    buf = _Buffers(n, 2, settings["response_periods"] + 2)
    for a in (buf.ir_p, buf.ir_pi, buf.cf_p, buf.cf_pi):
        a[:] = np.nan
    buf.info[:, 3:7] = np.nan
    buf.info[:, 7] = -1
    means = np.zeros((n, 3, 2))

    def one(j: int) -> None:
        st = alternating_state(lineup, states[j].copy())
        buf.status[j], buf.periods[j] = run_alternating(lineup.seats, lineup.stage, st, settings["convergence"],
                                                        settings["max_periods"])
        transient, _length, period = alternating_limit(lineup.seats, lineup.stage, st.greedy, st.prices,
                                                       buf.periods[j], buf.cycle[j], means[j])
        buf.info[j, 0], buf.info[j, 1] = transient, period
        buf.lim_a[j], buf.lim_p[j], buf.lim_pi[j] = means[j]

    announce_compile("learning", (run_alternating, alternating_limit))
    t0 = time.perf_counter()
    _each(n, settings["workers"], one, progress)
    return _assemble(lineup, settings, buf, time.perf_counter() - t0)


# ------------------------------------------------------------------------------------------------
# One session by itself: the kernel and its twin, for tests and benchmarks
# ------------------------------------------------------------------------------------------------


def reference_session(lineup: Lineup, session: int = 0, *, seed: int = 0, convergence: int = 100_000,
                      max_periods: int = 10_000, cell: int = 0, demand_noise: str = "lognormal",
                      demand_sigma: float = 0.0, start: SavedLearners | None = None) -> dict:
    """The plain-Python twin of one session (:func:`sim.learning.twin.reference_session`), with the
    session's own random stream. Slow: for tests and benchmarks on short sessions.

    Parameters
    ----------
    lineup : Lineup
    session : int
        The session's number (its random stream).
    seed : int
        The user's seed.
    convergence : int
        Stop once no greedy strategy has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.
    cell : int
        Family of random streams.
    demand_noise : {"lognormal", "normal"}
        Distribution of the demand shock (:mod:`sim.learning.shocks`).
    demand_sigma : float
        Its standard deviation (0: none).
    start : SavedLearners, optional
        Continue saved session ``session`` instead (its own stream; ``seed`` and ``cell`` are not used).

    Returns
    -------
    dict
        See :func:`sim.learning.twin.reference_session`.
    """
    state = stream_states(seed, (cell,), session, session + 1)[0]
    row = None if start is None else session_row(start, session)
    return _reference(lineup, state, convergence, max_periods, *shock_code(demand_noise, demand_sigma, prefix=""),
                      start=row)


def kernel_session(lineup: Lineup, session: int = 0, *, seed: int = 0, convergence: int = 100_000,
                   max_periods: int = 10_000, cell: int = 0, demand_noise: str = "lognormal",
                   demand_sigma: float = 0.0, start: SavedLearners | None = None) -> dict:
    """One session through the kernel, returning the fields of :func:`reference_session` that the kernel keeps.

    Parameters
    ----------
    lineup : Lineup
    session : int
        The session's number (its random stream).
    seed : int
        The user's seed.
    convergence : int
        Stop once no greedy strategy has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.
    cell : int
        Family of random streams.
    demand_noise : {"lognormal", "normal"}
        Distribution of the demand shock (:mod:`sim.learning.shocks`).
    demand_sigma : float
        Its standard deviation (0: none).
    start : SavedLearners, optional
        Continue saved session ``session`` instead (its own stream; ``seed`` and ``cell`` are not used), as
        :func:`learn` does.

    Returns
    -------
    dict
        ``status``, ``periods``, ``state`` (the history state), ``Q``, ``greedy``, ``z``, ``rng`` (the
        generator state after the last period), ``triggers`` (the record of the automata's punishments,
        :data:`sim.learning.inputs.TRIGGER_FIELDS`), ``counts`` and ``sums`` (the bandits' statistics).
    """
    if start is None:
        rng = stream_states(seed, (cell,), session, session + 1)[0].copy()
        st = lineup.session_state(rng)
        s = K.initial_state(rng, lineup.seats, lineup.stage)
    else:
        row = session_row(start, session)
        rng, s = row["rng"], row["history"]
        q, greedy = with_estimates(lineup.seats, row["Q"], row["greedy"], row["counts"], row["sums"])
        st = SessionState(q, greedy, row["z"], rng, row["clock"], row["triggers"], row["counts"], row["sums"])
    status, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, st, s, convergence,
                                 max_periods, *shock_code(demand_noise, demand_sigma, prefix=""))
    return {"status": int(status), "periods": int(t), "state": int(s), "Q": st.Q, "greedy": st.greedy, "z": st.z,
            "rng": rng, "triggers": st.triggers, "counts": st.counts, "sums": st.sums}
