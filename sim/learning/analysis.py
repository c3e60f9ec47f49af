"""The learn analysis: one function from a validated specification to a result that is plain data.

:func:`learn_analysis` runs the learning sessions of a :class:`LearnSpec` (:func:`sim.learning.session.learn`) and
returns a :class:`LearnResult`: what ``supergame learn`` prints, what a ``learn`` cell of a run stores and what the
evidence bundle draws (:mod:`sim.evidence.learn`) -- limit prices with their intervals, the profit gain and its
distribution, convergence, the cycles, the impulse response with its bands and the static-Nash and joint-profit
benchmarks, the value of the deviation, the return to the cycle, and every session's outcomes.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from sim.core.records import Record, to_plain
from sim.core.stats import mean_estimate
from sim.learning.inputs import STATUS_CONVERGED
from sim.learning.noisy_prices import ERROR_PLAY_PERIODS, error_play, error_play_start
from sim.learning.results import LearningResult
from sim.learning.saved import save_learners
from sim.learning.session import learn
from sim.learning.shock_response import ShockResponse, price_cuts, shock_response
from sim.learning.shocks import measures_price_wars
from sim.learning.signals import greedy_response

__all__ = [
    "SIGNAL_DRAW_SD",
    "SIGNAL_RESPONSE_PERIODS",
    "LearnResult",
    "LearnSpec",
    "learn_analysis",
    "learn_result",
    "measures_price_wars",
    "noisy_play",
    "signal_response",
]

#: with the profit signal, the adverse draw forced after learning lies this many standard deviations of ``log theta``
#: below its median: ``theta = exp(-3 sigma - sigma^2 / 2)`` (0.74 at sigma = 0.1)
SIGNAL_DRAW_SD = 3.0
#: and the prices are followed over this many periods after it
SIGNAL_RESPONSE_PERIODS = 20


@dataclass(frozen=True)
class LearnSpec:
    """A validated learning question (built by the ``learn`` kind from an experiment's tables by
    :func:`sim.learning.tables.learning_from_dict`).

    Attributes
    ----------
    market : sim.Market
    learner : QLearner or list
        The learner of every seat, or one strategy per seat.
    settings : dict
        Keyword arguments of :func:`sim.learning.session.learn` (``workers`` is replaced by the threads the cell
        may use).
    start : sim.learning.saved.SavedLearners, optional
        Saved sessions to continue (``learning.continue_from``), already checked against the line-up.
    event : sim.learning.events.Event, optional
        The event after which the saved sessions go on (``[event]``).
    unused : dict
        Settings given but not used by these learners (key path -> reason), for the report.
    """

    market: object
    learner: object
    settings: dict
    start: object = None
    event: object = None
    unused: dict = field(default_factory=dict)


@dataclass(frozen=True)
class LearnResult(Record):
    """Everything the learn analysis found, as plain data (JSON values; nan as None).

    Attributes
    ----------
    market : dict
        The market's settings (:meth:`sim.Market.to_dict`).
    n_firms : int
    quantity_setting : bool
        Whether firms set quantities (actions are quantities) rather than prices.
    symmetric : bool
        Whether the market is symmetric (per-firm profit gains are shown otherwise).
    settings : dict
        The run's settings (sessions, seed, convergence, max_periods, deviator -- the deviating firm, from 1 --,
        deviation, response_periods, near, workers, cell, confidence, limit_periods).
    learners : list of dict
        Per seat: a learner's parameters and grid, or an automaton's name, actions and whether it acts at random
        (:meth:`sim.learning.results.LearningResult.describe_seats`).
    seats : list of str
        The strategy name of each seat.
    summary : dict
        Statistics across sessions (:meth:`sim.learning.results.LearningResult.summary`).
    per_session : dict
        Every session's outcomes (:meth:`sim.learning.results.LearningResult.per_session`).
    limit_actions : ndarray of shape (n_sessions, n_firms)
        Every session's mean limit action (price or quantity).
    automata : list of dict
        Per automaton seat, its punishments during learning across sessions
        (:func:`sim.learning.triggers.trigger_summary`); empty when only learners play.
    event : dict
        For saved sessions continued after an event: how prices moved after it and how long the learners took to
        settle again (:func:`sim.learning.events.event_summary`); empty otherwise.
    shock_response : dict
        With the profit signal and a demand shock (``observe = "own_profit"``, ``demand_sigma > 0``): the prices
        after one forced adverse draw (:func:`signal_response`); empty otherwise.
    error_play : dict
        With noisy prices (``observe = "noisy_prices"``): the outcomes of greedy play with the same error after
        learning (:func:`noisy_play`); empty otherwise.
    """

    market: dict
    n_firms: int
    quantity_setting: bool
    symmetric: bool
    settings: dict
    learners: list
    seats: list
    summary: dict
    per_session: dict
    limit_actions: np.ndarray
    automata: list = field(default_factory=list)
    event: dict = field(default_factory=dict)
    shock_response: dict = field(default_factory=dict)
    error_play: dict = field(default_factory=dict)

    @property
    def limit_exact(self) -> bool:
        """Whether the limit outcomes are exact (no automaton acts at random) rather than a simulated estimate."""
        return self.summary["limit"]["method"] == "exact"

    @property
    def confidence(self) -> float:
        """Level of the confidence intervals."""
        return float(self.summary["confidence"])

    @property
    def selected(self) -> np.ndarray:
        """The sessions the summary is over: the converged ones, or all when none converged (bool, n_sessions)."""
        conv = np.asarray(self.per_session["converged"], dtype=bool)
        return conv if conv.any() else np.ones_like(conv)


def signal_response(res: LearningResult) -> dict:
    """The prices after one adverse demand draw of a run with a demand shock (:func:`measures_price_wars`), as plain
    data.

    Parameters
    ----------
    res : sim.learning.results.LearningResult
        A run with a demand shock and the sessions kept, whose learners see past prices or the profit signal
        (``observe = "own_profit"``).

    Returns
    -------
    dict
        ``theta`` (the draw, :data:`SIGNAL_DRAW_SD` standard deviations below the median), ``periods``, ``change``
        (list of estimates, one per period, :class:`sim.learning.shock_response.ShockResponse`), ``price_war``, and
        ``cut``, ``temporary``, ``depth``, ``duration`` (:class:`sim.learning.shock_response.PriceCuts`), and the same
        four under ``greedy`` for the learned strategies alone under the profit signal
        (:func:`sim.learning.signals.greedy_response`: no learning, every signal forced low after period 1; absent
        when the learners see prices, whose greedy play does not see a draw); each estimate a dict of ``value, se,
        low, high, n, method, note``.
    """
    sigma = float(res.settings["demand_sigma"])
    theta = math.exp(-SIGNAL_DRAW_SD * sigma - 0.5 * sigma * sigma)
    resp = shock_response(res, theta, SIGNAL_RESPONSE_PERIODS)
    level = float(res.settings.get("confidence", 0.95))
    cuts = price_cuts(resp, level=level)
    out = {"theta": resp.theta, "periods": SIGNAL_RESPONSE_PERIODS, "change": resp.change, "price_war": resp.price_war,
           "cut": cuts.cut, "temporary": cuts.temporary, "depth": cuts.depth, "duration": cuts.duration}
    if res.settings.get("observe") != "own_profit":
        return to_plain(out)
    # the learned strategies alone: greedy play from the same final states, no learning, the signal forced low
    sv, band = res.saved, float(res.settings["signal_band"])
    done = np.flatnonzero(sv.status == STATUS_CONVERGED)
    paths = [greedy_response(int(sv.history[j]), sv.greedy[j], res.lineup, band, SIGNAL_RESPONSE_PERIODS) for j in done]
    w = np.array([p[0] for p in paths]).reshape(done.size, SIGNAL_RESPONSE_PERIODS + 1)
    wo = np.array([p[1] for p in paths]).reshape(done.size, SIGNAL_RESPONSE_PERIODS + 1)
    greedy = price_cuts(ShockResponse(theta, w, wo, [], resp.price_war), level=level)
    out["greedy"] = {"cut": greedy.cut, "temporary": greedy.temporary, "depth": greedy.depth,
                     "duration": greedy.duration}
    return to_plain(out)


def noisy_play(res: LearningResult) -> dict:
    """The outcomes of greedy play with the learning's observation error, after learning with noisy prices.

    Every session's learned strategies play on from its final state for
    :data:`sim.learning.noisy_prices.ERROR_PLAY_PERIODS` periods, each learner seeing its rivals' prices with the
    error of learning (:func:`sim.learning.noisy_prices.error_play`, from the session's generator advanced by
    ``2**128`` draws); no learning, no exploration, no demand shock. Statistics over the sessions of the summary
    (the converged ones, or all when none converged).

    Parameters
    ----------
    res : sim.learning.results.LearningResult
        A run with ``observe = "noisy_prices"`` and the sessions kept.

    Returns
    -------
    dict
        ``periods``, ``noise``, ``profit_gain`` (the profit gain of the mean profits with error), ``gain_change``
        (it minus the same session's limit profit gain without error), ``prices`` (per firm, the mean price with
        error), each an estimate (``value, se, low, high, n, method, note``); and ``per_session`` (the profit gain
        with error of every session, None where not computed).
    """
    lu, sv = res.lineup, res.saved
    seats, stage = lu.seats, lu.stage
    noise = float(res.settings["price_noise"])
    sel = res.converged if res.converged.any() else np.ones_like(res.converged)
    n, f = sel.size, int(seats.radix.size)
    means = np.full((n, 2, f), np.nan)
    for j in np.flatnonzero(sel):
        error_play(int(sv.history[j]), sv.greedy[j], seats.lidx, seats.radix, seats.place, int(stage.M),
                   stage.prices, stage.payoff, noise, error_play_start(sv.rng[j]), ERROR_PLAY_PERIODS, means[j])
    nash, coll = lu.nash_profits, lu.collusive_profits
    gain = (means[:, 1, :].sum(axis=1) - nash.sum()) / (coll.sum() - nash.sum())
    level = float(res.settings.get("confidence", 0.95))
    return to_plain({"periods": ERROR_PLAY_PERIODS, "noise": noise,
                     "profit_gain": mean_estimate(gain[sel], level),
                     "gain_change": mean_estimate((gain - res.profit_gain)[sel], level),
                     "prices": [mean_estimate(means[sel, 0, i], level) for i in range(f)],
                     "per_session": [None if not np.isfinite(g) else float(g) for g in gain]})


def learn_result(res: LearningResult, market, unused: dict | None = None) -> LearnResult:
    """The plain-data result of a run of learning sessions.

    Parameters
    ----------
    res : sim.learning.results.LearningResult
    market : sim.Market
        The market the sessions ran on.
    unused : dict, optional
        Settings the run accepted but its learners do not use (key path -> reason), recorded in
        ``settings["unused"]`` for the report.

    Returns
    -------
    LearnResult
        Holding JSON values only (nan as None), so that the result a command prints is the result a run folder
        stores and gives back.
    """
    d = res.to_dict()
    ms = res.lineup.market
    summary = dict(d["summary"])
    automata = summary.pop("automata", [])
    event = summary.pop("event", {})
    settings = {**d["settings"], "unused": unused} if unused else d["settings"]
    doc = {"market": market.to_dict(), "n_firms": int(ms.n_firms), "quantity_setting": bool(ms.quantity_setting),
           "symmetric": bool(ms.symmetric), "settings": settings, "learners": d["learners"],
           "seats": d["seats"], "summary": summary, "per_session": d["per_session"],
           "limit_actions": res.limit_actions, "automata": automata, "event": event}
    if measures_price_wars(res.settings, res.event) and res.saved is not None:
        doc["shock_response"] = signal_response(res)
    if res.settings.get("observe") == "noisy_prices" and res.saved is not None:
        doc["error_play"] = noisy_play(res)
    return LearnResult.from_dict(to_plain(doc))


def learn_analysis(spec: LearnSpec, *, cell: int = 0, workers: int = 1, progress: bool = False,
                   save_to=None) -> LearnResult:
    """Run the learning sessions of a specification (and save the learners at the end, when asked).

    Parameters
    ----------
    spec : LearnSpec
    cell : int
        The cell's index: its family of random streams (``(cell,)``).
    workers : int
        Sessions run at once (the numbers do not depend on it).
    progress : bool
        Show a progress bar over sessions.
    save_to : str or Path, optional
        Write every session's state at the end of learning to this file (:func:`sim.learning.saved.save_learners`;
        missing folders are made).

    Returns
    -------
    LearnResult
        The same whether or not the learners are saved, and whether the sessions are new or continued.
    """
    s = dict(spec.settings)
    s["workers"] = max(1, int(workers))
    # the response to an adverse demand draw goes on from the sessions' final states
    # and so does play with error after learning from noisy prices
    signal = measures_price_wars(s, spec.event)
    noisy = s.get("observe") == "noisy_prices"
    res = learn(spec.market, copy.deepcopy(spec.learner), progress=progress, cell=cell, start=spec.start,
                keep=save_to is not None or signal or noisy, event=spec.event, **s)
    if save_to is not None:
        Path(save_to).parent.mkdir(parents=True, exist_ok=True)
        save_learners(save_to, res.saved)
    return learn_result(res, spec.market, spec.unused)
