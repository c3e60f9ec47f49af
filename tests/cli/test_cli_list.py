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


def test_every_setting_of_a_learn_experiment_is_listed_with_the_default_the_reader_uses(cli):
    # the keys the learn reader accepts besides the learners' parameters are all listed, and a document without them
    # reads to the listed defaults (one table of defaults serves both)
    from sim.learning.events import EVENT_KEYS
    from sim.learning.tables import IMPULSE_KEYS, LEARNER_PARAMS, LEARNING_KEYS, RUN_KEYS, learning_from_dict

    r = cli("list", "learners", "--json")
    rows = {p["name"]: p for p in json.loads(r.out)["learn_settings"]}
    expected = ({f"learning.{k}" for k in LEARNING_KEYS if k not in LEARNER_PARAMS} | {f"run.{k}" for k in RUN_KEYS}
                | {f"impulse.{k}" for k in IMPULSE_KEYS} | {f"event.{k}" for k in EVENT_KEYS})
    assert set(rows) == expected
    doc = {"market": {"model": "bertrand", "demand": "logit", "quality": 2.0, "outside": 0.0, "mu": 0.25, "cost": 1.0,
                      "n_firms": 2}, "learning": {"m": 3}}
    st = learning_from_dict(doc)["settings"]
    for key, name in (("learning.convergence", "convergence"), ("learning.max_periods", "max_periods"),
                      ("learning.near", "near"), ("learning.limit_periods", "limit_periods"),
                      ("run.sessions", "sessions"), ("run.seed", "seed"), ("run.confidence", "confidence"),
                      ("impulse.periods", "response_periods")):
        assert st[name] == rows[key]["default"], key
    assert st["workers"] is None and rows["run.workers"]["default_words"] == "every usable core"
    # the Python API's own defaults (sim.learning.session.learn) are the same
    import inspect

    from sim.learning.events import EVENT_PERIODS_DEFAULT, event_from_table
    from sim.learning.session import learn
    from sim.learning.tables import SETTING_DEFAULTS

    sig = inspect.signature(learn).parameters
    for name, value in SETTING_DEFAULTS.items():
        assert sig[name].default == value, name
    assert event_from_table({"kind": "market"}).periods == EVENT_PERIODS_DEFAULT == rows["event.periods"]["default"]
    m = next(p for p in json.loads(r.out)["learners"][0]["parameters"] if p["name"] == "m")
    assert m["default"] is None and m["default_words"].startswith("15 without a grid")
    assert "15 without a grid" in cli("list", "learners").out
