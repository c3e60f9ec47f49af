"""Saved learners continued after a merger of their products: the merged firm's profit as every merged learner's reward.

Sources: the Q-learning update (Watkins and Dayan, 1992, Machine Learning 8); the convergence rule and the limit play
(Calvano, Calzolari, Denicolo and Pastorello, 2020, AER 110(10)); a merged firm maximises the summed profit of its
products, and with differentiated products a merger raises the static Nash prices of the merging products and of the
outsiders (Deneckere and Davidson, 1985, RAND Journal of Economics 16(4)); a merger to monopoly raises prices (Motta,
2004, Competition Policy: Theory and Practice, ch. 5, from memory); the static equilibria are checked against
scipy.optimize, a reference library outside the project.
"""

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

import sim
import strategies
from sim.learning.events import Event, event_from_table, with_saved_grids
from sim.learning.lineup import compile_lineup
from sim.learning.merger import check_merger, merged_lineup, merger_benchmarks
from sim.learning.session import kernel_session, learn, reference_session
from strategies.qlearning import QLearner


def logit_market(n=2):
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=n)


def test_the_merged_learners_reward_is_the_sum_of_the_merged_products_profits_at_every_profile():
    lu = compile_lineup(logit_market(3), QLearner(m=4))
    merged = merged_lineup(lu, (1, 3))
    pi = lu.stage.payoff
    assert np.array_equal(merged.reward[:, 0], pi[:, 0] + pi[:, 2])
    assert np.array_equal(merged.reward[:, 2], pi[:, 0] + pi[:, 2])
    assert np.array_equal(merged.reward[:, 1], pi[:, 1])  # the outsider keeps its own profit
    # every profile, recomputed from the market itself: the products' profits, summed over the merged firm
    _q, _p, direct = lu.market.evaluate(lu.stage.actions)
    assert np.allclose(merged.reward[:, 0], direct[:, 0] + direct[:, 2], rtol=0, atol=1e-14)
    # the reported profits are still the products' own, and the merged seats share one owner
    assert merged.stage is lu.stage and merged.learning_stage.payoff is merged.reward
    assert list(merged.seats.owner) == [0, 1, 0]
    assert lu.learning_stage is lu.stage


def test_kernel_and_twin_agree_bit_for_bit_with_the_merged_firms_reward():
    lu = merged_lineup(compile_lineup(logit_market(2), QLearner(m=3, beta=2e-3)), (1, 2))
    for j in range(2):
        ref = reference_session(lu, j, seed=4, convergence=300, max_periods=3000)
        ker = kernel_session(lu, j, seed=4, convergence=300, max_periods=3000)
        for name in ("status", "periods", "state"):
            assert ref[name] == ker[name], name
        for name in ("Q", "greedy", "rng"):
            assert np.array_equal(ref[name], ker[name]), name
    # the reward matters: the same stream without the merger learns other values
    plain = kernel_session(compile_lineup(logit_market(2), QLearner(m=3, beta=2e-3)), 0, seed=4, convergence=300,
                           max_periods=3000)
    assert not np.array_equal(plain["Q"], kernel_session(lu, 0, seed=4, convergence=300, max_periods=3000)["Q"])


def _foc_nash(owner, cost=1.0, a=2.0, mu=0.25):
    """Static Nash prices of logit Bertrand with an owner map, by iterating each firm's joint best response with
    scipy (a firm with several products: symmetric prices within the firm, which its symmetric products have)."""
    n = len(owner)
    p = np.full(n, 1.5)

    def profit(prices, prods):
        e = np.exp((a - prices) / mu)
        s = e / (1.0 + e.sum())
        return float(((prices - cost) * s)[prods].sum())

    for _ in range(200):
        for f in sorted(set(owner)):
            prods = [k for k in range(n) if owner[k] == f]

            def neg(x, prods=prods):
                q = p.copy()
                q[prods] = x
                return -profit(q, prods)

            p[prods] = minimize_scalar(neg, bounds=(cost, 5.0), method="bounded", options={"xatol": 1e-12}).x
    return p


def test_the_static_merger_effect_matches_an_outside_solver_and_raises_every_price():
    lu = compile_lineup(logit_market(3), QLearner(m=4))
    mg = merger_benchmarks(lu, (1, 2))
    assert mg["available"]
    ref = _foc_nash([0, 0, 1])
    assert np.allclose(mg["nash_prices"], ref, atol=1e-6)
    # Deneckere and Davidson (1985): the merged products' prices rise, the outsider's too, and the merged ones more
    ch = np.array(mg["static_change"])
    assert np.all(ch > 0) and ch[0] > ch[2] and ch[1] > ch[2]
    # a merger to monopoly: the static price is the joint-profit price
    two = compile_lineup(logit_market(2), QLearner(m=4))
    mono = merger_benchmarks(two, (1, 2))
    assert np.allclose(mono["nash_prices"], two.collusive_prices, atol=1e-6)


def test_the_merger_table_is_read_and_refused_by_key():
    assert event_from_table({"kind": "merger", "firms": [2, 1], "periods": 100}) == Event("merger", 100, 100, (1, 2))
    for tab in ({"kind": "merger"}, {"kind": "merger", "firms": [1]}, {"kind": "merger", "firms": [2, 2]},
                {"kind": "merger", "firms": [0, 1]}, {"kind": "merger", "firms": "1, 2"},
                {"kind": "market", "firms": [1, 2]}):
        with pytest.raises(sim.InputError) as e:
            event_from_table(tab)
        assert e.value.key == "event.firms", tab


@pytest.fixture(scope="module")
def still_learning():
    """Sixteen duopoly sessions stopped after 10,000 periods, while the learners still explore (exp(-1) = 37 %)."""
    res = learn(logit_market(), QLearner(m=7, beta=1e-4), sessions=16, seed=2, convergence=2000, max_periods=10_000,
                workers=2, keep=True)
    return res


def test_a_merger_names_existing_learners_seats(still_learning):
    saved = still_learning.saved
    for firms in ((1, 3), (2, 5)):
        with pytest.raises(sim.InputError) as e:
            with_saved_grids(QLearner(m=7), saved, 2, Event("merger", 100, 10, firms))
        assert e.value.key == "event.firms"
    lineup = [QLearner(m=7, beta=1e-4), strategies.GrimTrigger()]
    with pytest.raises(sim.InputError) as e:
        with_saved_grids(lineup, saved, 2, Event("merger", 100, 10, (1, 2)))
    assert e.value.key == "event.firms" and "automaton" in e.value.message
    # the compiled line-up is checked too: a seat outside the market, an automaton (bandits merge: see
    # tests/learning/test_merger_bandits.py)
    lu = compile_lineup(logit_market(), [QLearner(m=7), strategies.GrimTrigger()])
    for firms, lineup in (((1, 3), lu), ((1, 2), lu)):
        with pytest.raises(sim.InputError) as e:
            check_merger(firms, lineup)
        assert e.value.key == "event.firms"
    check_merger((1, 2), still_learning.lineup)
    check_merger((1, 2), compile_lineup(logit_market(), QLearner(m=7, family="ucb")))


def test_a_merger_to_monopoly_raises_the_learned_prices(still_learning):
    # Motta (2004, ch. 5): a merger to monopoly raises prices; here the two learners, each now rewarded with the
    # monopolist's profit, settle at limit prices above those they had learned before the merger. Fixed seeds; the
    # tolerance is statistical: the paired mean rise over the 16 sessions must exceed 2 standard errors (a one-sided
    # test at about 2.5 %), not merely be positive. It rises by far less than the static merger effect (the
    # learners' values of unplayed prices are those of the rivalry before the merger, and exploration is fading).
    first = still_learning
    ev = Event("merger", 1000, 100, (1, 2))
    lu = with_saved_grids(QLearner(m=7, beta=1e-4), first.saved, 2, ev)
    res = learn(logit_market(), lu, sessions=16, seed=2, convergence=5000, workers=2, start=first.saved, event=ev)
    assert res.converged.all()
    rise = res.limit_prices.mean(axis=1) - first.limit_prices.mean(axis=1)
    assert rise.mean() > 2 * rise.std(ddof=1) / np.sqrt(rise.size), rise
    s = res.summary()["event"]
    mg = s["merger"]
    assert mg["available"] and np.allclose(mg["nash_prices"], res.lineup.collusive_prices, atol=1e-6)
    assert rise.mean() < np.mean(mg["static_change"])
    # the limit profits reported are the products' own (not the merged firm's total counted twice)
    assert np.all(res.limit_profits.sum(axis=1) <= 2 * res.lineup.collusive_profits[0] + 1e-9)
    # against the market after it: a monopolist's static price is the joint-profit price, so the learned prices lie
    # below it, and a profit gain with that price as its zero and its one is not defined
    assert all(d["mean"] < 0 for d in mg["above_nash_after"]) and "profit_gain_after" not in mg


def test_a_merger_of_two_of_three_is_measured_against_the_static_nash_after_it_too():
    # the profit gain of Calvano et al. (2020) with the post-merger static Nash (Deneckere and Davidson, 1985) as its
    # zero: products ending at their post-merger Nash profits give 0, at their joint profits 1, half-way one half;
    # each product's margin is its limit price minus its post-merger Nash price. Hand-built limit outcomes, the
    # merger's static equilibrium from merger_benchmarks (checked against scipy in the test above)
    from types import SimpleNamespace

    from sim.learning.results import _after_merger

    lu = compile_lineup(logit_market(3), QLearner(m=5))
    mg = merger_benchmarks(lu, (1, 2))
    nash_pi, coll_pi = np.asarray(mg["nash_profits"]), np.asarray(lu.collusive_profits)
    half = (nash_pi + coll_pi) / 2
    prices = np.array([[1.6, 1.6, 1.5], [1.7, 1.7, 1.45], [1.55, 1.6, 1.5]])
    res = SimpleNamespace(lineup=lu, limit_profits=np.array([nash_pi, coll_pi, half]), limit_prices=prices)
    for sel, expected in (([True, False, False], 0.0), ([False, True, False], 1.0), ([False, False, True], 0.5)):
        out = dict(mg)
        _after_merger(out, res, np.array(sel), 0.95)
        assert out["profit_gain_after"]["mean"] == pytest.approx(expected, abs=1e-12)
    out = dict(mg)
    _after_merger(out, res, np.ones(3, bool), 0.95)
    for i in range(3):
        assert out["above_nash_after"][i]["mean"] == pytest.approx(prices[:, i].mean() - mg["nash_prices"][i],
                                                                   rel=1e-12)
    # a merger to monopoly: the static Nash is the joint-profit outcome, the gain is not defined
    lu2 = compile_lineup(logit_market(2), QLearner(m=5))
    out = dict(merger_benchmarks(lu2, (1, 2)))
    _after_merger(out, SimpleNamespace(lineup=lu2, limit_profits=np.ones((2, 2)), limit_prices=np.ones((2, 2))),
                  np.ones(2, bool), 0.95)
    assert "profit_gain_after" not in out and len(out["above_nash_after"]) == 2



def test_sessions_saved_after_a_merger_are_not_continued_silently_as_if_unmerged(still_learning):
    # the saved line-up records the seats, not the merged firm's reward: continuing would quietly undo the merger
    ev = Event("merger", 100, 10, (1, 2))
    lu = with_saved_grids(QLearner(m=7, beta=1e-4), still_learning.saved, 2, ev)
    after = learn(logit_market(), lu, sessions=16, seed=2, convergence=500, max_periods=2000, workers=2,
                  start=still_learning.saved, event=ev, keep=True)
    assert after.saved.header["merged"] == [1, 2]
    for event in (None, Event("market", 100, 10), Event("merger", 100, 10, (1, 2))):
        with pytest.raises(sim.InputError) as e:
            learn(logit_market(), lu, sessions=16, seed=2, convergence=500, workers=2, start=after.saved, event=event)
        assert e.value.key == "learning.continue_from" and "merger" in e.value.message


def test_after_a_merger_a_deviation_is_valued_with_the_merged_firms_profit():
    # hand-written strategies: both products always priced high (a fixed point whatever the history), so a forced
    # one-period deviation of product 1 to the low price changes only that period, and its value gain is exactly
    # the deviator's profit at (low, high) minus at (high, high) (Calvano et al., 2020, impulse response; a merged
    # firm's objective is its products' summed profit, Deneckere and Davidson, 1985). Undercutting the partner
    # raises the product's own profit but lowers the merged firm's: valued by the owner it does not pay.
    import sim.learning.limits as L
    from sim.learning.inputs import DeviationInputs, limit_outputs
    from sim.learning.twin import reference_analysis

    lu = compile_lineup(logit_market(2), QLearner(grid=[1.5, 1.9]))
    merged = merged_lineup(lu, (1, 2))
    g = np.array([[1, 1, 1, 1], [1, 1, 1, 1]], dtype=np.int64)
    hh, lh = 1 + 2 * 1, 0 + 2 * 1  # profiles: action of seat 0 + 2 * action of seat 1
    own, firm = merged.stage.payoff[:, 0], merged.reward[:, 0]
    assert np.allclose(firm, merged.stage.payoff[:, 0] + merged.stage.payoff[:, 1])
    assert own[lh] > own[hh] and firm[lh] < firm[hh]
    for value, want in ((np.zeros(0), own[lh] - own[hh]), (np.ascontiguousarray(firm), firm[lh] - firm[hh])):
        dev = DeviationInputs(0, 0, 0.95, 8, value=value)
        out = limit_outputs(2, 3)
        L.analyse_limit(hh, merged.play(g, 0), dev, out)
        info = out[-1]
        assert info[3] == pytest.approx(want, rel=1e-12)
        assert info[4] == (1.0 if want > 0 else 0.0)
        ref = reference_analysis(merged, g, ((1, 1),), [0, 0], 0, dev, 3)
        assert ref["gain"] == info[3] and ref["pays"] == info[4]
        # the reported profits stay the products' own
        assert np.array_equal(out[5], np.array(ref["ir_profits"]))
        assert out[5][1][0] == own[lh]
    # the static best response is chosen by the same profit: the low price for the product, the high for the firm
    for value, best in ((np.zeros(0), 0), (np.ascontiguousarray(firm), 1)):
        out = limit_outputs(2, 3)
        L.analyse_limit(hh, merged.play(g, 0), DeviationInputs(0, -1, 0.95, 8, value=value), out)
        assert out[-1][7] == best
