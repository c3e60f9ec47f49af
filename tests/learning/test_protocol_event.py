"""A change of protocol as an event: saved learners go on in the same market under new learning settings.

Sources: synchronous learners that give the future no weight settle at a Nash equilibrium of the stage game (Asker,
Fershtman and Pakes, 2022, AEA Papers and Proceedings 112, abstract: "competitive pricing"); the definition of a
pure Nash equilibrium on the grid (no firm gains by another grid price; Fudenberg and Tirole, 1991, Game Theory,
section 1.2); the Q-learning update (Watkins and Dayan, 1992, Machine Learning 8).
"""

import textwrap

import numpy as np
import pytest

import sim
from sim.learning.events import Event, adapt_saved, event_from_table, with_saved_grids
from sim.learning.lineup import compile_lineup
from sim.learning.protocol import protocol_changes, protocol_words
from sim.learning.saved import save_learners
from sim.learning.session import learn
from strategies.qlearning import QLearner


def logit_market(cost=1.0):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=cost, model="bertrand", n_firms=2)


BEFORE = QLearner(m=7, beta=2e-4, delta=0.95)


@pytest.fixture(scope="module")
def saved():
    """Four sessions of two asynchronous Q-learners, converged and kept."""
    res = learn(logit_market(), BEFORE, sessions=4, seed=5, convergence=2000, workers=2, keep=True)
    assert res.converged.all()
    return res.saved


def test_the_protocol_event_is_a_kind_of_event():
    assert event_from_table({"kind": "protocol", "periods": 40}) == Event("protocol", 40, 40)


def test_myopic_synchronous_learners_settle_at_a_grid_nash_equilibrium_after_the_change(saved):
    # the saved learners priced above Nash under the asynchronous rule with delta = 0.95; switched to the
    # synchronous rule with delta = 0 they must settle at a pure Nash equilibrium of the stage game on their grid
    # (Asker, Fershtman and Pakes, 2022), checked here by brute force over the grid's profit table
    ev = Event("protocol", 200, 20)
    after = BEFORE.clone(delta=0.0, update="synchronous")
    lineup = with_saved_grids(after, saved, 2, ev)
    res = learn(logit_market(), lineup, sessions=4, seed=5, convergence=2000, workers=2, start=saved, event=ev)
    assert res.converged.all()
    pi = res.lineup.payoff.reshape(7, 7, 2)  # [a1, a0, firm]
    eq = {(a, b) for a in range(7) for b in range(7)
          if pi[b, a, 0] >= pi[b, :, 0].max() - 1e-12 and pi[b, a, 1] >= pi[:, a, 1].max() - 1e-12}
    for j in range(res.n_sessions):
        assert res.cycle_length[j] == 1 and tuple(int(a) for a in res.cycles[j][0]) in eq
    what = res.summary()["event"]["what"]
    for firm in (1, 2):
        assert f"firm {firm} update asynchronous -> synchronous" in what and f"firm {firm} delta 0.95 -> 0" in what


def test_the_change_of_protocol_plays_the_kernel_path_of_the_continued_sessions(saved):
    # the event adds nothing to the learning itself: the same sessions continued with the new rule and the counter
    # reset, without an event, end with the same Q-values, bit for bit
    ev = Event("protocol", 100, 10)
    lineup = with_saved_grids(BEFORE.clone(update="mixed", counterfactual_share=0.5), saved, 2, ev)
    with_event = learn(logit_market(), lineup, sessions=4, seed=5, convergence=2000, max_periods=8000, workers=2,
                       start=saved, event=ev, keep=True)
    plain_start = adapt_saved(saved, compile_lineup(logit_market(), lineup), ev)
    plain = learn(logit_market(), lineup, sessions=4, seed=5, convergence=2000,
                  max_periods=8000 + int(saved.clock[:, 0].min()), workers=2, start=plain_start, keep=True)
    both = with_event.converged & plain.converged
    assert both.any()
    for name in ("Q", "greedy", "history", "rng", "clock"):
        assert np.array_equal(getattr(with_event.saved, name)[both], getattr(plain.saved, name)[both]), name


def test_the_changes_are_listed_firm_by_firm(saved):
    lu = compile_lineup(logit_market(), [BEFORE.clone(grid=saved.header["seats"][0]["grid"], alpha=0.05),
                                         BEFORE.clone(grid=saved.header["seats"][1]["grid"])])
    changes = protocol_changes(saved.header["seats"], lu)
    assert changes == [{"firm": 1, "setting": "alpha", "before": 0.15, "after": 0.05}]
    assert protocol_words(changes) == "the learners' protocol changes: firm 1 alpha 0.15 -> 0.05"


def test_a_change_of_protocol_that_changes_nothing_or_the_market_is_refused(saved):
    ev = Event("protocol", 100, 10)
    same = with_saved_grids(BEFORE, saved, 2, ev)
    with pytest.raises(sim.InputError) as e:
        learn(logit_market(), same, sessions=4, start=saved, event=ev)
    assert e.value.key == "event.kind" and "saved ones" in e.value.message
    with pytest.raises(sim.InputError) as e:
        learn(logit_market(cost=1.1), with_saved_grids(BEFORE.clone(alpha=0.1), saved, 2, ev), sessions=4,
              start=saved, event=ev)
    assert e.value.key == "market.cost" and "kind = 'market'" in e.value.message


STEP2 = """
[experiment]
name = "switch"
kind = "learn"
[market]
model = "bertrand"
demand = "logit"
quality = 2.0
outside = 0.0
mu = 0.25
cost = 1.0
n_firms = 2
[learning]
beta = 2e-4
UPDATE
convergence = 2000
max_periods = 20000
continue_from = "saved.npz"
[event]
kind = "protocol"
periods = 100
[run]
sessions = 4
seed = 5
"""


@pytest.mark.parametrize("update, code", [('update = "synchronous"', 0), ("", 2)])
def test_the_command_reports_the_change_or_refuses_an_event_without_one(saved, tmp_path, capsys, monkeypatch,
                                                                        update, code):
    from sim.cli import main

    monkeypatch.chdir(tmp_path)
    save_learners(tmp_path / "saved.npz", saved)
    (tmp_path / "input.toml").write_text(textwrap.dedent(STEP2).replace("UPDATE", update))
    assert main(["learn", "input.toml"]) == code
    cap = capsys.readouterr()
    if code == 0:
        assert "firm 1 update asynchronous -> synchronous; firm 2 update asynchronous -> synchronous" in cap.out
    else:
        err = cap.err.strip()
        assert "\n" not in err and err.startswith("supergame learn: error: event.kind: 'protocol' changes"), err
