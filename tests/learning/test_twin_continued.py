"""The plain-Python twin continues saved sessions as the kernel does, bit for bit.

Source of the check: the twin follows the definitions (Q-learning update of Watkins and Dayan, 1992, Machine
Learning 8; UCB1 of Auer, Cesa-Bianchi and Fischer, 2002, Machine Learning 47; Thompson sampling of Agrawal and
Goyal, 2013) in plain Python with its own random stream (xoshiro256**, Blackman and Vigna, 2021, ACM TOMS 47(4)); the
kernel continuing a saved session and the twin continuing the same saved arrays must agree exactly.
"""

import dataclasses
import itertools

import numpy as np
import pytest

import sim
import strategies
from sim.learning.lineup import compile_lineup
from sim.learning.session import kernel_session, learn, reference_session
from strategies.qlearning import QLearner


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


LINEUPS = {
    "mixed-rule-q": lambda: [QLearner(m=4, beta=1e-3, update="mixed", counterfactual_share=0.4),
                             QLearner(m=4, beta=2e-3, k=1)],
    "thompson-against-tit-for-tat": lambda: [QLearner(family="thompson", m=4, noise=0.1), strategies.TitForTat()],
    "ucb-and-q-and-grim-trigger": lambda: [QLearner(family="ucb", m=3), QLearner(m=3, beta=1e-3),
                                           strategies.GrimTrigger()],
}
FIELDS = ("Q", "greedy", "rng", "z", "triggers", "counts", "sums")


@pytest.mark.parametrize("name", sorted(LINEUPS))
def test_kernel_and_twin_continue_a_saved_session_to_the_same_numbers(name):
    learners = LINEUPS[name]()
    market = logit_market(len(learners))
    lu = compile_lineup(market, learners)
    half = learn(market, learners, sessions=3, seed=21, convergence=10**12, max_periods=700, workers=1, keep=True)
    saved = half.saved
    assert np.all(saved.clock[:, 0] == 700)
    for j in range(3):
        k = kernel_session(lu, j, convergence=10**12, max_periods=1500, start=saved)
        r = reference_session(lu, j, convergence=10**12, max_periods=1500, start=saved)
        assert k["periods"] == r["periods"] == 1500 and k["state"] == r["state"]
        for field in FIELDS:
            assert np.array_equal(np.asarray(k[field]), np.asarray(r[field])), (j, field)
        # and both are the uninterrupted session: the kernel from the start to 1500 periods
        whole = kernel_session(lu, j, seed=21, convergence=10**12, max_periods=1500)
        for field in FIELDS:
            assert np.array_equal(np.asarray(k[field]), np.asarray(whole[field])), (j, field)


def test_a_continued_session_that_had_converged_plays_no_period_in_either():
    market, learners = logit_market(), [QLearner(m=4, beta=5e-3), QLearner(m=4, beta=5e-3)]
    lu = compile_lineup(market, learners)
    res = learn(market, learners, sessions=2, seed=3, convergence=300, workers=1, keep=True)
    assert res.converged.all()
    for j in range(2):
        k = kernel_session(lu, j, convergence=300, max_periods=10**9, start=res.saved)
        r = reference_session(lu, j, convergence=300, max_periods=10**9, start=res.saved)
        assert k["status"] == r["status"] == 0 and k["periods"] == r["periods"] == int(res.saved.clock[j, 0])
        assert np.array_equal(k["Q"], res.saved.Q[j]) and np.array_equal(r["Q"], res.saved.Q[j])


@pytest.mark.parametrize("family", ["ucb", "thompson"])
def test_a_bandits_estimates_are_taken_from_its_statistics_however_the_file_rounded_them(family):
    # A file saved before the estimates were sums * (1 / k) holds sums / k, which differs in the last bit for about
    # a quarter of the prices; the continued session recomputes them from the statistics, so the kernel, the twin
    # and the uninterrupted session agree whatever the file's rounding.
    learners = [QLearner(family=family, m=6, noise=0.05), QLearner(family=family, m=6, noise=0.05)]
    market = logit_market()
    lu = compile_lineup(market, learners)
    half = learn(market, learners, sessions=3, seed=5, convergence=10**12, max_periods=800, workers=1, keep=True)
    saved = half.saved
    k = saved.counts.astype(float) + (0.0 if family == "ucb" else 1.0)
    old = np.divide(saved.sums, k, out=np.zeros_like(k), where=k > 0)  # the earlier rounding
    q = saved.Q.copy()
    q[:, :, 0, :6] = old[:, :, :6]
    assert not np.array_equal(q, saved.Q)  # the test file does differ from the saved one
    rounded = dataclasses.replace(saved, Q=q)
    # one period on (every price but the one played keeps the estimate it started with), then 800
    for j, periods in itertools.product(range(3), (801, 1600)):
        a = kernel_session(lu, j, convergence=10**12, max_periods=periods, start=rounded)
        r = reference_session(lu, j, convergence=10**12, max_periods=periods, start=rounded)
        whole = kernel_session(lu, j, seed=5, convergence=10**12, max_periods=periods)
        for field in FIELDS:
            assert np.array_equal(np.asarray(a[field]), np.asarray(r[field])), (j, periods, field)
            assert np.array_equal(np.asarray(a[field]), np.asarray(whole[field])), (j, periods, field)
    # a window the session has already passed (no period played) and a short one (it stops when its greedy prices
    # hold): the twin starts from the statistics too, so both stop together with the same numbers
    for j in range(3):
        for window in (int(saved.clock[j, 1]), 50):
            a = kernel_session(lu, j, convergence=window, max_periods=5000, start=rounded)
            r = reference_session(lu, j, convergence=window, max_periods=5000, start=rounded)
            assert (a["status"], a["periods"]) == (r["status"], r["periods"]), (j, window)
            for field in FIELDS:
                assert np.array_equal(np.asarray(a[field]), np.asarray(r[field])), (j, window, field)
