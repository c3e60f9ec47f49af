"""Learning sessions: kernel against the plain-Python reference, reproducibility, analysis of the learned
strategies, and the baseline of Calvano, Calzolari, Denicolo and Pastorello (2020, AER, "Artificial
Intelligence, Algorithmic Pricing, and Collusion")."""

import math

import numpy as np
import pytest

import sim
import sim.learning.limits as L
from sim.learning.inputs import STATUS_CONVERGED, DeviationInputs, limit_outputs
from sim.learning.lineup import compile_lineup
from sim.learning.results import _share_ci
from sim.learning.session import kernel_session, learn, reference_session
from sim.learning.twin import reference_analysis
from strategies.qlearning import QLearner

NEVER = 2**62


def logit_market(n=2, quality=2.0, cost=1.0):
    return sim.Market(sim.LogitDemand(quality=quality, outside=0.0, mu=0.25), cost=cost, model="bertrand",
                      n_firms=n)


# ---- the published benchmarks ---------------------------------------------------------------------


def test_baseline_static_nash_and_joint_profit_prices_match_the_publication():
    # Calvano et al. (2020), section III (values from memory): p_N = 1.4729 and p_M = 1.9250 for logit
    # demand with a_i = 2, a_0 = 0, c = 1, mu = 1/4; they agree with the solver to 1e-4
    lu = compile_lineup(logit_market())
    assert np.allclose(lu.nash_prices, 1.4729, atol=1e-4)
    assert np.allclose(lu.collusive_prices, 1.9250, atol=1e-4)


# ---- kernel against reference ---------------------------------------------------------------------

LINEUPS = {
    "baseline-short": (logit_market(), QLearner()),
    "memory-2": (logit_market(), QLearner(m=4, k=2, beta=1e-3)),
    "unequal-learners": (logit_market(cost=[1.0, 1.2]),
                         [QLearner(m=3, alpha=0.3, beta=2e-3), QLearner(m=5, k=2, delta=0.5, init="zeros")]),
    "three-firms": (logit_market(n=3, quality=[2.0, 2.1, 1.9]), QLearner(m=3, beta=1e-3)),
    "cournot": (sim.Market(sim.LinearDemand(intercept=10, slope=1), cost=[1.0, 2.0]), QLearner(m=6, beta=1e-3)),
    "four-firms": (logit_market(n=4, quality=[2.0, 2.0, 2.2, 1.8]), QLearner(m=3, beta=1e-3)),
}


@pytest.mark.parametrize("name", sorted(LINEUPS))
def test_kernel_and_reference_have_the_same_q_matrix_after_n_periods(name):
    market, learners = LINEUPS[name]
    lu = compile_lineup(market, learners)
    for session, periods in ((0, 3000), (5, 1234)):
        k = kernel_session(lu, session, seed=11, convergence=NEVER, max_periods=periods)
        r = reference_session(lu, session, seed=11, convergence=NEVER, max_periods=periods)
        assert k["periods"] == r["periods"] == periods
        assert np.array_equal(k["Q"], r["Q"])  # bit for bit
        assert np.array_equal(k["greedy"], r["greedy"])
        assert k["state"] == r["state"]
        # something was learned: the matrix moved away from its start
        assert not np.array_equal(k["Q"], lu.q0)


@pytest.mark.parametrize("name", ["memory-2", "unequal-learners", "three-firms", "cournot", "four-firms"])
def test_kernel_and_reference_stop_at_the_same_period_and_agree_on_the_limit_analysis(name):
    market, learners = LINEUPS[name]
    lu = compile_lineup(market, learners)
    k = kernel_session(lu, 2, seed=3, convergence=2000, max_periods=300_000)
    r = reference_session(lu, 2, seed=3, convergence=2000, max_periods=300_000)
    assert k["status"] == r["status"] == STATUS_CONVERGED
    assert k["periods"] == r["periods"]
    assert np.array_equal(k["Q"], r["Q"])
    n, T = lu.n_seats, 6
    out = limit_outputs(n, T)
    G = lu.play(k["greedy"], k["periods"])
    x = lu.system_state(k["state"], k["z"])
    for deviator, action in ((0, -1), (n - 1, 0)):
        d = float(lu.seats.delta[deviator])
        dev = DeviationInputs(deviator, action, d, 64)
        L.analyse_limit(x, G, dev, out)
        ref = reference_analysis(lu, r["greedy"], r["history"], r["z"], r["periods"], dev, T)
        info = out[-1]
        assert info[0] == ref["transient"] and info[1] == len(ref["cycle"])
        assert np.array_equal(lu.decode(out[0][: int(info[1])]), np.array(ref["cycle"]))
        assert np.array_equal(out[2], ref["lim_prices"]) and np.array_equal(out[3], ref["lim_profits"])
        assert np.array_equal(out[4], np.array(ref["ir_prices"]))
        assert np.array_equal(out[5], np.array(ref["ir_profits"]))
        assert info[3] == ref["gain"] and info[4] == ref["pays"] and info[5] == ref["returned"]
        assert (math.isnan(info[6]) and math.isnan(ref["periods_to_return"])) or info[6] == ref["periods_to_return"]


# ---- the analysis of learned strategies, on strategies written by hand ----------------------------


def _two_by_two(greedy0, greedy1):
    """A 2-firm, 2-action line-up (k = 1) with given greedy tables (state = last profile a0 + 2 a1)."""
    lu = compile_lineup(logit_market(), QLearner(grid=[1.5, 1.9]))
    g = np.array([greedy0, greedy1], dtype=np.int64)
    return lu, g


def test_cycle_detection_on_hand_written_strategies():
    # both firms alternate: play high after (low, low), low after (high, high) -> a 2-cycle
    lu, g = _two_by_two([1, 0, 0, 0], [1, 0, 0, 0])
    mu, lam, entry = L.cycle_of(1, lu.play(g, 0))  # start at (high, low)
    assert (mu, lam) == (1, 2) and entry in (0, 3)
    # grim-trigger-like: high only after (high, high) -> from (high, high) a fixed point
    lu, g = _two_by_two([0, 0, 0, 1], [0, 0, 0, 1])
    assert L.cycle_of(3, lu.play(g, 0))[:2] == (0, 1)
    assert L.cycle_of(1, lu.play(g, 0)) == (1, 1, 0)


def test_value_of_a_path_is_the_exact_discounted_sum():
    # the closed form (transient + cycle / (1 - d^lam)) against a direct sum over 3,000 periods
    # (0.95^3000 < 1e-66, so truncation is far below rounding)
    lu, g = _two_by_two([1, 0, 1, 0], [1, 1, 0, 0])
    d = 0.95
    for s0 in range(4):
        G = lu.play(g, 0)
        v = L.value_of(s0, 0, d, G)
        s, total, w = s0, 0.0, 1.0
        for _ in range(3000):
            prof = L._profile(s, G)
            total += w * lu.payoff[prof, 0]
            w *= d
            s = L._after(s, prof, G)
        assert v == pytest.approx(total, rel=1e-13)


def test_a_deviation_against_grim_trigger_like_strategies_does_not_pay_for_patient_firms():
    # high only after (high, high): a deviation to low earns more once, then both stay low forever.
    # With delta = 0.95 that loses (Friedman, 1971: grim trigger sustains collusion when delta is
    # above the critical value); with delta = 0 the deviation pays.
    lu, g = _two_by_two([0, 0, 0, 1], [0, 0, 0, 1])
    n, T = 2, 4
    for d, pays in ((0.95, 0.0), (0.0, 1.0)):
        out = limit_outputs(n, T, 8)
        L.analyse_limit(3, lu.play(g, 0), DeviationInputs(0, 0, d, 8), out)
        info, ir_prices = out[-1], out[4]
        assert info[4] == pays
        pi = lu.stage.payoff.reshape(2, 2, 2)  # [a1, a0, firm]
        expected = pi[1, 0, 0] + d * pi[0, 0, 0] / (1 - d) - pi[1, 1, 0] / (1 - d)
        assert info[3] == pytest.approx(expected, rel=1e-12)
        assert ir_prices[:, 0].tolist() == [1.9, 1.5, 1.5, 1.5, 1.5, 1.5]
        assert ir_prices[:, 1].tolist() == [1.9, 1.9, 1.5, 1.5, 1.5, 1.5]
        assert info[5] == 0.0  # play never returns to (high, high)


def test_periods_to_return_count_the_periods_after_the_deviation_as_the_impulse_response_shows_them():
    # hand-written strategies on two prices (state = last profile a0 + 2 a1), firm 1 deviating to low from (high,
    # high) at row 1 of the response: (a) both always high: the period after the deviation (row 2) is back -- one
    # period; (b) firm 2 copies firm 1's last price (tit for tat, Axelrod, 1984), firm 1 always high: (high, low) in
    # row 2, (high, high) again in row 3 -- two periods; (c) a forced "deviation" to the price played: none left,
    # zero periods
    for g0, g1, dev_action, periods, rows in (
            ([1, 1, 1, 1], [1, 1, 1, 1], 0, 1.0, [[1.9, 1.5, 1.9, 1.9], [1.9, 1.9, 1.9, 1.9]]),
            ([1, 1, 1, 1], [0, 1, 0, 1], 0, 2.0, [[1.9, 1.5, 1.9, 1.9], [1.9, 1.9, 1.5, 1.9]]),
            ([1, 1, 1, 1], [1, 1, 1, 1], 1, 0.0, [[1.9, 1.9, 1.9, 1.9], [1.9, 1.9, 1.9, 1.9]])):
        lu, g = _two_by_two(g0, g1)
        out = limit_outputs(2, 2, 8)
        L.analyse_limit(3, lu.play(g, 0), DeviationInputs(0, dev_action, 0.9, 8), out)
        info, ir_prices = out[-1], out[4]
        assert ir_prices[:, 0].tolist() == rows[0] and ir_prices[:, 1].tolist() == rows[1]
        assert info[5] == 1.0 and info[6] == periods  # returned, after this many periods


# ---- sessions: reproducibility and bookkeeping ----------------------------------------------------


def _fast_learners():
    return QLearner(m=5, beta=2e-4)


def test_results_do_not_depend_on_the_number_of_workers_or_sessions():
    m = logit_market()
    a = learn(m, _fast_learners(), sessions=6, seed=9, convergence=5000, workers=1)
    b = learn(m, _fast_learners(), sessions=6, seed=9, convergence=5000, workers=2)
    c = learn(m, _fast_learners(), sessions=4, seed=9, convergence=5000, workers=2)
    for name in ("converged", "periods", "cycle_length", "limit_prices", "profit_gain", "ir_prices",
                 "deviation_gain"):
        x, y, z = getattr(a, name), getattr(b, name), getattr(c, name)
        assert np.array_equal(x, y, equal_nan=True), name
        assert np.array_equal(x[:4], z, equal_nan=True), name
    assert not np.array_equal(a.periods, learn(m, _fast_learners(), sessions=6, seed=10, convergence=5000).periods)


def test_a_session_that_hits_the_cap_is_reported_as_not_converged():
    r = learn(logit_market(), QLearner(m=5, beta=1e-7), sessions=3, convergence=100_000, max_periods=20_000,
              workers=1)
    assert not r.converged.any()
    assert np.all(r.periods == 20_000)
    s = r.summary()
    assert s["converged"]["count"] == 0 and s["over"].startswith("all sessions")


def test_profit_gain_and_limit_outcomes_follow_their_definitions():
    r = learn(logit_market(cost=[1.0, 1.1]), QLearner(m=5, beta=2e-4), sessions=4, convergence=5000, seed=2)
    lu = r.lineup
    for j in range(4):
        cyc = r.cycles[j]
        assert len(cyc) == r.cycle_length[j]
        prices = np.array([[lu.grids[i][a[i]] for i in range(2)] for a in cyc])
        assert np.allclose(r.limit_prices[j], prices.mean(axis=0), rtol=1e-12)
        profits = lu.market.profits(prices).mean(axis=0)
        assert np.allclose(r.limit_profits[j], profits, rtol=1e-12)
        gain = (profits.sum() - lu.nash_profits.sum()) / (lu.collusive_profits.sum() - lu.nash_profits.sum())
        assert r.profit_gain[j] == pytest.approx(gain, rel=1e-12)


def test_forced_action_snaps_to_the_nearest_grid_point():
    r = learn(logit_market(), QLearner(grid=[1.4, 1.6, 1.8, 2.0], beta=5e-4), sessions=2, convergence=3000,
              deviation=1.63, deviator=1, seed=1)
    assert np.all(r.deviation_action == 1)
    assert np.allclose(r.ir_prices[:, 1, 1], 1.6)


def test_state_space_too_large_for_memory_is_refused_before_allocating():
    # 4 firms x 30 actions x memory 2: 30^8 = 6.6e11 states -- allocating it would fail loudly
    m = logit_market(n=4)
    with pytest.raises(sim.InputError) as err:
        compile_lineup(m, QLearner(m=30, k=2))
    assert err.value.key == "learning.k" and "state space too large" in err.value.message
    assert "GB" in err.value.message
    # a small space refused when little memory is available, with its size in the message
    with pytest.raises(sim.InputError) as err:
        compile_lineup(logit_market(), QLearner(m=15, k=2), available_memory=1_000_000)
    assert "50625 states" in err.value.message
    # astronomically large: refused all the same, with its size
    with pytest.raises(sim.InputError) as err:
        compile_lineup(m, QLearner(m=1000, k=8))
    assert "1e+96 states" in err.value.message


def test_line_ups_outside_two_to_four_firms_or_with_multi_product_firms_are_refused():
    with pytest.raises(sim.InputError) as err:
        compile_lineup(logit_market(n=5), QLearner(m=3))
    assert err.value.key == "market.n_firms"
    with pytest.raises(sim.InputError):
        compile_lineup(logit_market(n=2), [QLearner(m=3)])


def test_wilson_interval_of_zero_successes():
    # Wilson (1927): for 0 successes in n the upper bound is z^2 / (n + z^2)
    ci = _share_ci(0, 40)
    assert ci["low"] == 0.0
    assert ci["high"] == pytest.approx(1.959963984540054**2 / (40 + 1.959963984540054**2), rel=1e-12)
    # and symmetrically for n successes in n
    ci = _share_ci(40, 40)
    assert ci["high"] == 1.0
    assert ci["low"] == pytest.approx(40 / (40 + 1.959963984540054**2), rel=1e-12)


def test_intervals_at_the_chosen_level():
    """The package's one convention (sim.core.stats): means +- t se with t the quantile of Student's t with n - 1
    degrees of freedom at the level (Student, 1908, Biometrika 6; scipy.stats.t.ppf as the reference), shares by
    Wilson's score interval at the same level (scipy.stats.binomtest(...).proportion_ci(method="wilson")); 95 % by
    default."""
    from scipy import stats

    m = logit_market()
    for level in (0.95, 0.8):
        kw = {} if level == 0.95 else {"confidence": level}
        r = learn(m, _fast_learners(), sessions=6, seed=3, convergence=3000, workers=1, **kw)
        s = r.summary()
        assert s["confidence"] == level
        pg = s["profit_gain"]
        x = r.profit_gain[r.converged]
        t = stats.t.ppf(0.5 + level / 2, x.size - 1)
        se = x.std(ddof=1) / math.sqrt(x.size)
        assert (pg["low"], pg["high"]) == pytest.approx((x.mean() - t * se, x.mean() + t * se), rel=1e-12)
        ir = s["impulse_response"]["prices"]
        y = r.ir_prices[r.converged][:, 2, 1]
        h = stats.t.ppf(0.5 + level / 2, y.size - 1) * y.std(ddof=1) / math.sqrt(y.size)
        assert ir["high"][2][1] - ir["low"][2][1] == pytest.approx(2 * h, rel=1e-12, abs=1e-15)
        ci = stats.binomtest(int(r.converged.sum()), 6).proportion_ci(confidence_level=level, method="wilson")
        assert (s["converged"]["low"], s["converged"]["high"]) == pytest.approx((ci.low, ci.high), rel=1e-12)
    with pytest.raises(sim.InputError) as err:
        learn(m, _fast_learners(), sessions=2, confidence=1.0)
    assert err.value.key == "confidence"


def test_json_counts_firms_from_one():
    """Output numbers firms from 1 (like binding_firm and seats); the deviator argument counts from 0."""
    r = learn(logit_market(), _fast_learners(), sessions=2, seed=1, convergence=2000, deviator=1, workers=1)
    assert r.settings["deviator"] == 1 and r.to_dict()["settings"]["deviator"] == 2


# ---- the published experiments (slow: they run in CI, about a minute on two cores) -----------------


@pytest.fixture(scope="module")
def baseline():
    # the baseline of Calvano et al. (2020): logit, a = 2, a_0 = 0, c = 1, mu = 1/4, delta = 0.95,
    # m = 15, xi = 0.1, alpha = 0.15, beta = 4e-6, 100,000-period convergence rule; 100 sessions
    return learn(logit_market(), QLearner(alpha=0.15, beta=4e-6, delta=0.95, m=15, xi=0.1), sessions=100,
                 seed=20200101, convergence=100_000, response_periods=15, workers=2)


@pytest.mark.slow
def test_baseline_profit_gain_is_in_the_published_range(baseline):
    # Calvano et al. (2020), section IV (from memory): in the baseline every session converges and the
    # average profit gain is about 0.85. With 100 sessions the standard error of the mean is about
    # 0.015, so we accept 0.85 +- 0.05 (over 3 standard errors).
    s = baseline.summary()
    assert s["converged"]["count"] == 100
    assert 0.80 <= s["profit_gain"]["mean"] <= 0.90
    # prices are supra-competitive in every session but below the joint-profit level on average
    assert np.all(baseline.limit_prices > baseline.lineup.nash_prices)
    assert s["limit_prices"][0]["mean"] < baseline.lineup.collusive_prices[0]


@pytest.mark.slow
def test_baseline_impulse_response_shows_a_punishment_and_a_return(baseline):
    # Calvano et al. (2020), section V.B and their impulse-response figure (from memory): after firm 1's
    # one-period deviation to its static best response, firm 2 cuts its price in the next period, and
    # prices climb back towards the pre-deviation level within a few periods.
    s = baseline.summary()
    ir = np.array(s["impulse_response"]["prices"]["mean"])
    se = (np.array(s["impulse_response"]["prices"]["high"]) - ir) / 1.984  # t quantile, 99 d.f.
    pre = ir[0]
    # the deviation itself: firm 1 undercuts, firm 2 has not reacted yet
    assert ir[1, 0] < pre[0] and ir[1, 1] == pytest.approx(pre[1], abs=1e-12)
    # punishment: the rival's price in the period after the deviation is lower, by more than 3 s.e.
    assert pre[1] - ir[2, 1] > 3 * se[2, 1]
    # return: at the end of the window the gap to the pre-deviation price is under a fifth of the
    # gap in the punishment period, for both firms
    gap_punish = np.abs(pre - ir[2])
    gap_end = np.abs(pre - ir[-1])
    assert np.all(gap_end < 0.2 * gap_punish)
    # the deviation does not pay in discounted terms (on average, exact values under the learned strategies)
    assert s["deviation_gain"]["high"] < 0
    assert s["returned"]["mean"] > 0.9


@pytest.mark.slow
def test_myopic_learners_price_close_to_competitive(baseline):
    # delta = 0: the learners maximise the current period's profit only, so nothing sustains high prices
    # (no future to lose). Tolerance: mean profit gain at most 0.3, and more than 0.5 below the patient
    # baseline. Why 0.3: the competitive benchmark on this grid is not a single point (the discrete
    # game's symmetric pure equilibria, computed below, have gains of about -0.02 and 0.12), and as
    # exploration dies out the estimates of rarely tried prices freeze, which leaves myopic learners
    # near but not exactly at a grid equilibrium; 0.3 is under a third of the 0.85 learned with delta = 0.95.
    r = learn(logit_market(), QLearner(delta=0.0), sessions=100, seed=20200102, workers=2)
    lu = r.lineup
    pi = lu.payoff.reshape(15, 15, 2)  # [a1, a0, firm]
    nash, coll = lu.nash_profits.sum(), lu.collusive_profits.sum()
    grid_equilibria = [(pi[b, a].sum() - nash) / (coll - nash) for a in range(15) for b in range(15)
                       if np.argmax(pi[b, :, 0]) == a and np.argmax(pi[:, a, 1]) == b]
    assert len(grid_equilibria) >= 1 and max(grid_equilibria) < 0.3
    s = r.summary()
    assert s["converged"]["count"] == 100
    assert s["profit_gain"]["mean"] <= 0.3
    assert s["profit_gain"]["high"] < baseline.summary()["profit_gain"]["low"] - 0.5


# ---- learners against the engine's automata ---------------------------------------------------------

AUTOMATA = {
    "grim_trigger": lambda: sim_strategies().GrimTrigger(),
    "tit_for_tat": lambda: sim_strategies().TitForTat(),
    "finite_punishment": lambda: sim_strategies().FinitePunishment(length=2),
    "trigger_price": lambda: sim_strategies().TriggerPrice(trigger=1.8, length=3),
    "win_stay_lose_shift": lambda: sim_strategies().WinStayLoseShift(),
}


def sim_strategies():
    import strategies

    return strategies


@pytest.mark.parametrize("name", sorted(AUTOMATA))
def test_kernel_and_reference_agree_with_an_automaton_seated(name):
    lu = compile_lineup(logit_market(), [QLearner(m=5, beta=3e-4), AUTOMATA[name]()])
    k = kernel_session(lu, 1, seed=4, convergence=3000, max_periods=200_000)
    r = reference_session(lu, 1, seed=4, convergence=3000, max_periods=200_000)
    assert k["periods"] == r["periods"] and k["status"] == r["status"] == STATUS_CONVERGED
    assert np.array_equal(k["Q"], r["Q"]) and tuple(k["z"]) == r["z"]
    n, T = 2, 5
    out = limit_outputs(n, T)
    G = lu.play(k["greedy"], k["periods"])
    x = lu.system_state(k["state"], k["z"])
    for deviator in (0, 1):
        dev = DeviationInputs(deviator, -1, 0.95, 64)
        L.analyse_limit(x, G, dev, out)
        ref = reference_analysis(lu, r["greedy"], r["history"], r["z"], r["periods"], dev, T)
        assert out[-1][1] == len(ref["cycle"]) and np.array_equal(out[2], ref["lim_prices"])
        assert np.array_equal(out[4], np.array(ref["ir_prices"])) and out[-1][3] == ref["gain"]


def test_automata_that_act_at_random_are_seated_only_when_asked_for():
    # compile_lineup keeps refusing them by default (callers that rely on exact cycles); learn() seats
    # them with a simulated estimate
    s = sim_strategies()
    with pytest.raises(sim.InputError) as err:
        compile_lineup(logit_market(), [QLearner(m=3), s.ForgivingTitForTat(forgiveness=0.3)],
                       seat_prefix="strategies")
    assert err.value.key == "strategies[2]" and "0.3" in err.value.message and "acts at random" in err.value.message
    lu = compile_lineup(logit_market(), [QLearner(m=3), s.ForgivingTitForTat(forgiveness=0.3)],
                        random_automata="estimate")
    assert lu.random_seats == (1,) and not lu.limit_exact
    assert compile_lineup(logit_market(), [QLearner(m=3), s.TitForTat()]).limit_exact
    with pytest.raises(sim.InputError) as err:
        compile_lineup(logit_market(), [QLearner(m=3), s.TitForTat()], random_automata="sometimes")
    assert err.value.key == "random_automata"
    with pytest.raises(sim.InputError):
        compile_lineup(logit_market(), [s.GrimTrigger(), s.TitForTat()])  # no learner


# ---- automata that act at random ------------------------------------------------------------------


def _lapsing_rule():
    # colludes, punishes one period after a rival's defection, and lapses into the punishment with
    # probability 0.1 after a good signal (a user-defined table with a lapse)
    return sim_strategies().TableAutomaton(states={
        "collude": {"action": "collusive", "watch": "rivals", "bad": "punish", "lapse": 0.1},
        "punish": {"action": "nash", "next": "collude"},
    })


RANDOM_LINEUPS = {
    "forgiving_tit_for_tat": lambda: (logit_market(), [QLearner(m=5, beta=3e-4),
                                                       sim_strategies().ForgivingTitForTat(forgiveness=0.3)]),
    "opportunist": lambda: (logit_market(), [QLearner(m=5, beta=3e-4),
                                             sim_strategies().Opportunist(probability=0.2, after="collude")]),
    "opportunist-then-nash": lambda: (logit_market(), [sim_strategies().Opportunist(probability=0.01, start=50),
                                                       QLearner(m=4, beta=3e-4)]),
    "three-firms-two-random": lambda: (logit_market(n=3), [QLearner(m=3, beta=5e-4), _lapsing_rule(),
                                                           sim_strategies().ForgivingTitForTat(forgiveness=0.4)]),
}


@pytest.mark.parametrize("name", sorted(RANDOM_LINEUPS))
def test_kernel_and_reference_agree_with_automata_that_act_at_random(name):
    """Same draws in the same order: the learning phase (Q-matrix, greedy tables, automaton states,
    generator state) and the simulated limit analysis (means, impulse response, deviation gain)
    agree bit for bit."""
    from sim.learning.twin import reference_estimate

    market, seats = RANDOM_LINEUPS[name]()
    lu = compile_lineup(market, seats, random_automata="estimate")
    assert not lu.limit_exact
    k = kernel_session(lu, 1, seed=4, convergence=3000, max_periods=40_000)
    r = reference_session(lu, 1, seed=4, convergence=3000, max_periods=40_000)
    assert k["periods"] == r["periods"] and k["status"] == r["status"]
    assert np.array_equal(k["Q"], r["Q"]) and np.array_equal(k["greedy"], r["greedy"])
    assert tuple(k["z"]) == r["z"] and k["state"] == r["state"]
    assert np.array_equal(k["rng"], r["rng"])
    n, T = lu.n_seats, 5
    learner = lu.learner_seats[0]
    for deviator, action in ((learner, -1), (learner, 0)):
        out = limit_outputs(n, T)
        rng = k["rng"].copy()
        G = lu.play(k["greedy"], k["periods"], rng)
        dev = DeviationInputs(deviator, action, 0.9, 16, 50, 400, 60)
        L.estimate_limit(lu.system_state(k["state"], k["z"]), G, dev, out)
        ref = reference_estimate(lu, r["greedy"], r["history"], r["z"], r["periods"], r["rng"], dev, T)
        assert np.array_equal(out.lim_actions, ref["lim_actions"]) and np.array_equal(out.lim_prices, ref["lim_prices"])
        assert np.array_equal(out.lim_profits, ref["lim_profits"])
        for name_ in ("ir_prices", "ir_profits", "cf_prices", "cf_profits"):
            assert np.array_equal(getattr(out, name_), np.array(ref[name_])), name_
        info = out.info
        assert info[3] == ref["gain"] and info[4] == ref["pays"] and info[7] == ref["first_action"]
        assert info[1] == 0 and math.isnan(info[5])  # no cycle, no return to it
        assert np.array_equal(rng, ref["rng"])


def test_the_jump_advances_the_generator_by_2_to_the_128_draws():
    """xoshiro256** is linear over GF(2): one draw multiplies the 256-bit state by a matrix T, and the
    jump of Blackman and Vigna (2021, "Scrambled linear pseudorandom number generators", ACM TOMS 47(4))
    must equal T**(2**128), computed here independently by 128 squarings of T."""
    from sim.core.rng import ReferenceStream
    from sim.learning.twin import jumped

    def bits(words):
        return np.array([(int(w) >> b) & 1 for w in words for b in range(64)], dtype=float)

    T = np.zeros((256, 256))
    for j in range(256):
        e = np.zeros(4, dtype=np.uint64)
        e[j // 64] = np.uint64(1) << np.uint64(j % 64)
        st = ReferenceStream(e)
        st.next_u64()
        T[:, j] = bits(st.s)
    A = T
    for _ in range(128):
        A = (A @ A) % 2  # entries at most 256: exact in floating point
    state = np.array([0x0123456789ABCDEF, 0xFEDCBA9876543210, 0x0F1E2D3C4B5A6978, 0x8796A5B4C3D2E1F0],
                     dtype=np.uint64)
    expected = (A @ bits(state)) % 2
    ref = jumped(ReferenceStream(state))
    assert np.array_equal(bits(ref.s), expected)
    ker = state.copy()
    L.jump(ker)
    assert np.array_equal(bits(ker), expected)
    assert not np.array_equal(ker, state)


def test_results_with_random_automata_are_labelled_estimates_and_do_not_depend_on_workers():
    s = sim_strategies()
    seats = [QLearner(m=5, beta=2e-4), s.ForgivingTitForTat(forgiveness=0.3)]
    a = learn(logit_market(), seats, sessions=4, seed=5, convergence=3000, workers=1, limit_periods=2000)
    b = learn(logit_market(), seats, sessions=4, seed=5, convergence=3000, workers=2, limit_periods=2000)
    for name in ("periods", "limit_prices", "profit_gain", "ir_prices", "deviation_gain", "deviation_pays"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert not a.limit_exact
    assert np.all(a.cycle_length == 0) and np.all(a.transient == -1) and np.all(np.isnan(a.returned))
    assert all(c.shape == (0, 2) for c in a.cycles)
    sm = a.summary()
    assert sm["limit"]["method"] == "estimate" and sm["limit"]["random_firms"] == [2]
    assert sm["limit"]["periods"] == 2000 and sm["limit"]["burn_in"] > 0 and "ESTIMATE" in sm["limit"]["what"]
    assert sm["cycle_lengths"] is None
    d = a.to_dict()
    assert d["per_session"]["limit_method"] == "estimate" and d["per_session"]["cycle_length"] is None
    assert d["learners"][1]["acts_at_random"] is True
    # a deterministic line-up keeps its exact analysis
    e = learn(logit_market(), [QLearner(m=5, beta=2e-4), s.TitForTat()], sessions=2, seed=5, convergence=3000)
    assert e.limit_exact and e.summary()["limit"]["method"] == "exact" and np.all(e.cycle_length >= 1)
    with pytest.raises(sim.InputError) as err:
        learn(logit_market(), seats, sessions=2, limit_periods=0)
    assert err.value.key == "limit_periods"


def _value_iteration_against_forgiving_tft(lu, g, d):
    """Value iteration (Bellman, 1957) for a learner (seat 0, k = 1) facing forgiving tit for tat
    (seat 1) that forgives a defection with probability g.

    By its definition, forgiving tit for tat colludes in a period if the learner's previous price was
    at least the collusive price; otherwise it punishes (Nash price) with probability 1 - g and
    colludes with probability g. Its action is thus a random function of the learner's last action,
    and the learner faces a Markov decision problem on its last action:
    Q(a_last, a) = sum_b P(b | a_last) (pi(a, b) + d max_a' Q(a, a'))."""
    m, r = int(lu.seats.radix[0]), int(lu.seats.radix[1])
    coll = lu.grids[1].max()
    assert r == 2 and coll == pytest.approx(lu.collusive_prices[1])
    complies = lu.grids[0] >= coll - 1e-12
    P = np.zeros((m, r))  # P[a_last, b]: b = 1 collusive, 0 Nash
    P[complies, 1] = 1.0
    P[~complies, 1] = g
    P[~complies, 0] = 1.0 - g
    pi = lu.payoff.reshape(r, m, 2)[:, :, 0]  # [rival action, learner action]
    V = np.zeros(m)
    for _ in range(20_000):
        Q = P @ (pi + d * V[None, :])
        newV = Q.max(axis=1)
        if np.max(np.abs(newV - V)) < 1e-14:
            break
        V = newV
    return Q, complies


def test_a_learner_facing_rare_forgiveness_learns_to_collude_and_its_estimated_punishment_matches_the_rule():
    # Forgiveness 0.1: value iteration on the known rule says the best reply is the lowest grid price at
    # or above the collusive one, in every state. Q-learning should find it in (nearly) every session:
    # 18 of 20, as for strict tit for tat above (common practice, no source). The simulated impulse
    # response and deviation value are then checked against the rule's probabilities.
    s = sim_strategies()
    g, d = 0.1, 0.95
    r = learn(logit_market(), [QLearner(beta=2e-5, delta=d), s.ForgivingTitForTat(forgiveness=g)], sessions=20,
              seed=8)
    lu = r.lineup
    Q, complies = _value_iteration_against_forgiving_tft(lu, g, d)
    policy = Q.argmax(axis=1)
    a_star = int(policy[0])
    assert np.all(policy == a_star) and complies[a_star] and not complies[a_star - 1]
    assert not r.limit_exact
    # (limit prices are means of 10,000 simulated periods: equal up to rounding)
    match = np.isclose(r.limit_prices[:, 0], lu.grids[0][a_star], rtol=1e-12, atol=0)
    assert match.sum() >= 18
    # the rule never draws while the learner complies: the rival's estimated limit price is exact
    assert np.allclose(r.limit_prices[match, 1], lu.grids[1].max(), rtol=1e-12, atol=0)
    # period after the deviation: the rule colludes with probability g, independently in each of the
    # 64 simulated deviations of each session; 4 standard errors of a binomial share
    p_n, p_c = lu.grids[1]
    n_draws = 64 * int(match.sum())
    expected = g * p_c + (1 - g) * p_n
    se = math.sqrt(g * (1 - g) / n_draws) * (p_c - p_n)
    assert abs(r.ir_prices[match, 2, 1].mean() - expected) < 4 * se
    # the value of the one-shot deviation: Q*(a*, br) - Q*(a*, a*) from value iteration against the
    # estimate's mean over sessions, within 4 standard errors across sessions plus the truncation bound
    br = int(r.deviation_action[match][0])
    assert np.all(r.deviation_action[match] == br)
    exact_gain = Q[a_star, br] - Q[a_star, a_star]
    x = r.deviation_gain[match]
    tol = 4 * x.std(ddof=1) / math.sqrt(x.size) + r.summary()["limit"]["value_truncation_bound"]
    assert exact_gain < 0 and abs(x.mean() - exact_gain) < tol


def test_a_learner_facing_frequent_forgiveness_learns_to_exploit_it():
    # Forgiveness 0.9: value iteration says undercutting is the best reply in every state (generous
    # tit for tat can be exploited when it forgives too often; Nowak and Sigmund, 1992, Nature 355,
    # "Tit for tat in heterogeneous populations", from memory). Every session should learn to undercut
    # (common practice, no source), after which the rule colludes with probability g in every period,
    # independently: its mean limit price is g p_c + (1 - g) p_n, which the estimate must match within
    # 4 standard errors of the mean of 20 x 10,000 Bernoulli draws.
    s = sim_strategies()
    g, d = 0.9, 0.95
    r = learn(logit_market(), [QLearner(beta=2e-5, delta=d), s.ForgivingTitForTat(forgiveness=g)], sessions=20,
              seed=8)
    lu = r.lineup
    Q, complies = _value_iteration_against_forgiving_tft(lu, g, d)
    assert not np.any(complies[Q.argmax(axis=1)])
    assert r.converged.all()
    coll = lu.grids[1].max()
    assert np.all(r.limit_prices[:, 0] < coll)
    p_n, p_c = lu.grids[1]
    se = math.sqrt(g * (1 - g) / (20 * r.summary()["limit"]["periods"])) * (p_c - p_n)
    assert abs(r.limit_prices[:, 1].mean() - (g * p_c + (1 - g) * p_n)) < 4 * se
    # exploiting pays: more than colluding with the rule forever
    pi = lu.payoff.reshape(2, int(lu.seats.radix[0]), 2)[:, :, 0]
    assert r.limit_profits[:, 0].min() > pi[1, complies].max()


def _grid_best_response(lu, rival_action):
    pi = lu.payoff.reshape(lu.seats.radix[1], lu.seats.radix[0], 2)  # [rival, learner, firm]
    return lu.grids[0][int(np.argmax(pi[rival_action, :, 0]))]


@pytest.mark.parametrize("rival", ["always_compete", "always_collude"])
def test_a_learner_facing_a_fixed_price_learns_the_static_best_response(rival):
    # Against a rival whose price never changes the learner faces a single-agent decision problem whose
    # optimal policy is the static best response in every period, whatever delta (Bellman, 1957);
    # Q-learning converges to it given enough exploration (Watkins and Dayan, 1992). With beta = 2e-5
    # every one of 20 sessions finds it.
    s = sim_strategies()
    opp = s.AlwaysCompete() if rival == "always_compete" else s.AlwaysCollude()
    r = learn(logit_market(), [QLearner(beta=2e-5), opp], sessions=20, seed=6)
    lu = r.lineup
    assert lu.seats.radix[1] == 1
    assert r.converged.all()
    assert np.all(r.limit_prices[:, 0] == _grid_best_response(lu, 0))


def _optimal_policy_against_tit_for_tat(lu, d):
    """Value iteration (Bellman, 1957) for a learner (seat 0, k = 1) facing tit for tat (seat 1).

    Tit for tat's action in a period is collusive when the learner's price in the previous period was
    at least the collusive price, and Nash otherwise (its definition); the state is the last profile."""
    m, r = int(lu.seats.radix[0]), int(lu.seats.radix[1])
    coll, nash = lu.grids[1].max(), lu.grids[1].min()
    assert r == 2 and coll == pytest.approx(lu.collusive_prices[1]) and nash == pytest.approx(lu.nash_prices[1])
    tft_next = np.where(lu.grids[0] >= coll - 1e-12, 1, 0)  # tit for tat's action index after the learner's
    pi = lu.payoff.reshape(r, m, 2)[:, :, 0]  # [tft action, learner action]
    V = np.zeros((m, r))  # state: (learner's last action, tft's last action)
    for _ in range(5000):
        newV = np.empty_like(V)
        policy = np.empty((m, r), dtype=int)
        for a_last in range(m):
            for b_last in range(r):
                b = tft_next[a_last]
                vals = pi[b, :] + d * np.array([V[a, b] for a in range(m)])
                policy[a_last, b_last] = int(np.argmax(vals))
                newV[a_last, b_last] = vals.max()
        if np.max(np.abs(newV - V)) < 1e-13:
            V = newV
            break
        V = newV
    return policy, tft_next


@pytest.mark.parametrize("d", [0.95, 0.0])
def test_a_learner_facing_tit_for_tat_learns_the_optimal_reply(d):
    # Against tit for tat the learner (k = 1) faces a Markov decision problem on the last profile; its
    # optimal policy, computed by value iteration, prices at the collusive level when patient and
    # undercuts when myopic. Q-learning should find that policy's limit price in (nearly) every
    # session: we require 18 of 20 (finite exploration may leave a session short; common practice,
    # no source).
    s = sim_strategies()
    r = learn(logit_market(), [QLearner(beta=2e-5, delta=d), s.TitForTat()], sessions=20, seed=8)
    lu = r.lineup
    policy, tft_next = _optimal_policy_against_tit_for_tat(lu, d)
    # the optimal limit cycle from any state: iterate the policy
    a, b = 0, 0
    seen = []
    for _ in range(100):
        a_new = policy[a, b]
        b = tft_next[a]
        a = a_new
        seen.append(a)
    optimal_price = lu.grids[0][seen[-1]]
    assert len(set(seen[-10:])) == 1  # a fixed point
    matches = np.sum(r.limit_prices[:, 0] == optimal_price)
    assert matches >= 18
    if d > 0:
        assert optimal_price >= lu.collusive_prices[0] and r.summary()["profit_gain"]["mean"] > 0.95
    else:
        assert optimal_price < lu.nash_prices[0] + 0.05



