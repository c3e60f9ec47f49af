"""The plain-words reading of an automaton's punishments during learning (:func:`sim.evidence.learn_automata.explain`)
says "consistent with" only where the record and the learners' outcome point the same way, and counts the first
trigger from the event after one. The record's entries are written by hand here (their meaning:
:func:`sim.learning.triggers.trigger_summary`); the outcome classes (near the static Nash level, near the joint-profit
level) follow Calvano, Calzolari, Denicolo and Pastorello (2020, AER 110(10)), who read learners against automata
the same way."""

import pytest

from sim.evidence.learn_automata import explain


def _record(stuck: float, triggered: int = 10, triggers: float = 1.0, share: float = 0.9) -> dict:
    return {"strategy": "grim_trigger", "firm": 2, "triggered": {"count": triggered, "share": triggered / 10},
            "first_trigger": {"median": 1200.0}, "last_trigger": {"median": 1200.0},
            "exploration_first": {"median": 0.002}, "exploration_last": {"median": 0.002},
            "triggers": {"mean": triggers}, "punishment_share": {"mean": share},
            "punishing_at_end": {"share": stuck}}


def _summary(near_nash: float, near_collusive: float) -> dict:
    return {"profit_gain": {"mean": 0.1 if near_nash else 0.8}, "near_nash": {"share": near_nash},
            "near_collusive": {"share": near_collusive}}


@pytest.mark.parametrize("stuck, nash, coll, words", [
    (1.0, 1.0, 0.0, "the learners last learned against its punishment, consistent with this"),
    (1.0, 0.0, 1.0, "the learners last learned against its punishment, yet not to compete"),
    (0.0, 0.0, 1.0, "consistent with learners that learned what keeping to its collusive state earns"),
    (0.0, 1.0, 0.0, "yet the learners did not keep to it"),
    (0.0, 0.0, 0.0, "and the learners ended neither near competition nor near the joint-profit level"),
])
def test_consistent_only_where_record_and_outcome_agree(stuck, nash, coll, words):
    text = explain(_record(stuck), _summary(nash, coll))
    assert words in text
    phrases = {"consistent with this", "yet not to compete", "consistent with learners",
               "yet the learners did not keep to it", "neither near competition"}
    assert sum(p in text for p in phrases) == 1
    assert "they learned to " in text


def test_the_first_trigger_is_counted_from_the_event_and_exploration_is_stated_not_blamed():
    rec = _record(1.0)
    rec["first_after_event"] = {"median": 17.0}
    text = explain(rec, _summary(1.0, 0.0))
    assert ("first in period 1,200 (median over sessions), in period 17 after the event (median over sessions, "
            "counted session by session)") in text
    assert "when the learners explored with probability 0.2 %" in text
    assert "still explored" not in text
    assert "after the event" not in explain(_record(1.0), _summary(1.0, 0.0))


def test_an_automaton_that_never_left_its_state_draws_no_cause():
    text = explain(_record(0.0, triggered=0, share=1.0), _summary(1.0, 0.0))
    assert "it competed throughout; the learners learned to price" in text and ", so the" not in text


def test_the_first_trigger_after_an_event_is_counted_session_by_session():
    # sessions continued from different periods: each delay is counted from its own session's event
    import numpy as np

    from sim.learning.triggers import trigger_summary

    class _Lineup:
        n_seats, names, learner_seats = 2, ["qlearning", "grim_trigger"], [0]
        learners = [type("L", (), {"family": "q"})(), None]
        seats = type("S", (), {"beta": np.array([1e-4, 0.0])})()

    rec = np.zeros((3, 2, 4), dtype=np.int64)
    rec[:, 1, 0] = 1
    rec[:, 1, 1] = [1016, 5002, 9100]  # 0-based periods of the triggering conduct
    out = trigger_summary(_Lineup(), rec, np.ones((3, 2), bool), np.array([100, 100, 100]), np.ones(3, bool),
                          start=np.array([1000, 5000, 9000]))
    # periods 1017, 5003 and 9101 (from 1) against events after 1,000, 5,000 and 9,000 periods: the 17th, 3rd and
    # 101st periods after, median 17; a difference of medians (5,003 - 5,000) would give 3
    assert out[0]["first_after_event"]["median"] == 17.0
