"""Merging bandits: a merger event whose merging products are priced by UCB or Thompson-sampling bandits.

Sources: rewards in [0, 1] (Auer, Cesa-Bianchi and Fischer, 2002, "Finite-time analysis of the multiarmed bandit
problem", Machine Learning 47, UCB1; Agrawal and Goyal, 2013, Thompson sampling with Gaussian priors); a merged firm
maximises the summed profit of its products (Deneckere and Davidson, 1985, RAND Journal of Economics 16(4)); the
profits are recomputed from the market's demand outside the learning code (sim.Market.spec().evaluate).
"""

import numpy as np
import pytest

import sim
from sim.learning.events import Event, adapt_saved, with_saved_grids
from sim.learning.lineup import compile_lineup
from sim.learning.merger import merged_lineup, merged_statistics
from sim.learning.session import kernel_session, learn, reference_session
from strategies.qlearning import QLearner

NEVER = 10**12


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


SEATS = {
    "ucb": lambda: [QLearner(family="ucb", m=5), QLearner(family="ucb", m=5)],
    "thompson-noisy-and-q": lambda: [QLearner(family="thompson", m=5, noise=0.1), QLearner(m=5, beta=1e-3)],
}
EV = Event("merger", 100, 10, (1, 2))


def _merged_start(name, periods=900):
    """Saved sessions of the line-up after ``periods`` periods, as the run after the merger starts them."""
    learners = SEATS[name]()
    first = learn(logit_market(), learners, sessions=3, seed=7, convergence=NEVER, max_periods=periods, workers=1,
                  keep=True)
    lineup = with_saved_grids(learners, first.saved, 2, EV)
    before = compile_lineup(logit_market(), lineup)
    after = merged_lineup(before, EV.firms)
    return first.saved, before, after, merged_statistics(adapt_saved(first.saved, before, EV), before, after)


@pytest.mark.parametrize("name", sorted(SEATS))
def test_a_merger_of_bandits_runs_and_reports_the_static_effect(name):
    learners = SEATS[name]()
    first = learn(logit_market(), learners, sessions=3, seed=7, convergence=NEVER, max_periods=900, workers=1,
                  keep=True)
    res = learn(logit_market(), with_saved_grids(learners, first.saved, 2, EV), sessions=3, seed=7,
                convergence=500, max_periods=20_000, workers=1, start=first.saved, event=EV)
    ev = res.summary()["event"]
    assert ev["kind"] == "merger" and "firm 1 and firm 2 merge" in ev["what"]
    assert ev["merger"]["available"] and all(x > 0 for x in ev["merger"]["static_change"])


def test_a_merging_bandits_rewards_are_the_merged_firms_profits_scaled_into_0_1():
    _saved, before, after, _start = _merged_start("ucb")
    prices = before.stage.actions
    _q, _p, pi = logit_market().spec().evaluate(prices)
    joint = pi[:, 0] + pi[:, 1]
    for i in (0, 1):
        r = (joint - after.seats.reward_lo[i]) / after.seats.reward_span[i]
        # UCB1's rewards lie in [0, 1]; the largest profit on the grid is reward 1 (Auer et al., 2002)
        assert r.min() >= 0 and np.isclose(r.max(), 1.0, rtol=0, atol=1e-12)
        # before the merger the scale was the product's own profits
        assert np.isclose(((pi[:, i] - before.seats.reward_lo[i]) / before.seats.reward_span[i]).max(), 1.0)


def test_the_saved_statistics_keep_what_each_bandit_knew_in_profit_units():
    saved, before, after, start = _merged_start("ucb")
    assert np.array_equal(start.counts, saved.counts)
    for i in (0, 1):
        li = int(before.seats.lidx[i])
        n = saved.counts[:, li, :5]
        mean_profit = saved.sums[:, li, :5] / n * before.seats.reward_span[i] + before.seats.reward_lo[i]
        mean_after = start.sums[:, li, :5] / n * after.seats.reward_span[i] + after.seats.reward_lo[i]
        assert np.allclose(mean_after, mean_profit, rtol=1e-13, atol=0)
        # UCB's estimate as the kernel computes it: the sum times 1 / n (sim.learning.bandits.arm_stats)
        assert np.array_equal(start.Q[:, li, 0, :5], start.sums[:, li, :5] * (1.0 / n))
        assert np.allclose(start.Q[:, li, 0, :5], start.sums[:, li, :5] / n, rtol=4e-16, atol=0)
        assert np.array_equal(start.greedy[:, li, 0], np.argmax(start.Q[:, li, 0, :5], axis=1))


def test_one_period_after_the_merger_adds_the_merged_firms_scaled_profit():
    # noise 0: the reward of the price played is the merged firm's profit at the prices played, scaled
    _saved, _before, after, start = _merged_start("ucb")
    for j in range(3):
        t0 = int(start.clock[j, 0])
        k = kernel_session(after, j, convergence=NEVER, max_periods=t0 + 1, start=start)
        played = after.decode(k["state"] % after.stage.M)
        prices = np.array([[after.grids[i][played[i]] for i in (0, 1)]])
        _q, _p, pi = logit_market().spec().evaluate(prices)
        for i in (0, 1):
            a = int(played[i])
            added = k["sums"][i, a] - start.sums[j, i, a]
            want = (pi[0, 0] + pi[0, 1] - after.seats.reward_lo[i]) / after.seats.reward_span[i]
            assert k["counts"][i, a] == start.counts[j, i, a] + 1
            assert np.isclose(added, want, rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", sorted(SEATS))
def test_kernel_and_twin_continue_merged_bandits_bit_for_bit(name):
    _saved, _before, after, start = _merged_start(name)
    for j in range(3):
        t1 = int(start.clock[j, 0]) + 1200
        k = kernel_session(after, j, convergence=NEVER, max_periods=t1, start=start)
        r = reference_session(after, j, convergence=NEVER, max_periods=t1, start=start)
        assert k["state"] == r["state"]
        for field in ("Q", "greedy", "rng", "counts", "sums"):
            assert np.array_equal(k[field], r[field]), field


def test_a_fixed_policy_does_not_merge(tmp_path):
    from sim.learning.merger import check_merger
    from sim.learning.saved import save_learners

    first = learn(logit_market(), QLearner(m=5, beta=1e-3), sessions=1, seed=1, convergence=300, workers=1, keep=True)
    save_learners(tmp_path / "f.npz", first.saved)
    lu = compile_lineup(logit_market(), [QLearner(family="fixed", policy_from=str(tmp_path / "f.npz"), firm=1),
                                         QLearner(m=5)])
    with pytest.raises(sim.InputError) as e:
        check_merger((1, 2), lu)
    assert e.value.key == "event.firms" and "fixed policy" in e.value.message
