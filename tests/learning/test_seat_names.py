"""Seats are named by their learner's family; saved files keep writing the strategy and family as before."""

import numpy as np

import sim
import strategies
from sim.learning.lineup import compile_lineup
from sim.learning.saved import describe_layout, load_learners, save_learners
from sim.learning.session import learn
from strategies.qlearning import QLearner


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


def test_every_seat_is_named_by_its_family_or_its_automaton(tmp_path):
    lu = compile_lineup(logit_market(3), [QLearner(family="ucb", m=3), QLearner(family="thompson", m=3),
                                          strategies.TitForTat()])
    assert lu.names == ("ucb", "thompson", "tit_for_tat")
    assert compile_lineup(logit_market(), QLearner(m=3)).names == ("qlearning", "qlearning")
    first = learn(logit_market(), QLearner(m=3, beta=1e-2), sessions=1, seed=1, convergence=50, workers=1, keep=True)
    save_learners(tmp_path / "q.npz", first.saved)
    fx = compile_lineup(logit_market(), [QLearner(family="fixed", policy_from=str(tmp_path / "q.npz"), firm=1),
                                         QLearner(m=3)])
    assert fx.names == ("fixed", "qlearning")


def test_the_result_shows_the_family_names_and_saved_files_keep_strategy_and_family(tmp_path):
    learners = [QLearner(family="ucb", m=3), QLearner(family="thompson", m=3)]
    res = learn(logit_market(), learners, sessions=2, seed=2, convergence=10**12, max_periods=300, workers=1,
                keep=True)
    assert res.to_dict()["seats"] == ["ucb", "thompson"]
    # the file format is unchanged: every learner is strategy "qlearning" with its family beside it, so files
    # written before seats were named by family are read and continued the same way
    layout = describe_layout(res.lineup)
    assert [d["strategy"] for d in layout] == ["qlearning", "qlearning"]
    assert [d["family"] for d in layout] == ["ucb", "thompson"]
    save_learners(tmp_path / "b.npz", res.saved)
    saved = load_learners(tmp_path / "b.npz")
    assert [d["strategy"] for d in saved.header["seats"]] == ["qlearning", "qlearning"]
    more = learn(logit_market(), learners, sessions=2, seed=2, convergence=10**12, max_periods=600, workers=1,
                 start=saved)
    assert np.all(more.periods == 600)
