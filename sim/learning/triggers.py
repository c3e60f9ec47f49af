"""Learners against automata, explained: when and how often each automaton's punishment was triggered while the
learners learned, how much of the session it spent punishing, and how much the learners still explored then.

A Q-learner facing grim trigger typically ends at the static Nash price: exploring at random early in the session,
it undercuts the agreed price, the automaton enters its punishment state and -- grim trigger never forgives --
stays there; what the learner then learns is its best reply to a rival at the punishment price. Facing tit for tat
the same exploration is punished for one period only, and the learner can learn that the agreed price pays. The
kernel keeps the record that shows this (:data:`sim.learning.inputs.TRIGGER_FIELDS`); :func:`trigger_summary`
turns it into statistics across sessions.

The exploration probability at a trigger is the learners' ``exp(-beta t)`` in the period ``t`` whose conduct
triggered the punishment (Calvano, Calzolari, Denicolo and Pastorello, 2020, AER, section II: epsilon-greedy
exploration decaying as ``exp(-beta t)``); with learners of different ``beta``, the first learner's.
"""

from __future__ import annotations

import numpy as np

from sim.simulation.results import mean_estimate, wilson_estimate

__all__ = ["trigger_summary"]


def _mean(x, level: float, share: bool = False) -> dict:
    """Mean with Student's interval; a share's interval is cut to [0, 1], where the share lies."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"mean": np.nan, "se": np.nan, "low": np.nan, "high": np.nan, "n": 0}
    e = mean_estimate(x, level)
    low, high = (max(0.0, e.low), min(1.0, e.high)) if share else (e.low, e.high)
    return {"mean": e.value, "se": e.se, "low": low, "high": high, "n": int(x.size)}


def _share(k: int, n: int, level: float) -> dict:
    if n == 0:
        return {"share": np.nan, "low": np.nan, "high": np.nan, "count": 0, "n": 0}
    e = wilson_estimate(k, n, level)
    return {"share": e.value, "low": e.low, "high": e.high, "count": int(k), "n": int(n)}


def _median(x) -> float:
    x = np.asarray(x, dtype=float)
    return float(np.median(x)) if x.size else np.nan


def trigger_summary(lineup, triggers: np.ndarray, punishing_at_end: np.ndarray, periods: np.ndarray,
                    sel: np.ndarray, level: float = 0.95, start: np.ndarray | None = None) -> list[dict]:
    """Statistics across sessions of every automaton's punishments during learning.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    triggers : ndarray of int64, shape (n_sessions, n_seats, 4)
        Every session's record (:data:`sim.learning.inputs.TRIGGER_FIELDS`).
    punishing_at_end : ndarray of bool, shape (n_sessions, n_seats)
        Whether each automaton was in a non-collusive state at the end of learning.
    periods : ndarray of int64, shape (n_sessions,)
        Periods each session played while the record was kept (after an event: the periods since the event).
    sel : ndarray of bool, shape (n_sessions,)
        The sessions the statistics are over.
    level : float
        Confidence level (Student's t for means, Wilson for shares, as in :mod:`sim.core.stats`).
    start : ndarray of int64, shape (n_sessions,), optional
        After an event: the periods each session had played before it (the index of its first period after it).

    Returns
    -------
    list of dict
        One per automaton seat, in seat order: ``firm`` (from 1), ``strategy``, ``triggered`` (share of sessions
        with at least one entry into punishment), ``triggers`` (entries per session), ``first_trigger`` and
        ``last_trigger`` (the period of the conduct that caused the first and the last entry, counted from 1, over
        the sessions with one; ``mean`` with its interval and ``median``), ``punishment_share`` (share of the
        session's periods played in a non-collusive state), ``exploration_first`` and ``exploration_last`` (the
        Q-learners' exploration probability at those periods; nan when every learner is a bandit) and
        ``punishing_at_end`` (share of sessions that ended learning with the automaton punishing); after an event,
        ``first_after_event``: the median over the sessions with a trigger of the first trigger's period counted
        from the event, session by session (1: the first period after it).
    """
    rec = np.asarray(triggers)[sel]
    per = np.asarray(periods, dtype=float)[sel]
    end = np.asarray(punishing_at_end)[sel]
    # the exploration probability exp(-beta t) of the first Q-learner; bandits have none (nan: not reported)
    seats = [i for i in lineup.learner_seats if lineup.learners[i].family == "q"]
    beta = float(lineup.seats.beta[seats[0]]) if seats else np.nan
    out = []
    for i in range(lineup.n_seats):
        if lineup.learners[i] is not None:
            continue
        count, first, last, punishing = (rec[:, i, k] for k in range(4))
        hit = count > 0
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(per > 0, punishing / np.maximum(per, 1), np.nan)
        f1, l1 = first[hit].astype(float), last[hit].astype(float)
        out.append({
            "firm": i + 1,
            "strategy": lineup.names[i],
            "triggered": _share(int(hit.sum()), int(hit.size), level),
            "triggers": _mean(count, level),
            "first_trigger": {**_mean(f1 + 1, level), "median": _median(f1 + 1)},
            "last_trigger": {**_mean(l1 + 1, level), "median": _median(l1 + 1)},
            "punishment_share": _mean(share, level, share=True),
            "exploration_first": {**_mean(np.exp(-beta * f1), level, share=True),
                                  "median": _median(np.exp(-beta * f1))},
            "exploration_last": {**_mean(np.exp(-beta * l1), level, share=True),
                                 "median": _median(np.exp(-beta * l1))},
            "punishing_at_end": _share(int(end[:, i].sum()), int(end.shape[0]), level),
        })
        if start is not None:
            since = f1 - np.asarray(start, dtype=float)[sel][hit] + 1.0
            out[-1]["first_after_event"] = {"median": _median(since)}
    return out
