"""Saved learners continued after the entry of a new learning firm.

Sources: the Q-learning update and its initial values (Watkins and Dayan, 1992, Machine Learning 8; Calvano,
Calzolari, Denicolo and Pastorello, 2020, AER 110(10), eq. 8: the value of each price against rivals that price
uniformly at random, discounted); with more symmetric firms the static Nash price of logit Bertrand competition falls
(Anderson, de Palma and Thisse, 1992, Discrete Choice Theory of Product Differentiation, ch. 6: p = c + mu / (1 -
share), and each firm's share falls with entry).
"""

import numpy as np
import pytest

import sim
from sim.learning.events import Event, adapt_saved, check_event, with_saved_grids
from sim.learning.lineup import compile_lineup
from sim.learning.session import learn
from strategies.qlearning import QLearner


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


@pytest.fixture(scope="module")
def saved():
    res = learn(logit_market(), QLearner(m=5, beta=5e-4), sessions=4, seed=11, convergence=2000, workers=2, keep=True)
    assert res.converged.all()
    return res.saved


def test_a_learner_entrant_starts_as_a_new_learner_and_the_incumbents_keep_what_they_knew(saved):
    ev = Event("entry", 100, 10)
    lineup = with_saved_grids(QLearner(m=5, beta=5e-4), saved, 3, ev)
    lu = compile_lineup(logit_market(3), lineup)
    check_event(saved, lu, ev, 4)
    new = adapt_saved(saved, lu, ev)
    m_old, m_new = 25, int(lu.stage.M)
    assert m_new == 125
    for s_new in range(m_new):
        s_old = s_new % m_old  # the entrant's action is the highest digit of a profile
        assert np.array_equal(new.Q[:, :2, s_new, :5], saved.Q[:, :2, s_old, :5])
        assert np.array_equal(new.greedy[:, :2, s_new], saved.greedy[:, :2, s_old])
    # the entrant: the initial values of a new learner of the three-firm market (the same in every state)
    fresh = compile_lineup(logit_market(3), lineup).q0[2]
    assert np.array_equal(new.Q[:, 2], np.repeat(fresh[None], 4, axis=0))
    g0 = int(np.argmax(fresh[0, :5]))
    assert np.all(new.greedy[:, 2, :m_new] == g0)
    # its last price in the history is that greedy action; the incumbents' last prices are kept
    assert np.array_equal(new.history % m_old, saved.history) and np.all(new.history // m_old == g0)
    assert np.all(new.counts == 0) and new.z.shape == (4, 3)


def test_a_learner_entrant_whose_memory_exceeds_the_saved_history_is_refused(saved):
    ev = Event("entry", 100, 10)
    lineup = with_saved_grids([QLearner(m=5, beta=5e-4), QLearner(m=5, beta=5e-4), QLearner(m=3, k=2)], saved, 3, ev)
    lu = compile_lineup(logit_market(3), lineup)
    with pytest.raises(sim.InputError) as e:
        check_event(saved, lu, ev, 4)
    assert e.value.key == "strategies" and "memory" in e.value.message


def test_after_a_learner_enters_the_sessions_settle_again_below_the_duopoly_prices(saved):
    # Anderson, de Palma and Thisse (1992): the static Nash price falls from two to three symmetric firms; the learned
    # prices after the entry lie below those before it. Fixed seeds; tolerance: the mean over firms and sessions of
    # the settled prices must lie below the mean price of the last period before the entry (4 sessions).
    ev = Event("entry", 200, 20)
    lineup = with_saved_grids(QLearner(m=5, beta=5e-4), saved, 3, ev)
    res = learn(logit_market(3), lineup, sessions=4, seed=11, convergence=2000, workers=2, start=saved, event=ev)
    assert res.converged.all()
    s = res.summary()["event"]
    assert s["what"] == "firm 3 enters, priced by a new learner"
    before = np.nanmean(np.array(s["prices"]["mean"])[0, :2])
    assert res.limit_prices.mean() < before
    assert res.lineup.nash_prices[0] < compile_lineup(logit_market(2), QLearner(m=5)).nash_prices[0]
