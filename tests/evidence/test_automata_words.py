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
    (1.0, 1.0, 0.0, "consistent with where they ended"),
    (1.0, 0.0, 1.0, "yet they did not end at the static Nash level"),
    (0.0, 0.0, 1.0, "consistent with learners that learned what keeping to its collusive state earns"),
    (0.0, 1.0, 0.0, "yet they ended at the static Nash level"),
])
def test_consistent_only_where_record_and_outcome_agree(stuck, nash, coll, words):
    text = explain(_record(stuck), _summary(nash, coll))
    assert words in text
    others = {"consistent with where they ended", "yet they did not end at the static Nash level",
              "consistent with learners that learned", "yet they ended at the static Nash level"} - {words}
    assert not any(o in text for o in others if not words.startswith(o))


def test_the_first_trigger_is_counted_from_the_event_and_exploration_is_stated_not_blamed():
    text = explain(_record(1.0), _summary(1.0, 0.0), event_start=1183.0)
    assert "first in period 1,200 (median over sessions), 17 periods after the event" in text
    assert "when the learners explored with probability 0.2 %" in text
    assert "still explored" not in text


def test_an_automaton_that_never_left_its_state_draws_no_cause():
    text = explain(_record(0.0, triggered=0, share=1.0), _summary(1.0, 0.0))
    assert "it competed throughout, and the learners ended" in text and ", so the" not in text
