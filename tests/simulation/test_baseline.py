"""Closed forms of the analytic baseline against direct computation."""

import math

import numpy as np
import pytest

import strategies as S
from sim import InputError, LinearDemand, Market, critical_discount_factors
from sim.simulation.baseline import analytic_baseline, first_breakdown_distribution, trigger_price_chain
from sim.simulation.engine import prepare_game


def test_trigger_price_chain_against_matrix_powers():
    """P(normal at t) from the two-phase chain (normal, war 1..T) of Green and Porter (1984), against
    the t-th power of the transition matrix."""
    beta, T, H = 0.15, 3, 40
    P = np.zeros((T + 1, T + 1))
    P[0, 0], P[0, 1] = 1 - beta, beta
    for k in range(1, T):
        P[k, k + 1] = 1.0
    P[T, 0] = 1.0
    x = np.eye(T + 1)[0]
    expect = []
    for _ in range(H):
        expect.append(x[0])
        x = x @ P
    np.testing.assert_allclose(trigger_price_chain(beta, T, H), expect, rtol=1e-13)
    np.testing.assert_allclose(trigger_price_chain(beta, None, H), (1 - beta) ** np.arange(H), rtol=1e-13)


def test_first_breakdown_distribution_by_enumeration():
    """P(tau > t) and E[tau] against a direct sum of the distribution P(tau = 1) = q_i,
    P(tau = t) = (1 - q_i) r^(t-2) (1 - r) (sim.simulation.baseline notes), and the geometric special case."""
    qi, qp, H = 0.03, 0.05, 3000
    r = (1 - qi) * (1 - qp)
    pmf = np.array([qi] + [(1 - qi) * r ** (t - 2) * (1 - r) for t in range(2, H + 1)])
    d = first_breakdown_distribution(qi, qp, H)
    np.testing.assert_allclose(d["survival"][:100], 1 - np.cumsum(pmf)[:100], rtol=1e-10, atol=1e-15)
    assert d["mean"] == pytest.approx((np.arange(1, H + 1) * pmf).sum(), rel=1e-9)
    assert d["restricted_mean"] == pytest.approx(1 + d["survival"][:-1].sum(), rel=1e-12)
    g = first_breakdown_distribution(0.1, 0.0, 500)
    assert g["mean"] == pytest.approx(10.0, rel=1e-12)  # geometric mean 1 / q


# --------------------------------------------------------------------------------------------------
# Thresholds from the levels the line-up plays
# --------------------------------------------------------------------------------------------------
# Linear Cournot triopoly P = 100 - Q, cost 10, firms colluding at q = 20 each (not the joint-profit 15).
# By hand: collusive profit (100 - 60 - 10) 20 = 600; best reply to rivals at 40 is (90 - 40) / 2 = 25
# at price 35, profit 625; static Nash q = 22.5, profit 22.5^2 = 506.25.

TRIOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
RANDOM = {"periods": 50, "horizon": "random", "continuation": 1.0, "delta": 0.5}


def _baseline(lineup, run=RANDOM):
    return analytic_baseline(prepare_game(TRIOPOLY, lineup), run)


def test_grim_threshold_at_the_collusive_level_played():
    """Friedman (1971): (pi_D - pi_C) / (pi_D - pi_N) = (625 - 600) / (625 - 506.25) = 4/19, the same as
    the thresholds of the agreement 'given' with those actions; delta 0.5 clears it (the joint-profit
    threshold 16/28 would not)."""
    b = _baseline([S.GrimTrigger(collude=20.0)] * 3)
    (row,) = b["thresholds"]
    assert row["market"] == pytest.approx(4 / 19, rel=1e-12)
    ref = critical_discount_factors(TRIOPOLY, agreement="given", actions=[20.0, 20.0, 20.0])
    assert row["market"] == pytest.approx(ref.grim.market, rel=1e-12)
    assert row["clears"] is True
    assert row["collusive_profile"] == [20.0, 20.0, 20.0]


def test_finite_reversion_threshold_at_the_collusive_level_played():
    """T-period Nash reversion (sim.theory.thresholds notes): delta + delta^2 = K with
    K = (625 - 600) / (600 - 506.25) = 4/15, so delta = (sqrt(1 + 4K) - 1) / 2."""
    b = _baseline([S.FinitePunishment(length=2, collude=20.0)] * 3)
    K = 25 / 93.75
    assert b["thresholds"][0]["market"] == pytest.approx((math.sqrt(1 + 4 * K) - 1) / 2, rel=1e-10)


def test_stick_and_carrot_threshold_at_the_levels_played():
    """Abreu (1986) two-phase scheme, both constraints by hand with punishment q = 40 each: Q = 120 prices
    at zero, punishment profit -400; best reply to rivals at 80 is q = 5 at price 15, profit 25.
    delta >= max((625 - 600) / (600 + 400), (25 + 400) / (600 + 400)) = 0.425."""
    b = _baseline([S.StickAndCarrot(collude=20.0, punish=40.0)] * 3)
    assert b["thresholds"][0]["market"] == pytest.approx(0.425, rel=1e-12)
    assert b["thresholds"][0]["punishment_profile"] == [40.0, 40.0, 40.0]


def test_default_levels_give_the_agreement_thresholds():
    """With the default levels the rows are the thresholds of the joint-profit agreement: grim
    (n + 1)^2 / (n^2 + 6n + 1) = 16/28 for n = 3 (Friedman, 1971, linear Cournot closed form), and
    stick and carrot as sim.theory.thresholds.stick_and_carrot finds it (Abreu, 1986)."""
    from sim.theory.thresholds import stick_and_carrot

    assert _baseline([S.GrimTrigger()] * 3)["thresholds"][0]["market"] == pytest.approx(16 / 28, rel=1e-12)
    sc = stick_and_carrot(TRIOPOLY)
    np.testing.assert_allclose(_baseline([S.StickAndCarrot()] * 3)["thresholds"][0]["per_firm"], sc.per_firm,
                               rtol=1e-12)


def test_seats_that_disagree_on_collusion_get_no_threshold():
    """Firm 1 colludes at 20, the others expect 15 from it: collusion breaks down in the first period
    without any deviation, so no closed form applies; a note says why."""
    b = _baseline([S.GrimTrigger(collude=20.0), S.GrimTrigger(), S.GrimTrigger()])
    assert b["thresholds"] == []
    assert any("disagree" in x for x in b["notes"])


def test_grim_trigger_to_a_level_that_is_not_nash_is_no_equilibrium():
    """Reverting forever to q = 30 each (not a static Nash equilibrium: the best reply to 60 is 15) lets a
    firm gain by deviating from the punishment, which nobody watches: not subgame perfect at any
    discount factor (nan), with a note."""
    b = _baseline([S.GrimTrigger(punish=30.0)] * 3)
    assert math.isnan(b["thresholds"][0]["market"]) and b["thresholds"][0]["clears"] is False
    assert any("goes unpunished" in x for x in b["notes"])


def test_fixed_horizon_thresholds_are_labelled_the_infinite_horizon_benchmark():
    """With a fixed horizon and a unique stage Nash equilibrium only Nash play is subgame perfect
    (backward induction; common knowledge of the theory, no source needed beyond any game-theory
    text): the rows say they are the infinite-horizon benchmark and a note says so."""
    fixed = _baseline([S.GrimTrigger()] * 3, {**RANDOM, "horizon": "fixed"})
    assert fixed["thresholds"][0]["benchmark"] == "infinite horizon"
    assert any("fixed horizon of 50 periods" in x for x in fixed["notes"])
    assert not _baseline([S.GrimTrigger()] * 3)["notes"]


def test_unknown_strategy_in_a_lineup_still_raises():
    with pytest.raises(InputError):
        _baseline([S.GrimTrigger(collude="cheapest")] * 3)


def test_mixed_line_ups_say_what_the_rows_assume():
    """A seat that never punishes, or seats with different schemes: the closed forms assume a common
    scheme, and a note says each row is the threshold if every firm punished with it."""
    b = _baseline([S.GrimTrigger(), S.GrimTrigger(), S.AlwaysCollude()])
    assert b["thresholds"][0]["seats"] == [1, 2]
    assert any("firm 3 (always_collude) does not punish" in x for x in b["notes"])
    b = _baseline([S.GrimTrigger(), S.FinitePunishment(length=2), S.StickAndCarrot()])
    assert [r["scheme"] for r in b["thresholds"]] == ["Nash reversion, T=2", "grim trigger", "stick and carrot"]
    assert any("different schemes" in x for x in b["notes"])
    assert not _baseline([S.Opportunist(), S.GrimTrigger(), S.GrimTrigger()])["notes"]
