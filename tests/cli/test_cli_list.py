"""``supergame list``: what the package ships, read from the constraint tables (so it cannot drift)."""

import json

import strategies
from sim.core.params import describe_parameters
from strategies.registry import known_names, strategy_class


def test_every_strategy_learner_kind_and_model_is_listed_with_its_parameters(cli):
    r = cli("list", "--json")
    assert r.code == 0
    doc = json.loads(r.out)
    assert [s["name"] for s in doc["strategies"]] == known_names()
    grim = next(s for s in doc["strategies"] if s["name"] == "grim_trigger")
    assert grim["parameters"] == json.loads(json.dumps(describe_parameters(strategies.GrimTrigger)))
    assert {k["name"] for k in doc["kinds"]} >= {"thresholds", "simulate", "learn", "tournament", "assess"}
    assert {m["name"] for m in doc["models"]} >= {"linear", "logit", "isoelastic", "differentiated"}
    q = next(x for x in doc["learners"] if x["name"] == "qlearning")
    alpha = next(p for p in q["parameters"] if p["name"] == "alpha")
    assert alpha["default"] == 0.15 and alpha["allowed"] == "a number in (0, 1]"


def test_the_listing_follows_the_validator(cli):
    # what the listing says a parameter accepts is what the constraint checks: a value outside it is refused
    cls = strategy_class("finite_punishment")
    length = next(p for p in describe_parameters(cls) if p["name"] == "length")
    assert "integer" in length["allowed"]
    r = cli("list", "strategies")
    assert r.code == 0 and "strategy finite_punishment" in r.out and length["allowed"] in r.out
    r = cli("list", "everything")
    assert r.code == 2 and "WHAT: must be among" in r.err
