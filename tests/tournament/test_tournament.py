"""Strategy tournaments: every match equals a direct simulation with the same seed, grim trigger's self-play
earns the collusive profit (Friedman, 1971), scores are the round-robin averages of Axelrod (1984), the
bootstrap kernel equals its plain-Python twin, noise reverses the ranking of unforgiving and forgiving rules
(Axelrod, 1984; Wu and Axelrod, 1995), and learners enter through the learning component."""

import math

import numpy as np
import pytest

import strategies as S
from sim import DifferentiatedDemand, InputError, LinearDemand, LogitDemand, Market
from sim.learning.session import learn
from sim.models.monitoring import Monitoring
from sim.simulation.engine import simulate
from sim.theory.thresholds import grim_threshold
from sim.tournament.bootstrap import bootstrap_inputs, bootstrap_kernel, bootstrap_reference, bootstrap_scores
from sim.tournament.entrants import Entrant
from sim.tournament.experiment import evolve_tournament
from sim.tournament.payoffs import PayoffTable
from sim.tournament.plan import prepare_tournament, rival_weights
from sim.tournament.roundrobin import run_tournament, tournament
from strategies.qlearning import QLearner

DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
ASYMMETRIC = Market(LinearDemand(100.0, 1.0), cost=[10.0, 12.0])
METRICS = ("profit", "discounted_profit", "profit_gain")


def conduct_watchers():
    return [Entrant("grim", S.GrimTrigger()), Entrant("generous", S.ForgivingTitForTat(forgiveness=0.3)),
            Entrant("tft", S.TitForTat())]


# --------------------------------------------------------------------------------------------------
# Matches against direct simulations
# --------------------------------------------------------------------------------------------------


CASES = {
    # perception errors need strategies that watch conduct (a direct simulation refuses them otherwise)
    "symmetric, conduct errors": (DUOPOLY, conduct_watchers, Monitoring(perception_error=0.02,
                                                                        implementation_error=0.01),
                                  dict(horizon="fixed")),
    "asymmetric costs, demand shock, random horizon": (
        ASYMMETRIC,
        lambda: [Entrant("grim", S.GrimTrigger()), Entrant("wsls", S.WinStayLoseShift()),
                 Entrant("compete", S.AlwaysCompete())],
        Monitoring(sigma=0.1, implementation_error=0.02), dict(horizon="random", continuation=0.98)),
}


@pytest.mark.parametrize("case", list(CASES))
def test_every_match_equals_a_direct_simulation(case):
    market, make, mon, extra = CASES[case]
    ents = make()
    run = dict(periods=120, replications=60, delta=0.95, seed=11, **extra)
    res = tournament(market, ents, mon, bootstrap=0, **run)
    E = len(ents)
    assert len(res.matches) == (E * E if not market.spec().symmetric else E * (E + 1) // 2)
    for rec in res.matches:
        assert rec.stream["key"] == [rec.index]
        # the same collusive benchmark: the agreement the tournament chose (proportional where firms differ)
        direct = simulate(market, [ents[e].strategy for e in rec.lineup], mon, key=tuple(rec.stream["key"]),
                          baseline=False, agreement=res.plan.settings["agreement"], **run)
        assert np.array_equal(direct.discounted, rec.discounted)
        assert np.array_equal(direct.periods, rec.periods)
        for seat in range(2):
            for name in METRICS:
                a, b = direct.firm_metrics[name][seat], rec.metric(name)[seat]
                assert (a.value, a.se, a.low, a.high) == (b.value, b.se, b.low, b.high)
        assert rec.collusive_share.value == direct.metrics["collusive_share"].value


def test_seatings_are_averaged_where_firms_differ():
    ents = [Entrant("grim", S.GrimTrigger()), Entrant("compete", S.AlwaysCompete())]
    res = tournament(ASYMMETRIC, ents, Monitoring(implementation_error=0.02), periods=80, replications=40,
                     bootstrap=0)
    assert res.plan.settings["seatings_played"] == "all" and len(res.matches) == 4
    g = res.plan.groups.index((0, 1))
    recs = [res.matches[m] for m in res.plan.group_seatings[g]]
    assert sorted(r.lineup for r in recs) == [(0, 1), (1, 0)]
    for e in (0, 1):
        seat_values = [r.profit_gain[r.lineup.index(e)].value for r in recs]
        assert res.group_payoffs["profit_gain"][0][g, e] == pytest.approx(np.mean(seat_values), rel=1e-14)
    # a symmetric market needs one seating per group, unless every seating is asked for
    sym = prepare_tournament(DUOPOLY, ents, periods=10, replications=2)
    every = prepare_tournament(DUOPOLY, ents, periods=10, replications=2, seatings="all")
    assert (len(sym.matches), len(every.matches)) == (3, 4)


def test_stream_key_prefix():
    ents = conduct_watchers()[:2]
    mon = Monitoring(perception_error=0.05)
    res = tournament(DUOPOLY, ents, mon, periods=50, replications=20, seed=3, key=(7,), bootstrap=0)
    rec = res.matches[1]
    assert rec.stream["key"] == [7, 1]
    direct = simulate(DUOPOLY, [ents[e].strategy for e in rec.lineup], mon, periods=50, replications=20, seed=3,
                      key=(7, 1), baseline=False)
    assert np.array_equal(direct.discounted, rec.discounted)


# --------------------------------------------------------------------------------------------------
# Known results
# --------------------------------------------------------------------------------------------------


def test_grim_self_play_earns_the_collusive_profit():
    # Friedman (1971): with perfect monitoring and delta above the critical discount factor, grim trigger
    # against itself colludes in every period, so the profit gain is exactly 1. In the linear Cournot
    # duopoly a = 100, c = 10 the threshold is the textbook 9/17.
    from sim.simulation.engine import stage_levels

    _, levels = stage_levels(DUOPOLY)
    f = levels.firm_profits
    crit = grim_threshold(f["collusive"], f["deviation"], f["nash"])
    assert np.allclose(crit, 9 / 17, rtol=1e-12)
    delta = 0.95
    assert delta > crit.max()
    ents = [Entrant("grim", S.GrimTrigger()), Entrant("compete", S.AlwaysCompete())]
    res = tournament(DUOPOLY, ents, periods=300, replications=30, delta=delta, bootstrap=0)
    rec = res.matches[0]
    assert rec.lineup == (0, 0)
    assert np.all(rec.collusive == rec.periods)
    assert [e.value for e in rec.profit_gain] == [1.0, 1.0]
    assert res.group_payoffs["profit_gain"][0][0, 0] == 1.0
    # three firms with different costs: the tournament's default agreement there scales the Nash quantities
    # down in proportion (Schmalensee, 1987), under which every firm gains and delta = 0.95 is above every
    # firm's grim-trigger threshold (the joint-profit maximum would shut firms 2 and 3 down, below their
    # Nash profit, with no threshold below one). The collusive profits are not dyadic numbers: their sum
    # over 300 periods carries rounding, so the gain is 1 to the last few bits.
    tri = Market(LinearDemand(100.0, 1.0), cost=[10.0, 14.0, 12.0])
    plan = prepare_tournament(tri, ents, periods=300, replications=30, delta=delta, bootstrap=0)
    assert plan.settings["agreement"] == "proportional"
    f = plan.levels.firm_profits
    assert np.all(f["collusive"] > f["nash"])
    crit = grim_threshold(f["collusive"], f["deviation"], f["nash"])
    assert np.all(np.isfinite(crit)) and delta > crit.max()
    rec = run_tournament(plan).matches[0]
    assert rec.lineup == (0, 0, 0)
    assert np.all(rec.collusive == rec.periods)
    assert all(abs(e.value - 1.0) < 1e-12 for e in rec.profit_gain)
    # in Bertrand markets the collusive profit is not a dyadic number either
    for market in (Market(DifferentiatedDemand(10.0, 1.0, 0.5), cost=1.0, model="bertrand", n_firms=2),
                   Market(LogitDemand(2.0, 0.0, 0.25), cost=1.0, model="bertrand", n_firms=2)):
        rec = tournament(market, ents, periods=300, replications=30, delta=delta, bootstrap=0).matches[0]
        assert np.all(rec.collusive == rec.periods)
        assert all(abs(e.value - 1.0) < 1e-12 for e in rec.profit_gain)


# --------------------------------------------------------------------------------------------------
# The collusive benchmark of the profit gain
# --------------------------------------------------------------------------------------------------

# Linear Cournot, a = 100, b = 1, costs 10 and 14 (closed forms, e.g. Tirole, 1988, "The Theory of Industrial
# Organization", ch. 5): Nash quantities (a - 2 c_i + c_j) / 3 = 29.33 and 25.33, profits 981.8 and 747.1;
# the joint-profit maximum lets the cheaper firm produce the monopoly quantity 45 alone (profit 2025, 0).
SHUT_DOWN = Market(LinearDemand(100.0, 1.0), cost=[10.0, 14.0])


def collude_compete_grim():
    return [Entrant("collude", S.AlwaysCollude()), Entrant("compete", S.AlwaysCompete()),
            Entrant("grim", S.GrimTrigger())]


def test_profit_gain_refuses_an_agreement_under_which_a_firm_loses():
    plan = prepare_tournament(SHUT_DOWN, collude_compete_grim(), agreement="joint", score="profit", periods=10,
                              replications=2)
    assert plan.collusive.tolist() == [2025.0, 0.0]
    assert np.allclose(plan.nash, [8836 / 9, 6724 / 9], rtol=1e-12)
    with pytest.raises(InputError, match=r"^collusion\.agreement: under agreement = 'joint' firm 2 earns 0\.0000 per "
                                         r"period, no more than its static-Nash profit 747\.1111"):
        prepare_tournament(SHUT_DOWN, collude_compete_grim(), agreement="joint", periods=10, replications=2)
    # learners must collude on the joint maximum: the way out is another score
    with pytest.raises(InputError, match=r"^collusion\.agreement: under the default agreement 'joint' firm 2 .*"
                                         r"learning entrants need agreement = 'joint'"):
        prepare_tournament(SHUT_DOWN, [Entrant("grim", S.GrimTrigger()), Entrant("q", small_learner())], **LEARN)


def test_default_agreement_lets_every_firm_gain_where_firms_differ():
    # the review's case: under the joint maximum firm 2's gain (pi - 747) / (0 - 747) rose as its profit fell,
    # so always compete, which earns the most, ranked last. Under the default agreement every firm gains, a
    # seat's profit gain rises with its profit, and the ranking by profit gain agrees with the profits here.
    res = tournament(SHUT_DOWN, collude_compete_grim(), periods=50, replications=20, bootstrap=50)
    plan = res.plan
    assert plan.settings["agreement"] == "proportional" and not plan.settings["agreement_given"]
    assert np.all(plan.collusive > plan.nash) and plan.gain_defined.all()
    for rec in res.matches:
        for seat in range(2):
            gain, profit = rec.profit_gain[seat].value, rec.profit[seat].value
            assert np.sign(round(gain, 9)) == np.sign(round(profit - plan.nash[seat], 6))
    labels = res.labels
    by_gain = [labels[e] for e in res.order]
    by_profit = sorted(labels, key=lambda lab: -res.scores["discounted_profit"][labels.index(lab)].value)
    assert by_gain == by_profit == ["compete", "grim", "collude"]
    assert res.to_dict()["benchmarks"]["agreement"] == "proportional"
    # symmetric firms keep the joint-profit maximum
    assert prepare_tournament(DUOPOLY, collude_compete_grim(), periods=10, replications=2).settings["agreement"] \
        == "joint"


def test_undefined_profit_gain_with_another_score():
    # ranked by discounted profit, the joint agreement may stand; firm 2's profit gain is then undefined
    res = tournament(SHUT_DOWN, collude_compete_grim(), agreement="joint", score="discounted_profit", periods=30,
                     replications=10, bootstrap=20)
    assert res.plan.gain_defined.tolist() == [True, False]
    for rec in res.matches:
        assert math.isfinite(rec.profit_gain[0].value) and math.isnan(rec.profit_gain[1].value)
    assert all(math.isnan(x.value) for x in res.scores["profit_gain"])  # every entrant sits in seat 2 too
    assert all(math.isfinite(x.value) for x in res.scores["discounted_profit"])
    assert np.all(np.isnan(bootstrap_scores(res.plan, res.matches, metric="profit_gain")))


def test_scores_are_round_robin_averages():
    # two seats: each entrant's score is the plain average of its payoffs against every entrant, itself
    # included (Axelrod, 1984); three seats: the average over every ordered pair of rivals
    mon = Monitoring(perception_error=0.03)
    res = tournament(DUOPOLY, conduct_watchers(), mon, periods=100, replications=30, bootstrap=0)
    for m in METRICS:
        P = res.pairwise[m]["value"]
        for i in range(3):
            assert res.scores[m][i].value == pytest.approx(P[i].mean(), rel=1e-13)
    tri = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
    res = tournament(tri, conduct_watchers(), mon, periods=60, replications=20, bootstrap=0)
    where = {g: k for k, g in enumerate(res.plan.groups)}
    val = res.group_payoffs["profit_gain"][0]
    for i in range(3):
        brute = np.mean([val[where[tuple(sorted((i, j, k)))], i] for j in range(3) for k in range(3)])
        assert res.scores["profit_gain"][i].value == pytest.approx(brute, rel=1e-13)
    # the weights of the groups containing an entrant sum to one
    assert np.allclose(rival_weights(res.plan).sum(axis=0), 1.0)


def test_pairwise_verdicts_and_payoff_table():
    mon = Monitoring(implementation_error=0.02)
    ents = [*conduct_watchers(), Entrant("compete", S.AlwaysCompete())]
    res = tournament(DUOPOLY, ents, mon, periods=150, replications=40, bootstrap=0)
    pw = res.pairwise["profit_gain"]
    assert np.array_equal(pw["beats"], -pw["beats"].T)
    assert np.allclose(pw["difference"], -pw["difference"].T)
    # always compete never colludes, so it earns more than any rule that starts by colluding
    c = 3
    assert all(pw["beats"][c, j] == 1 for j in range(3))
    table = res.payoffs()
    assert isinstance(table, PayoffTable)
    assert np.allclose(table.matrix(), pw["value"], rtol=0, atol=0)
    assert np.allclose(res.versus["profit_gain"], pw["value"])
    evo = evolve_tournament(res, {"shares": None, "generations": 50, "selection": 0.2, "fitness": "linear",
                                  "population": 20, "moran_runs": 200})
    assert evo.replicator.shares.shape == (51, 4)


def test_noise_turns_the_ranking_towards_forgiving_rules():
    # The setting: a symmetric linear Cournot duopoly (a = 100, c = 10, delta = 0.95, 400 periods) with an
    # unforgiving rule (grim trigger), strict tit for tat, a generous tit for tat (forgives an observed
    # defection with probability 0.3) and a firm that always competes. Without noise the nice rules
    # collude forever among themselves and grim trigger loses least against the competitor, so it ranks
    # above the generous rule (Axelrod, 1984, "The Evolution of Cooperation": nice, retaliatory rules do
    # well). With 1 % implementation errors -- the misimplementation noise of Wu and Axelrod (1995, J.
    # Conflict Resolution 39, "How to cope with noise in the iterated prisoner's dilemma"), 1 % there
    # (from memory) -- grim trigger's punishments never end and the generous rule overtakes it, as the
    # noisy-tournament literature reports (Wu and Axelrod, 1995; Molander, 1985, "The optimal level of
    # generosity in a selfish, uncertain environment"). Tolerance: the score differences must exceed 5
    # standard errors.
    ents = [Entrant("grim", S.GrimTrigger()), Entrant("generous", S.ForgivingTitForTat(forgiveness=0.3)),
            Entrant("tft", S.TitForTat()), Entrant("compete", S.AlwaysCompete())]
    run = dict(periods=400, replications=100, seed=7, bootstrap=200)

    def gap(res):
        a, b = res.scores["profit_gain"][0], res.scores["profit_gain"][1]
        return a.value - b.value, math.hypot(a.se, b.se)

    quiet = tournament(DUOPOLY, ents, Monitoring(), **run)
    d, se = gap(quiet)
    assert d > 5 * se  # only the generous rule's forgiveness is random here
    assert quiet.ranks[0] < quiet.ranks[1]
    noisy = tournament(DUOPOLY, ents, Monitoring(implementation_error=0.01), **run)
    d, se = gap(noisy)
    assert d < -5 * se
    assert noisy.ranks[1] < noisy.ranks[0]
    assert noisy.order[0] == 1
    assert noisy.stability["per_entrant"]["rank_share"][1] == 1.0


# --------------------------------------------------------------------------------------------------
# Bootstrap and reproducibility
# --------------------------------------------------------------------------------------------------


def test_bootstrap_kernel_equals_reference():
    ents = [*conduct_watchers(), Entrant("compete", S.AlwaysCompete())]
    plan = prepare_tournament(ASYMMETRIC, ents, Monitoring(perception_error=0.03, implementation_error=0.02),
                              periods=40, replications=23, horizon="random", continuation=0.95, bootstrap=9,
                              seed=5)
    res = run_tournament(plan, progress=False)
    for metric in METRICS:
        a = bootstrap_scores(plan, res.matches, threads=2, metric=metric)
        b = bootstrap_scores(plan, res.matches, metric=metric, reference=True)
        assert np.array_equal(a, b)
    # the kernel called directly, on other streams
    from sim.core.rng import stream_states

    reps, seats = bootstrap_inputs(plan, res.matches, "profit")
    states = stream_states(99, (1, 2), 0, 5)
    out = np.zeros((5, 4))
    bootstrap_kernel(reps, seats, states.copy(), out)
    assert np.array_equal(out, bootstrap_reference(reps, seats, states.copy(), 4))


def test_bootstrap_spread_matches_the_standard_errors():
    # the bootstrap standard deviation of each score against the delta-method standard error; tolerance
    # 15 %: the relative error of a standard deviation from B = 1,000 resamples is about 1/sqrt(2B) = 2 %,
    # and the bootstrap divides by R rather than R - 1
    plan = prepare_tournament(DUOPOLY, conduct_watchers(), Monitoring(implementation_error=0.02), periods=100,
                              replications=80, bootstrap=1000, seed=9)
    res = run_tournament(plan)
    boot = bootstrap_scores(plan, res.matches)
    for e in range(3):
        assert boot[:, e].std() == pytest.approx(res.scores["profit_gain"][e].se, rel=0.15)
    st = res.stability
    above = np.asarray(st["above"])
    assert np.all(above + above.T <= 1.0 + 1e-12)
    assert st["ranking_holds"] <= min(st["per_entrant"]["rank_share"]) + 1e-12


def test_results_do_not_depend_on_threads():
    plan_args = dict(periods=80, replications=50, seed=13, bootstrap=100)
    mon = Monitoring(perception_error=0.02, implementation_error=0.02)
    a = tournament(DUOPOLY, conduct_watchers(), mon, threads=1, **plan_args)
    b = tournament(DUOPOLY, conduct_watchers(), mon, threads=2, **plan_args)
    for m in METRICS:
        assert [x.value for x in a.scores[m]] == [x.value for x in b.scores[m]]
        assert [x.se for x in a.scores[m]] == [x.se for x in b.scores[m]]
    assert a.stability == b.stability
    assert a.to_dict()["ranking"] == b.to_dict()["ranking"]


# --------------------------------------------------------------------------------------------------
# Learning entrants
# --------------------------------------------------------------------------------------------------


def small_learner():
    return QLearner(m=5, beta=2e-3, delta=0.9)


LEARN = dict(periods=200, replications=30, sessions=8, convergence=300, max_periods=200_000, seed=3, bootstrap=50)


def test_learner_enters_and_matches_a_direct_learning_run():
    ents = [Entrant("grim", S.GrimTrigger()), Entrant("q", small_learner()), Entrant("compete", S.AlwaysCompete())]
    res = tournament(DUOPOLY, ents, **LEARN)
    kinds = {res.plan.describe(m): m.learning for m in res.plan.matches}
    assert kinds["grim vs q"] and kinds["q vs q"] and not kinds["grim vs compete"]
    rec = next(r for r in res.matches if r.lineup == (1, 1))
    assert rec.stream == {"seed": 3, "cell": rec.index, "function": "sim.learning.session.learn"}
    direct = learn(DUOPOLY, [small_learner(), small_learner()], sessions=8, seed=3, convergence=300,
                   max_periods=200_000, response_periods=0, cell=rec.index)
    assert np.array_equal(direct.limit_profits, rec.profit_sum)
    assert rec.converged == float(direct.converged.mean())
    # the discounted profit is the value of the limit cycle over the horizon
    lu = direct.lineup
    for j in range(8):
        cyc = direct.cycles[j]
        pi = lu.payoff[(cyc * lu.place).sum(axis=1)]
        value = sum(0.95**t * pi[t % cyc.shape[0]] for t in range(200))
        assert np.allclose(rec.discounted[j], value, rtol=1e-12)
    assert rec.metric("profit_gain")[0].value == pytest.approx(
        (rec.profit_sum[:, 0].mean() - res.plan.nash[0]) / (res.plan.collusive[0] - res.plan.nash[0]), rel=1e-12)
    assert res.stability is not None and len(res.order) == 3


def test_learner_restrictions_are_refused_before_any_work():
    ents = [Entrant("grim", S.GrimTrigger()), Entrant("q", small_learner())]
    with pytest.raises(InputError, match=r"^monitoring\.implementation_error: learning entrants \(such as 'q'\)"):
        prepare_tournament(DUOPOLY, ents, Monitoring(implementation_error=0.01), **LEARN)
    with pytest.raises(InputError, match=r"^monitoring\.signal:"):
        prepare_tournament(DUOPOLY, ents, Monitoring(signal="price", sigma=0.1), **LEARN)
    with pytest.raises(InputError, match=r"^collusion\.agreement: learning entrants"):
        prepare_tournament(DUOPOLY, ents, agreement="proportional", **LEARN)
    five = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=5)
    with pytest.raises(InputError, match=r"^tournament\.seats: learning entrants .* need 2 to 4 seats, got 5"):
        prepare_tournament(five, ents, **LEARN)


def test_learner_meets_an_automaton_that_acts_at_random():
    # a forgiving rule draws from the session's stream; the match is the learning component's estimate of
    # the limit outcome (sim.learning.session.learn), the same numbers as a direct run with the same seed and cell
    ents = [Entrant("q", small_learner()), Entrant("generous", S.ForgivingTitForTat(forgiveness=0.3))]
    res = tournament(DUOPOLY, ents, limit_periods=500, **LEARN)
    rec = next(r for r in res.matches if r.lineup == (0, 1))
    assert rec.learning and rec.stream["limit"] == "estimate" and rec.stream["limit_periods"] == 500
    direct = learn(DUOPOLY, [small_learner(), S.ForgivingTitForTat(forgiveness=0.3)], sessions=8, seed=3,
                   convergence=300, max_periods=200_000, response_periods=0, cell=rec.index, limit_periods=500)
    assert not direct.lineup.limit_exact
    assert np.array_equal(direct.limit_profits, rec.profit_sum)
    # no exact cycle: the estimated mean profit in every period of the horizon
    weights = sum(0.95**t for t in range(200))
    assert np.allclose(rec.discounted, weights * direct.limit_profits, rtol=1e-12)
    # learners among themselves keep the exact cycle
    assert "limit" not in next(r for r in res.matches if r.lineup == (0, 0)).stream


# --------------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("entrants, kwargs, key", [
    ([Entrant("grim", S.GrimTrigger())], {}, "entrants"),
    ([Entrant("a", S.GrimTrigger()), Entrant("a", S.TitForTat())], {}, "entrants[2].label"),
    ([Entrant("", S.GrimTrigger()), Entrant("b", S.TitForTat())], {}, "entrants[1].label"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", "tit_for_tat")], {}, "entrants[2].strategy"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", S.TitForTat())], {"seats": 3}, "tournament.seats"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", S.FinitePunishment(length=0))], {}, "entrants[2].length"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", S.AlwaysCollude(action=[1.0, 2.0, 3.0]))], {},
     "entrants[2].states.collude.action"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", S.TitForTat())], {"score": "wins"}, "tournament.score"),
    ([Entrant("a", S.GrimTrigger()), Entrant("b", S.TitForTat())], {"replications": 0}, "run.replications"),
])
def test_bad_input(entrants, kwargs, key):
    with pytest.raises(InputError) as exc:
        prepare_tournament(DUOPOLY, entrants, **kwargs)
    assert exc.value.key == key


def test_conduct_watchers_refused_with_price_signal_naming_the_entrant():
    ents = [Entrant("trigger", S.TriggerPrice(trigger=40.0)), Entrant("grim", S.GrimTrigger())]
    with pytest.raises(InputError) as exc:
        prepare_tournament(DUOPOLY, ents, Monitoring(signal="price", sigma=0.1))
    assert exc.value.key == "entrants[2].strategy" and "watches the rivals' actions" in exc.value.message


def test_too_many_matches_refused():
    ents = [Entrant(f"e{k}", S.AlwaysCompete()) for k in range(12)]
    six = Market(LinearDemand(100.0, 1.0), cost=[10.0, 10.0, 10.0, 10.0, 10.0, 11.0])
    with pytest.raises(InputError, match=r"^tournament\.seats: 12 entrants over 6 seats make 2,985,984 matches"):
        prepare_tournament(six, ents)
