"""Bandit learners over the price grid (upper confidence bound and Thompson sampling): kernel against the plain-Python
twin, the published properties of each rule, saved statistics continued, and the direction reported by Hansen,
Misra and Pai (2021, "Frontiers: Algorithmic collusion: supra-competitive prices via independent algorithms",
Marketing Science 40(1))."""

import json
import math
import zipfile

import numpy as np
import pytest

import sim
import sim.learning.limits as L
import strategies
from sim.core.errors import InputError
from sim.learning.analysis import learn_result
from sim.learning.inputs import STATUS_CONVERGED, DeviationInputs, limit_outputs
from sim.learning.lineup import compile_lineup
from sim.learning.saved import load_learners, save_learners
from sim.learning.session import kernel_session, learn, reference_session
from sim.learning.twin import reference_analysis
from strategies.qlearning import QLearner

NEVER = 2**62


def logit_market(n=2, quality=2.0, cost=1.0):
    return sim.Market(sim.LogitDemand(quality=quality, outside=0.0, mu=0.25), cost=cost, model="bertrand",
                      n_firms=n)


# ---- kernel against twin ----------------------------------------------------------------------------

LINEUPS = {
    "ucb": lambda: (logit_market(), [QLearner(family="ucb", m=7), QLearner(family="ucb", m=7, exploration=0.5)]),
    "thompson-noisy": lambda: (logit_market(), [QLearner(family="thompson", m=7, noise=0.1),
                                                QLearner(family="thompson", m=5, exploration=0.3)]),
    "ucb-against-q": lambda: (logit_market(cost=[1.0, 1.1]), [QLearner(family="ucb", m=5, noise=0.2),
                                                              QLearner(m=5, beta=1e-3)]),
    "thompson-against-tit-for-tat": lambda: (logit_market(), [QLearner(family="thompson", m=5),
                                                              strategies.TitForTat()]),
    "three-firms": lambda: (logit_market(n=3), [QLearner(family="ucb", m=3), QLearner(m=3, beta=1e-3),
                                                QLearner(family="thompson", m=4)]),
}


@pytest.mark.parametrize("name", sorted(LINEUPS))
def test_kernel_and_twin_have_the_same_statistics_after_n_periods(name):
    market, learners = LINEUPS[name]()
    lu = compile_lineup(market, learners)
    for session, periods in ((0, 2500), (3, 1111)):
        k = kernel_session(lu, session, seed=17, convergence=NEVER, max_periods=periods)
        r = reference_session(lu, session, seed=17, convergence=NEVER, max_periods=periods)
        assert k["periods"] == r["periods"] == periods
        for field in ("Q", "greedy", "counts", "sums", "rng"):
            assert np.array_equal(k[field], r[field]), field  # bit for bit
        assert k["state"] == r["state"]
        # something was learned: every bandit played
        assert k["counts"].sum() > 0


@pytest.mark.parametrize("name", ["ucb", "ucb-against-q", "thompson-against-tit-for-tat"])
def test_kernel_and_twin_stop_at_the_same_period_and_agree_on_the_limit_analysis(name):
    market, learners = LINEUPS[name]()
    lu = compile_lineup(market, learners)
    k = kernel_session(lu, 2, seed=5, convergence=1500, max_periods=200_000)
    r = reference_session(lu, 2, seed=5, convergence=1500, max_periods=200_000)
    assert k["status"] == r["status"] == STATUS_CONVERGED
    assert k["periods"] == r["periods"]
    assert np.array_equal(k["Q"], r["Q"]) and np.array_equal(k["counts"], r["counts"])
    n, T = lu.n_seats, 5
    out = limit_outputs(n, T)
    dev = DeviationInputs(0, -1, 0.95, 64)
    L.analyse_limit(lu.system_state(k["state"], k["z"]), lu.play(k["greedy"], k["periods"]), dev, out)
    ref = reference_analysis(lu, r["greedy"], r["history"], r["z"], r["periods"], dev, T)
    assert np.array_equal(out.lim_prices, ref["lim_prices"]) and np.array_equal(out.lim_profits, ref["lim_profits"])
    assert np.array_equal(out.ir_prices, np.array(ref["ir_prices"]))


def test_results_do_not_depend_on_the_number_of_workers():
    market, learners = LINEUPS["thompson-noisy"]()
    kw = {"sessions": 4, "seed": 9, "convergence": 2000, "max_periods": 20_000, "keep": True}
    one, two = learn(market, learners, workers=1, **kw), learn(market, learners, workers=2, **kw)
    for name in ("Q", "counts", "sums", "rng"):
        assert np.array_equal(getattr(one.saved, name), getattr(two.saved, name)), name
    assert np.array_equal(one.limit_prices, two.limit_prices)


# ---- the published properties of each rule ------------------------------------------------------------


def test_ucb_tries_every_price_once_first_in_increasing_order():
    # Auer, Cesa-Bianchi and Fischer (2002), UCB1: "play each machine once" before the index is used
    lu = compile_lineup(logit_market(), [QLearner(family="ucb", m=6), strategies.AlwaysCompete()])
    for periods in range(1, 7):
        k = kernel_session(lu, 0, seed=1, convergence=NEVER, max_periods=periods)
        assert k["counts"][0, :6].tolist() == [1] * periods + [0] * (6 - periods)


def _fixed_rival_rewards(lu):
    """The bandit's (seat 0) scaled reward of each of its prices against the rival's single action."""
    m = int(lu.seats.radix[0])
    return (lu.payoff[:m, 0] - lu.seats.reward_lo[0]) / lu.seats.reward_span[0]


def test_ucb1_plays_each_worse_price_within_the_finite_time_bound():
    # Auer, Cesa-Bianchi and Fischer (2002), Theorem 1: after n plays, UCB1 (c = 1, rewards in [0, 1]) has played a
    # price j with gap Delta_j to the best at most 8 ln(n) / Delta_j**2 + 1 + pi**2 / 3 times in expectation. Here the
    # rival always plays the static Nash price, so the rewards are deterministic and the bound holds for the one
    # path played (the expectation is over nothing).
    lu = compile_lineup(logit_market(), [QLearner(family="ucb", m=8), strategies.AlwaysCompete()])
    n = 20_000
    k = kernel_session(lu, 0, seed=2, convergence=NEVER, max_periods=n)
    mu = _fixed_rival_rewards(lu)
    best = int(np.argmax(mu))
    gaps = mu.max() - mu
    for j in range(mu.size):
        if j != best:
            assert k["counts"][0, j] <= 8 * math.log(n) / gaps[j] ** 2 + 1 + math.pi**2 / 3, j
    # and the sample means are the rewards (no noise): the estimate of every price is exact
    assert np.allclose(k["Q"][0, 0, : mu.size], mu, rtol=1e-12, atol=0)
    assert k["greedy"][0, 0] == best


def test_thompson_sampling_settles_on_the_best_price_against_a_fixed_rival():
    # Agrawal and Goyal (2013), "Further optimal regret bounds for Thompson sampling": with Gaussian priors (v = 1)
    # the expected regret is logarithmic in the number of plays, so prices clearly worse than the best are played
    # in a vanishing share of periods. Tolerance: over 20,000 periods, the greedy price is the best one, it is the
    # most played, and the prices whose scaled reward is more than 0.1 below the best are played in under 5 % of
    # the periods (observed about 3.6 % on the three sessions here; the two best prices differ by only 0.005, so
    # their split is not asked for).
    lu = compile_lineup(logit_market(), [QLearner(family="thompson", m=8), strategies.AlwaysCompete()])
    mu = _fixed_rival_rewards(lu)
    best = int(np.argmax(mu))
    for session in range(3):
        k = kernel_session(lu, session, seed=3, convergence=NEVER, max_periods=20_000)
        counts = k["counts"][0, : mu.size]
        assert k["greedy"][0, 0] == best
        assert int(np.argmax(counts)) == best
        assert counts[mu < mu.max() - 0.1].sum() < 0.05 * 20_000


def test_rewards_are_profits_scaled_by_the_largest_profit_on_the_grid():
    lu = compile_lineup(logit_market(), [QLearner(family="ucb", m=5), QLearner(m=5)])
    assert lu.seats.reward_lo[0] == 0.0  # no profit below zero on this grid (every price above cost)
    assert lu.seats.reward_span[0] == lu.payoff[:, 0].max()
    assert lu.seats.reward_span[1] == 1.0  # a Q-learner's rewards are its profits


# ---- parameters ----------------------------------------------------------------------------------------


def test_bad_bandit_parameters_name_their_key():
    for params, key in (({"family": "genetic"}, "strategies[1].family"),
                        ({"family": "ucb", "exploration": 0.0}, "strategies[1].exploration"),
                        ({"family": "thompson", "exploration": -2}, "strategies[1].exploration"),
                        ({"family": "ucb", "noise": -0.1}, "strategies[1].noise"),
                        ({"exploration": 1.0}, "strategies[1].exploration"),
                        ({"family": "ucb", "update": "synchronous"}, "strategies[1].update")):
        with pytest.raises(InputError) as e:
            QLearner(**params).spec(prefix="strategies[1]")
        assert e.value.key == key, params


# ---- saved statistics -----------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["ucb-against-q", "thompson-noisy"])
def test_a_bandit_session_split_in_two_halves_with_a_save_between_is_the_uninterrupted_session(name, tmp_path):
    market, learners = LINEUPS[name]()
    # convergence after 12,000 unchanged periods: a Thompson session may settle within the first half (it then plays
    # no more periods in the second, as it would have stopped uninterrupted)
    kw = {"sessions": 3, "seed": 8, "convergence": 12_000, "workers": 2, "limit_periods": 500}
    whole = learn(market, learners, max_periods=16_000, keep=True, **kw)
    half = learn(market, learners, max_periods=8_000, keep=True, **kw)
    assert np.any(half.periods == 8_000)
    save_learners(tmp_path / "half.npz", half.saved)
    rest = learn(market, learners, max_periods=16_000, start=load_learners(tmp_path / "half.npz"), keep=True, **kw)
    save_learners(tmp_path / "whole.npz", whole.saved)
    save_learners(tmp_path / "rest.npz", rest.saved)
    assert (tmp_path / "whole.npz").read_bytes() == (tmp_path / "rest.npz").read_bytes()
    a = json.dumps(learn_result(whole, market).to_dict(), allow_nan=False)
    continued = learn_result(rest, market).to_dict()
    # the same document but for the record of where the continued sessions came from (for the report)
    assert continued["settings"].pop("continued")["periods_before"][1] == 8_000
    b = json.dumps(continued, allow_nan=False)
    assert a == b
    # the halves differ from the whole: the statistics moved
    assert not np.array_equal(half.saved.counts, whole.saved.counts)


def test_saved_bandits_continue_only_in_their_own_family(tmp_path):
    market = logit_market()
    res = learn(market, QLearner(family="ucb", m=5), sessions=2, seed=1, convergence=500, max_periods=3000,
                keep=True, workers=1)
    save_learners(tmp_path / "s.npz", res.saved)
    saved = load_learners(tmp_path / "s.npz")
    assert saved.header["version"] == 3 and saved.counts.sum() == 2 * res.periods.sum()  # 2 bandits
    for other in (QLearner(family="thompson", m=5), QLearner(m=5)):
        with pytest.raises(InputError, match="family 'ucb'") as e:
            learn(market, other, sessions=2, start=saved, workers=1)
        assert e.value.key == "learning.continue_from"


def test_a_version_1_file_is_read_with_empty_bandit_statistics(tmp_path):
    """Files written before the bandits existed (format version 1, no counts or sums) still load."""
    res = learn(logit_market(), QLearner(m=3, beta=1e-3), sessions=2, seed=1, convergence=300, keep=True, workers=1)
    save_learners(tmp_path / "v2.npz", res.saved)
    with zipfile.ZipFile(tmp_path / "v2.npz") as zf:
        members = {i.filename: zf.read(i.filename) for i in zf.infolist()}
    header = json.loads(members.pop("header.json"))
    members.pop("counts.npy"), members.pop("sums.npy")
    from sim.learning.saved import arrays_digest

    old = load_learners(tmp_path / "v2.npz").arrays()
    names = ("Q", "greedy", "history", "z", "rng", "clock", "status", "triggers")
    header.update(version=1, arrays_sha256=arrays_digest(old, names),
                  arrays={k: v for k, v in header["arrays"].items() if k in names})
    with zipfile.ZipFile(tmp_path / "v1.npz", "w") as zf:
        zf.writestr("header.json", json.dumps(header))
        for name, data in members.items():
            zf.writestr(name, data)
    v1 = load_learners(tmp_path / "v1.npz")
    assert np.array_equal(v1.Q, res.saved.Q) and not v1.counts.any() and not v1.sums.any()
    assert v1.counts.shape == res.saved.counts.shape


# ---- Hansen, Misra and Pai (2021) -------------------------------------------------------------------------


@pytest.mark.slow
def test_ucb_bandits_price_above_nash_at_a_high_signal_to_noise_ratio_and_near_it_at_a_low_one(tmp_path):
    """Hansen, Misra and Pai (2021, "Frontiers: Algorithmic collusion: supra-competitive prices via independent
    algorithms", Marketing Science 40(1)), abstract (read): the long-run prices of independent, misspecified
    learning algorithms depend on the signal-to-noise ratio of their price experiments; if low, they are
    consistent with the static Nash equilibrium; if high, supra-competitive (the joint-monopoly outcome is
    possible); the channel is correlated experimentation. Their market and levels are not taken over (not read);
    the test runs the shipped experiments/learning-bandits.toml as ``supergame run`` does: two UCB1 bandits on 7
    prices, observation noise 0.05, 0.5 and 3 in scaled reward units (the rewards of the grid span about 0.4).

    Tolerances (20 sessions a cell; observed with this file: mean profit gain 0.93 [0.88, 0.98], 0.80
    [0.73, 0.88] and 0.12 [0.03, 0.21]; near static Nash 0 %, 0 % and 70 %):
    * high ratio: the mean profit gain's interval lies above 0.75 (three quarters of the way from static Nash to
      joint profit), and no session ends near the static Nash price;
    * low ratio: the mean profit gain below 0.3 and at least half the sessions near the static Nash price (70 %
      observed, a binomial standard error of 0.10 at n = 20: two standard errors of margin);
    * the profit gain falls as the noise grows, each step by more than both cells' standard errors together;
    * in no cell are the sessions copies of one another (with noise 0 they would be: UCB1 draws nothing).
    """
    import csv
    from pathlib import Path

    from sim.cli import main
    from sim.evidence.learn import sessions_are_copies
    from sim.runner.runs import open_run

    path = Path(__file__).resolve().parents[2] / "experiments" / "learning-bandits.toml"
    assert main(["run", str(path), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    with open(tmp_path / "run" / "results.csv", newline="") as f:
        rows = sorted(csv.DictReader(f), key=lambda r: float(r["learning.noise"]))
    assert [float(r["learning.noise"]) for r in rows] == [0.05, 0.5, 3.0]
    gain = [float(r["profit_gain"]) for r in rows]
    se = [float(r["profit_gain.se"]) for r in rows]
    assert float(rows[0]["profit_gain.low"]) > 0.75 and float(rows[0]["near_nash"]) == 0.0
    assert gain[2] < 0.3 and float(rows[2]["near_nash"]) >= 0.5
    for k in (0, 1):
        assert gain[k] - gain[k + 1] > se[k] + se[k + 1]
    with open_run(tmp_path / "run") as rf:
        for number in range(3):
            assert not sessions_are_copies(rf.result(number))


# ---- saved bandits after an event -------------------------------------------------------------------------


def test_saved_bandits_go_on_after_a_cost_shock_and_an_entry_with_their_statistics():
    from sim.learning.events import Event, adapt_saved, with_saved_grids

    learner = QLearner(family="ucb", m=5)
    first = learn(logit_market(), learner, sessions=3, seed=2, convergence=3000, max_periods=20_000, workers=1,
                  keep=True)
    # a cost shock: the statistics carry over unchanged, and the bandits learn on from them
    ev = Event("market", 100, 10)
    after = learn(logit_market(cost=1.2), with_saved_grids(learner, first.saved, 2, ev), sessions=3, seed=2,
                  convergence=3000, max_periods=20_000, workers=1, start=first.saved, event=ev, keep=True)
    assert np.all(after.saved.counts.sum(axis=2) == after.saved.clock[:, :1])  # one play per period, all periods
    assert np.all(after.saved.counts >= first.saved.counts)
    # an entrant automaton: the incumbents keep their statistics, unchanged by the entry itself
    ev = Event("entry", 100, 10)
    seats = with_saved_grids([QLearner(family="ucb", m=5), QLearner(family="ucb", m=5), strategies.TitForTat()],
                             first.saved, 3, ev)
    lu = compile_lineup(logit_market(3), seats)
    new = adapt_saved(first.saved, lu, ev)
    assert np.array_equal(new.counts, first.saved.counts) and np.array_equal(new.sums, first.saved.sums)
    res = learn(logit_market(3), seats, sessions=3, seed=2, convergence=3000, max_periods=20_000, workers=1,
                start=first.saved, event=ev)
    assert res.summary()["event"]["settled"]["n"] == 3


def test_a_bandit_facing_grim_trigger_is_not_given_an_exploration_probability():
    # bandits explore by their index or their draws, not with probability exp(-beta t): the record of the automaton's
    # punishments says when it was triggered and leaves the exploration share out
    from sim.learning.analysis import learn_result as _result

    market = logit_market()
    res = learn(market, [QLearner(family="ucb", m=5), strategies.GrimTrigger()], sessions=2, seed=1,
                convergence=2000, max_periods=20_000, workers=1)
    (auto,) = _result(res, market).automata
    assert auto["triggered"]["share"] == 1.0  # UCB tries the lowest price first, below the collusive one
    assert auto["exploration_first"]["median"] is None  # nan, stored as null in the plain record
