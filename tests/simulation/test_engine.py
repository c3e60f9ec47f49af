"""The simulation engine: kernel against the plain-Python reference, reproducibility across threads and
splits, and the analytic baseline (Friedman 1971; Green and Porter 1984; geometric breakdown times)."""

import itertools
import math

import numba
import numpy as np
import pytest
from scipy import stats

import strategies as S
from sim import DifferentiatedDemand, InputError, LinearDemand, LogitDemand, Market
from sim.models.monitoring import Monitoring
from sim.simulation.baseline import first_breakdown_distribution, trigger_price_chain
from sim.simulation.engine import RawRun, prepare_game, run_game, simulate
from sim.simulation.kernel import M_THETA
from sim.simulation.twin import reference_run
from sim.theory.thresholds import grim_threshold

TRIOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
RAW_FIELDS = [f for f in RawRun.__dataclass_fields__ if f != "n_paths"]

NOISY = Monitoring(sigma=0.12, perception_error=0.03, implementation_error=0.03)
PRICE_ONLY = Monitoring(signal="price", sigma=0.12, implementation_error=0.03)

# every shipped strategy, each in a line-up that exercises it
LINEUPS = {
    "grim_trigger": ([S.GrimTrigger()] * 3, NOISY),
    "finite_punishment": ([S.FinitePunishment(length=2), S.FinitePunishment(length=4), S.GrimTrigger()], NOISY),
    "tit_for_tat": ([S.TitForTat()] * 2 + [S.AlwaysCollude()], NOISY),
    "forgiving_tit_for_tat": ([S.ForgivingTitForTat(forgiveness=0.4)] * 3, NOISY),
    "win_stay_lose_shift": ([S.WinStayLoseShift(), S.WinStayLoseShift(start="punish"), S.GrimTrigger()], NOISY),
    "stick_and_carrot": ([S.StickAndCarrot()] * 3, NOISY),
    "trigger_price": ([S.TriggerPrice(trigger=50.0, length=3), S.TriggerPrice(trigger=48.0, length="forever"),
                       S.TriggerPrice(trigger=50.0, length=1)], PRICE_ONLY),
    "always_compete": ([S.AlwaysCompete(), S.GrimTrigger(), S.GrimTrigger()], NOISY),
    "always_collude": ([S.AlwaysCollude()] * 3, Monitoring(sigma=0.1, implementation_error=0.05)),
    "opportunist": ([S.Opportunist(probability=0.05), S.Opportunist(probability=0.1, after="collude", start=5),
                     S.TitForTat()], NOISY),
    "automaton": ([S.TableAutomaton(states={
        "c": {"action": "collusive", "watch": "rivals", "bad": "p1", "forgive": 0.2, "cheat": 0.02},
        "p1": {"action": [20.0, 21.0, 22.0], "watch": "all", "expect": "nash", "judge": "punishment",
               "good": "c", "bad": "p1", "lapse": 0.3, "lapse_to": "p1"},
    }, start=3), S.GrimTrigger(), S.StickAndCarrot()], NOISY),
}


def _same(a: RawRun, b: RawRun):
    for f in RAW_FIELDS:
        x, y = getattr(a, f), getattr(b, f)
        assert x.shape == y.shape, f
        if x.dtype.kind == "f":
            np.testing.assert_array_equal(x, y, err_msg=f)
        else:
            assert np.array_equal(x, y), f


def test_every_shipped_strategy_is_covered():
    automata = {k for k, v in S.STRATEGIES.items() if issubclass(v, S.Automaton)}
    assert set(LINEUPS) == automata


@pytest.mark.parametrize("name", sorted(LINEUPS))
def test_kernel_equals_reference(name):
    """Same seed, same path: every array (paths included) is identical to the plain-Python reference."""
    lineup, mon = LINEUPS[name]
    game = prepare_game(TRIOPOLY, lineup, mon)
    kw = dict(periods=40, replications=6, delta=0.9, seed=11, key=(3,), paths=3)
    _same(run_game(game, **kw), reference_run(game, **kw))


@pytest.mark.parametrize("market", [
    Market(LinearDemand(100.0, 1.0, split=[1.0, 2.0]), cost=[10.0, 12.0], model="bertrand"),
    Market(DifferentiatedDemand([90.0, 100.0, 80.0], 1.0, 0.6), cost=[5.0, 10.0, 8.0], model="bertrand"),
    Market(LogitDemand([2.0, 1.5, 1.0], 0.0, 0.25), cost=1.0, model="bertrand", owner=[1, 2, 2]),
], ids=["homogeneous bertrand", "differentiated bertrand", "logit, two-product firm"])
def test_kernel_equals_reference_price_competition_random_horizon(market):
    n = market.spec().n_firms
    lineup = [S.StickAndCarrot() if market.spec().demand.kind != "logit" else S.GrimTrigger()] + \
        [S.ForgivingTitForTat(forgiveness=0.3)] * (n - 1)
    game = prepare_game(market, lineup, NOISY)
    kw = dict(periods=30, replications=5, delta=0.95, seed=2, horizon="random", continuation=0.93, paths=2)
    _same(run_game(game, **kw), reference_run(game, **kw))


def test_identical_for_any_threads_and_split():
    """Results do not depend on the number of threads, the batches or the chunks (integer counts and
    per-replication streams)."""
    lineup, mon = LINEUPS["opportunist"]
    game = prepare_game(TRIOPOLY, lineup, mon)
    kw = dict(periods=50, replications=37, delta=0.9, seed=5, paths=2)
    one = run_game(game, threads=1, **kw)
    two = run_game(game, threads=min(2, numba.config.NUMBA_NUM_THREADS), **kw)
    split = run_game(game, threads=1, batch=7, n_chunks=3, **kw)
    _same(one, two)
    _same(one, split)
    # a replication's numbers depend only on its index: the last 10 alone equal the last 10 of the run
    from sim.core.rng import stream_states

    assert np.array_equal(stream_states(5, (0,), 27, 37), stream_states(5, (0,), 0, 37)[27:])


# ---- Friedman (1971): grim trigger and the one-shot cheat ---------------------------------------


def test_grim_trigger_colludes_every_period_without_noise():
    res = simulate(TRIOPOLY, [S.GrimTrigger()] * 3, periods=200, replications=3, delta=0.9)
    assert res.metrics["collusive_share"].value == 1.0
    assert np.all(res.first_breakdown == 0)
    assert res.metrics["profit_gain"].value == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("t0", [0, 7])
def test_one_shot_cheat_gains_exactly_below_the_grim_threshold(t0):
    """Friedman (1971), "A non-cooperative equilibrium for supergames": against grim trigger, a firm
    that cheats once in period t0 earns sum_{t<t0} d^t pi_C + d^t0 pi_D + sum_{t>t0} d^t pi_N (closed
    form, fixed horizon H), which exceeds the collusive sum_{t<H} d^t pi_C exactly when delta is below
    (pi_D - pi_C) / (pi_D - pi_N) -- 16/28 = 4/7 for three symmetric linear Cournot firms (from memory:
    (n+1)^2 / (n^2 + 6n + 1)). Simulated sums must match the closed forms to 1e-9."""
    H = 400
    pi_c, pi_d, pi_n = 675.0, 900.0, 506.25  # a = 100, c = 10, n = 3: q_C = 15, q_D = 30, q_N = 22.5
    thr = float(grim_threshold(pi_c, pi_d, pi_n))
    assert thr == pytest.approx(4.0 / 7.0, rel=1e-14)
    for delta in (0.3, 0.5, thr - 0.01, thr - 1e-6, thr + 1e-6, thr + 0.01, 0.7, 0.95):
        cheat = simulate(TRIOPOLY, [S.GrimTrigger(), S.GrimTrigger(), S.Opportunist(probability=1.0, start=t0)],
                         periods=H, replications=1, delta=delta, baseline=False)
        honest = simulate(TRIOPOLY, [S.GrimTrigger()] * 3, periods=H, replications=1, delta=delta, baseline=False)
        d = delta ** np.arange(H)
        closed_cheat = pi_c * d[:t0].sum() + pi_d * d[t0] + pi_n * d[t0 + 1:].sum()
        closed_honest = pi_c * d.sum()
        assert cheat.discounted[0, 2] == pytest.approx(closed_cheat, rel=1e-9)
        assert honest.discounted[0, 2] == pytest.approx(closed_honest, rel=1e-9)
        gains = cheat.discounted[0, 2] > honest.discounted[0, 2]
        assert gains == (delta < thr), delta


# ---- Green and Porter (1984): trigger-price wars -------------------------------------------------


@pytest.mark.parametrize("T", [1, 3])
def test_trigger_price_war_share_and_spell_length(T):
    """Green and Porter (1984), "Noncooperative collusion under imperfect price information": with war
    probability beta = F(trigger / P(nq)) per normal period, collusive spells are geometric with mean
    1 / beta and wars last T periods; started in a normal period, the expected share of collusive
    periods over H periods follows the two-phase chain. Simulated values within 3 standard errors."""
    trigger, sigma = 50.0, 0.1
    mon = Monitoring(signal="price", noise="lognormal", sigma=sigma)
    res = simulate(TRIOPOLY, [S.TriggerPrice(trigger=trigger, length=T)] * 3, mon, periods=300, replications=300,
                   delta=0.9, seed=7)
    # beta by hand: lognormal theta = exp(sigma Z - sigma^2 / 2), collusive price P(45) = 55
    beta = stats.norm.cdf((math.log(trigger / 55.0) + 0.5 * sigma**2) / sigma)
    tp = res.baseline["trigger_price"]
    assert tp["war_probability"] == pytest.approx(beta, rel=1e-12)
    assert tp["expected_collusive_spell"] == pytest.approx(1.0 / beta, rel=1e-12)
    assert tp["war_share_long_run"] == pytest.approx(beta * T / (1 + beta * T), rel=1e-12)
    share = res.metrics["collusive_share"]
    expected = float(trigger_price_chain(beta, T, 300).mean())
    assert tp["collusive_share"] == pytest.approx(expected, rel=1e-12)
    assert abs(share.value - expected) < 3 * share.se
    spell = res.metrics["spell_length"]
    assert abs(spell.value - 1.0 / beta) < 3 * spell.se
    assert res.metrics["war_length"].value == pytest.approx(T, abs=1e-12)
    fb = res.metrics["first_breakdown"]
    assert abs(fb.value - (1.0 + 1.0 / beta)) < 3 * fb.se  # first war period = first spell + 1


def test_spell_length_unbiased_when_the_horizon_cuts_spells():
    """Many short replications (100 periods x 20,000), so that about one spell in twenty is cut off by
    the horizon: the Kaplan-Meier mean stays within 3 standard errors of Green and Porter's 1 / beta
    (a spell still running after l periods is censored at l - 1, see sim.simulation.results)."""
    mon = Monitoring(signal="price", noise="lognormal", sigma=0.1)
    res = simulate(TRIOPOLY, [S.TriggerPrice(trigger=50.0, length=2)] * 3, mon, periods=100, replications=20_000,
                   delta=0.95, seed=1)
    e = res.metrics["spell_length"]
    assert abs(e.value - res.baseline["trigger_price"]["expected_collusive_spell"]) < 3 * e.se
    assert res.metrics["war_length"].value == pytest.approx(2.0, abs=1e-12) and not res.metrics["war_length"].note


@pytest.mark.slow
def test_trigger_price_large_run_matches_green_porter():
    """The same check on a large run (1,000 periods x 4,000 replications, war length 2), tolerance 3
    standard errors: long-run war share, spell length and the value over the horizon."""
    mon = Monitoring(signal="price", noise="lognormal", sigma=0.1)
    res = simulate(TRIOPOLY, [S.TriggerPrice(trigger=50.0, length=2)] * 3, mon, periods=1000, replications=4000,
                   delta=0.95, seed=2026)
    tp = res.baseline["trigger_price"]
    for key, metric in (("war_share", "war_share"), ("expected_collusive_spell", "spell_length")):
        e = res.metrics[metric]
        assert abs(e.value - tp[key]) < 3 * e.se, key
    d = res.firm_metrics["discounted_profit"][0]
    assert abs(d.value - tp["discounted_profit"]) < 3 * d.se


def test_trigger_price_chain_long_run_share():
    """The chain's long-run share of war periods is Green and Porter's beta T / (1 + beta T)."""
    beta, T = 0.2, 3
    normal = trigger_price_chain(beta, T, 5000)
    assert 1 - normal[-2000:].mean() == pytest.approx(beta * T / (1 + beta * T), rel=1e-3)


# ---- geometric time to first breakdown ------------------------------------------------------------


def test_implementation_errors_geometric_first_breakdown():
    """With implementation errors e and grim trigger, the first non-collusive period is geometric with
    rate q = 1 - (1 - e)^n (a period breaks down when any of n firms trembles, independently each
    period; the geometric distribution). Checks: the Kaplan-Meier mean within 3 standard errors of
    E[min(tau, H)], the breakdown hazard (events / exposure) within 3 standard errors of q, and a
    chi-square goodness-of-fit test of tau (p > 0.001)."""
    e, n, H, R = 0.02, 3, 300, 3000
    q = 1 - (1 - e) ** n
    res = simulate(TRIOPOLY, [S.GrimTrigger()] * n, Monitoring(implementation_error=e), periods=H, replications=R,
                   delta=0.95, seed=21)
    fb = res.baseline["first_breakdown"]
    assert fb["geometric"] and fb["tremble_rate"] == pytest.approx(q, rel=1e-14)
    assert fb["expected"] == pytest.approx(1 / q, rel=1e-12)
    restricted = sum((1 - q) ** t for t in range(H))
    assert fb["expected_within_horizon"] == pytest.approx(restricted, rel=1e-12)
    est = res.metrics["first_breakdown"]
    assert abs(est.value - restricted) < 3 * est.se
    tau = res.first_breakdown
    events = (tau > 0).sum()
    exposure = np.where(tau > 0, tau, H).sum()
    hazard = events / exposure
    assert abs(hazard - q) < 3 * math.sqrt(q * (1 - q) / exposure)
    # chi-square on bins of tau (censored beyond H in the last bin)
    edges = np.array([1, 5, 10, 15, 20, 30, 40, 60, 90, H + 1])
    obs = np.array([((tau >= a) & (tau < b)).sum() for a, b in itertools.pairwise(edges)])
    obs = np.append(obs, (tau == 0).sum())
    cdf = lambda t: 1 - (1 - q) ** (t - 1)  # noqa: E731  P(tau < t)
    p = np.array([cdf(b) - cdf(a) for a, b in itertools.pairwise(edges)])
    p = np.append(p, (1 - q) ** H)
    chi2 = float(((obs - R * p) ** 2 / (R * p)).sum())
    assert stats.chi2.sf(chi2, len(obs) - 1) > 1e-3
    # grim trigger never recovers: the collusive share per period follows (1 - q)^t
    share = res.metrics["collusive_share"]
    assert abs(share.value - res.baseline["collusive_share"]) < 3 * share.se


def test_perception_errors_shift_the_breakdown_by_one_period():
    """A misreading at the end of period t shows as a non-collusive period t + 1: with perception
    errors only, tau - 1 is geometric with rate q_p = 1 - (1 - e)^(n (n-1)) (each firm misreads each of
    its n - 1 rivals independently), so E[tau] = 1 + 1 / q_p."""
    e, n = 0.004, 3
    q_p = 1 - (1 - e) ** (n * (n - 1))
    d = first_breakdown_distribution(0.0, q_p, 10**6)
    assert d["mean"] == pytest.approx(1 + 1 / q_p, rel=1e-12)
    res = simulate(TRIOPOLY, [S.GrimTrigger()] * n, Monitoring(perception_error=e), periods=2000, replications=1500,
                   delta=0.95, seed=3)
    fb = res.baseline["first_breakdown"]
    assert fb["misreading_rate"] == pytest.approx(q_p, rel=1e-12) and not fb["geometric"]
    est = res.metrics["first_breakdown"]
    assert abs(est.value - fb["expected_within_horizon"]) < 3 * est.se
    assert np.all(res.first_breakdown != 1)


def test_random_horizon_lengths_are_truncated_geometric():
    """The game ends after each period with probability 1 - c: the number of periods is geometric,
    capped at run.periods, with mean (1 - c^H) / (1 - c) (the geometric distribution)."""
    c, H, R = 0.97, 200, 3000
    d = 0.99
    res = simulate(TRIOPOLY, [S.AlwaysCollude()] * 3, periods=H, replications=R, delta=d, horizon="random",
                   continuation=c, seed=9, baseline=False)
    L = res.periods
    mean = (1 - c**H) / (1 - c)
    assert abs(L.mean() - mean) < 3 * L.std(ddof=1) / math.sqrt(R)
    assert L.min() >= 1 and L.max() <= H
    # the discounted sum over the L periods played: 675 (1 - d^L) / (1 - d), the geometric sum
    np.testing.assert_allclose(res.discounted[:, 0], 675.0 * (1 - d**L) / (1 - d), rtol=1e-11)
    np.testing.assert_allclose(res.profits[:, 0], 675.0, rtol=1e-12)  # the mean per period


# ---- validation --------------------------------------------------------------------------------


@pytest.mark.parametrize("kw, key", [
    ({"periods": 0}, "run.periods"), ({"replications": 1.5}, "run.replications"), ({"delta": 0.0}, "run.delta"),
    ({"delta": 1.2}, "run.delta"), ({"seed": -1}, "run.seed"), ({"horizon": "endless"}, "run.horizon"),
    ({"continuation": 0.0}, "run.continuation"), ({"paths": 11}, "run.paths"), ({"threads": 0}, "threads"),
    ({"confidence": 1.0}, "confidence"),
])
def test_run_settings_are_validated_before_work(kw, key):
    args = dict(periods=10, replications=10)
    args.update(kw)
    with pytest.raises(InputError) as exc:
        simulate(TRIOPOLY, S.GrimTrigger(), **args)
    assert exc.value.key == key


def test_paths_are_recorded_for_the_first_replications_only():
    res = simulate(TRIOPOLY, [S.GrimTrigger()] * 3, Monitoring(implementation_error=0.05), periods=25,
                   replications=8, paths=2, seed=1, baseline=False)
    P = res.paths
    assert P["actions"].shape == (2, 25, 3) and P["states"].shape == (2, 25, 3)
    # the recorded collusion flags add up to the counts of the same replications
    assert np.array_equal(P["collusive"].sum(axis=1), res.counts["collusive_periods"][:2])
    np.testing.assert_allclose(P["profits"].sum(axis=1), res.profits[:2] * 25, rtol=1e-12)


# ---- punishment phases and price wars ------------------------------------------------------------


def test_finite_reversion_punishment_phases_last_exactly_T():
    """T-period Nash reversion (the scheme's definition): every punishment phase -- periods in which
    some firm's automaton is not collusive -- lasts exactly T periods; a price war also counts the
    period of the tremble that set it off, so wars last at least T + 1 (more when a tremble hits the
    first period back). The baseline predicts T."""
    T = 3
    res = simulate(TRIOPOLY, [S.FinitePunishment(length=T)] * 3, Monitoring(implementation_error=0.01),
                   periods=2000, replications=100, delta=0.95, seed=1)
    pun = res.punishments
    assert pun.ended.sum() > 500
    assert set(np.flatnonzero(pun.ended) + 1) == {T}
    assert res.punishment_length.value == pytest.approx(T, abs=1e-12)
    assert res.baseline["punishment_length"]["value"] == T
    wars = res.wars
    assert np.flatnonzero(wars.ended).min() + 1 == T + 1
    assert res.metrics["war_length"].value > T + 1


def test_trigger_price_wars_are_punishment_phases():
    """Green and Porter (1984): a low price triggers T periods of Nash while every firm colluded in the
    low-price period itself, so price wars and punishment phases both last T."""
    mon = Monitoring(signal="price", noise="lognormal", sigma=0.1)
    res = simulate(TRIOPOLY, [S.TriggerPrice(trigger=50.0, length=2)] * 3, mon, periods=300, replications=100,
                   delta=0.9, seed=4)
    assert res.punishment_length.value == pytest.approx(2.0, abs=1e-12)
    assert res.metrics["war_length"].value == pytest.approx(2.0, abs=1e-12)
    assert res.baseline["punishment_length"]["value"] == 2.0


# ---- homogeneous Bertrand with asymmetric costs ------------------------------------------------


def test_homogeneous_bertrand_nash_is_played_at_its_analytic_payoff():
    """Bertrand with costs c1 = 1 < c2 = 2 and demand 10 - p: the low-cost firm serves the market at
    (just below) the rival's cost, profit (c2 - c1) D(c2) = 8, the rival 0 (Tirole, 1988, "The Theory of
    Industrial Organization", section 5.1, from memory). The profile the engine plays for 'nash' must
    earn that to the order of the effective tick (1e-9 of the choke price), not the tie split 4."""
    from sim import stage_game
    from sim.models.stagecore import effective_tick

    m = Market(LinearDemand(10.0, 1.0), cost=[1.0, 2.0], model="bertrand")
    tol = 10 * effective_tick(m.spec()) * 10.0  # a few ticks times the demand
    res = simulate(m, [S.AlwaysCompete(), S.AlwaysCompete()], periods=10, replications=2, seed=1)
    np.testing.assert_allclose(res.profits[0], [8.0, 0.0], atol=tol)
    np.testing.assert_allclose(res.reference["nash_profit"], [8.0, 0.0], atol=tol)
    np.testing.assert_allclose(stage_game(m).nash.firm_profits, [8.0, 0.0], atol=tol)
    # grim trigger earns the collusive profits, Nash play none of the gain over Nash
    assert res.metrics["profit_gain"].value == pytest.approx(0.0, abs=1e-7)
    grim = simulate(m, [S.GrimTrigger(), S.GrimTrigger()], periods=10, replications=2, seed=1)
    assert grim.metrics["profit_gain"].value == pytest.approx(1.0, abs=1e-12)


# ---- seeds ----------------------------------------------------------------------------------------


def test_generator_states_are_derived_once_per_run(monkeypatch):
    """With small batches (a progress bar) the states of all replications are derived in one call, not
    once per batch from the start of the stream family (which costs 4 * stop words each time); the
    numbers are those of a single batch."""
    import sim.simulation.driver as E

    calls = []
    real = E.stream_states

    def counting(seed, key, start, stop):
        calls.append((start, stop))
        return real(seed, key, start, stop)

    game = prepare_game(TRIOPOLY, [S.GrimTrigger()] * 3, Monitoring(implementation_error=0.05))
    kw = dict(periods=20, replications=60, delta=0.9, seed=3, paths=1)
    whole = run_game(game, **kw)
    monkeypatch.setattr(E, "stream_states", counting)
    batched = run_game(game, batch=7, **kw)
    _same(whole, batched)
    assert sum(stop for _, stop in calls) <= kw["replications"]


def test_normal_shock_never_makes_prices_negative():
    """sigma = 1/3: about 0.135 % of the draws of 1 + sigma Z fall below zero (Phi(-3)); the kernel
    floors those at zero (no demand, price zero), as does its plain-Python twin."""
    mon = Monitoring(noise="normal", sigma=1 / 3, implementation_error=0.01)
    game = prepare_game(TRIOPOLY, [S.GrimTrigger()] * 3, mon)
    kw = dict(periods=200, replications=60, delta=0.9, seed=8, paths=60)
    raw = run_game(game, **kw)
    shock = raw.path_market[:, :, M_THETA]
    assert shock.min() == 0.0 and (shock == 0.0).sum() >= 3
    assert raw.path_market[:, :, 0].min() >= 0.0
    _same(raw, reference_run(game, **kw))
