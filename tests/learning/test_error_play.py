"""Play with error after learning from noisy prices (sim.learning.noisy_prices.error_play, sim.learning.analysis).

Sources: the expected path of a finite Markov chain, the distribution pushed forward one transition at a time
(Norris, 1997, "Markov Chains", Cambridge University Press, section 1.1: the law of X_t is the initial law times the
t-th power of the transition matrix), with the probability of each seen price from the normal distribution function
of scipy (scipy.special.ndtr); imperfect monitoring after Green and Porter (1984), "Noncooperative collusion under
imperfect price information", Econometrica 52.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import ndtr

import sim
from sim.core.rng import stream_states
from sim.evidence.catalogue import describe
from sim.evidence.learn import console
from sim.learning.analysis import LearnSpec, learn_analysis
from sim.learning.lineup import compile_lineup
from sim.learning.noisy_prices import (
    ERROR_PLAY_PERIODS,
    error_play,
    error_play_start,
    twin_error_play,
)
from sim.runner.analyses.learn import error_play_names, learn_metrics
from strategies.qlearning import QLearner


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


def _random_case(n, m, seed):
    """A line-up of n learners with m prices, a greedy table drawn at random, and a system state drawn at random."""
    lu = compile_lineup(logit_market(n), QLearner(m=m))
    M = int(lu.stage.M)
    g = np.random.default_rng(seed)
    greedy = g.integers(0, m, size=(n, M)).astype(np.int64)
    x = int(sum(int(g.integers(0, M)) * M**i for i in range(n)))
    return lu, greedy, x


def _kernel(lu, greedy, x, noise, rng, periods):
    out = np.empty((2, int(lu.seats.radix.size)))
    error_play(x, greedy, lu.seats.lidx, lu.seats.radix, lu.seats.place, int(lu.stage.M), lu.stage.prices,
               lu.stage.payoff, noise, rng, periods, out)
    return out


@pytest.mark.parametrize("n, m, noise", [(2, 5, 1.0), (2, 7, 0.3), (3, 3, 0.8)])
def test_kernel_and_twin_agree_bit_for_bit(n, m, noise):
    lu, greedy, x = _random_case(n, m, 11)
    start = stream_states(5, (0,), 0, 1)[0].copy()
    rng = start.copy()
    got = _kernel(lu, greedy, x, noise, rng, 400)
    want = twin_error_play(x, greedy, lu, noise, start, 400)
    assert np.array_equal(got, want)


def _seen_law(a, sd, m):
    """P(seen index = v) for v = 0 .. m-1: floor(a + sd z + 1/2) kept on the grid, z standard normal."""
    upper = ndtr((np.arange(m) + 0.5 - a) / sd)
    upper[-1] = 1.0
    return np.diff(np.concatenate([[0.0], upper]))


def _exact_mean_profits(lu, greedy, x, sd, periods):
    """The expected mean profits of two learners over ``periods`` periods of play with error, exactly: the law of
    the pair of views (what learner 1 saw, what learner 2 saw) pushed forward one period at a time."""
    m = int(lu.seats.radix[0])
    place = [int(p) for p in lu.seats.place]
    M = int(lu.stage.M)
    o1, o2 = x % M, (x // M) % M
    law = np.zeros((M, M))
    law[o1, o2] = 1.0
    total = np.zeros(2)
    seen = [_seen_law(a, sd, m) for a in range(m)]
    for _ in range(periods):
        new = np.zeros((M, M))
        for v1, v2 in zip(*np.nonzero(law)):
            p = law[v1, v2]
            a1, a2 = int(greedy[0, v1]), int(greedy[1, v2])
            total += p * lu.stage.payoff[a1 * place[0] + a2 * place[1]]
            # learner 1 sees its own price and firm 2's with error; learner 2 the other way round
            w1 = a1 * place[0] + np.arange(m) * place[1]
            w2 = np.arange(m) * place[0] + a2 * place[1]
            new[np.ix_(w1, w2)] += p * np.outer(seen[a2], seen[a1])
        law = new
    return total / periods


def test_mean_profits_match_the_exact_expectation_of_the_markov_chain():
    # a random greedy table on a 5-price grid, an error of 0.7 grid steps, 30 periods: the mean of 600 independent
    # runs (each from its own stream) against the exact expectation; tolerance 4.5 standard errors of the mean of
    # the runs (a fixed seed; a wrong law of the seen price or a wrong order of the steps moves the mean by far
    # more, as the second check shows)
    lu, greedy, x = _random_case(2, 5, 3)
    sd, periods, runs = 0.7, 30, 600
    exact = _exact_mean_profits(lu, greedy, x, sd, periods)
    starts = stream_states(9, (1,), 0, runs)
    draws = np.array([_kernel(lu, greedy, x, sd, starts[r].copy(), periods)[1] for r in range(runs)])
    se = draws.std(axis=0, ddof=1) / np.sqrt(runs)
    assert np.all(se > 0)
    assert np.all(np.abs(draws.mean(axis=0) - exact) <= 4.5 * se)
    # the check can fail: the expectation without error (or with another error) is far outside the band
    other = _exact_mean_profits(lu, greedy, x, 2.0, periods)
    assert np.any(np.abs(draws.mean(axis=0) - other) > 4.5 * se)


def test_the_draws_of_play_with_error_share_none_with_the_saved_stream():
    # play with error starts from the end-of-learning state advanced by 2**128 draws, not from it
    end = stream_states(1, (0,), 0, 1)[0].copy()
    start = error_play_start(end)
    assert not np.array_equal(start, end) and np.array_equal(end, stream_states(1, (0,), 0, 1)[0])


@pytest.fixture(scope="module")
def tiny_noise_run():
    spec = LearnSpec(logit_market(), QLearner(beta=2e-4, m=7),
                     {"sessions": 6, "seed": 2, "convergence": 2000, "max_periods": 400_000,
                      "observe": "noisy_prices", "price_noise": 0.01})
    return learn_analysis(spec, workers=1)


def test_with_a_tiny_error_play_with_error_is_the_limit_without_error(tiny_noise_run):
    # an error of 0.01 grid steps is never large enough to move a seen price (P(|z| > 50) underflows): play with
    # error is greedy play without error, whose mean over 10,000 periods differs from the mean over the limit cycle
    # only by the transient and the last incomplete cycle (a few periods in 10,000)
    res = tiny_noise_run
    ep = res.error_play
    assert ep["periods"] == ERROR_PLAY_PERIODS and ep["noise"] == 0.01
    gains = np.array([g for g in ep["per_session"] if g is not None])
    limit = np.array(res.per_session["profit_gain"])[res.selected]
    assert gains.size == limit.size > 0
    assert np.all(np.abs(gains - limit) < 0.01)
    assert abs(ep["gain_change"]["value"]) < 0.01


def test_play_with_error_is_reported_and_stored(tiny_noise_run):
    res = tiny_noise_run
    text = console(res)
    assert "Play with error after learning" in text and "profit gain with error" in text
    m = learn_metrics(res)
    for name in error_play_names(2):
        assert name in m
    assert m["error_play_profit_gain"] == res.error_play["profit_gain"]["value"]
    assert m["error_play_profit_gain.low"] <= m["error_play_profit_gain"] <= m["error_play_profit_gain.high"]
    # the catalogue defines every new column, under its own stem
    for name in error_play_names(2):
        d = describe(name)
        assert d.entry.label in ("profit gain in play with error after learning",
                                 "change of the profit gain that the error causes after learning",
                                 "mean price in play with error after learning")
        assert "noisy_prices" in d.entry.method
