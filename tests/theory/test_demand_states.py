"""Collusion with moving demand: observed demand states (iid, Markov, deterministic cycles) and growth,
against closed forms, brute-force expectations and fixed-seed simulations.

Notation: Pi_s is the joint monopoly profit in state s. In homogeneous Bertrand with n firms a firm
earns Pi_s / n by colluding, Pi_s by undercutting (it takes the whole market) and 0 at static Nash
(Tirole, 1988, The Theory of Industrial Organization, ch. 6). Scaling the size of demand
Q = theta (a - p) scales Pi_s by theta and leaves the monopoly price unchanged.
"""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim import InputError, LinearDemand, Market
from sim.core.rng import ReferenceStream, stream_states
from sim.theory.demand_states import (
    DemandStates,
    StateThresholds,
    markets_by_state,
    state_thresholds,
    state_values,
    stationary_distribution,
)
from sim.theory.draws import draw_state_path
from sim.theory.stage_profits import StageProfits
from sim.theory.state_path import StatePath, best_state_path, cyclicality


def bertrand(n=2):
    return Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=n, model="bertrand")


def sized(n, sizes):
    """Bertrand markets whose demand is scaled by each size (slope 1/size): Pi_s = 16 size."""
    return markets_by_state(bertrand(n), "slope", [1.0 / s for s in sizes])


# --------------------------------------------------------------------------------------------------
# Rotemberg and Saloner: iid states
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n,w,sizes", [(2, [0.5, 0.5], [1.0, 2.0]), (3, [0.3, 0.5, 0.2], [0.5, 1.0, 2.5]),
                                       (2, [0.9, 0.1], [1.0, 4.0])])
def test_rotemberg_saloner_threshold_for_full_collusion(n, w, sizes):
    """Rotemberg and Saloner (1986, AER 76(3)): with iid states the continuation value does not depend
    on today's state, so in state s a firm keeps the agreement when
        (n - 1) Pi_s / n <= delta / (1 - delta) E[Pi] / n,
    i.e. delta >= (n - 1) Pi_s / ((n - 1) Pi_s + E[Pi]); full collusion in every state needs the
    largest, in the state of highest demand (derived from the grim-trigger condition)."""
    Pi = 16.0 * np.array(sizes)
    E = float(np.dot(w, Pi))
    per_state = (n - 1) * Pi / ((n - 1) * Pi + E)
    t = state_thresholds(DemandStates.iid(w), sized(n, sizes))
    assert t.per_state == pytest.approx(per_state, rel=1e-10)
    assert t.market == pytest.approx(per_state.max(), rel=1e-10)
    assert t.binding_state == int(np.argmax(Pi))
    back = StateThresholds.from_dict(json.loads(json.dumps(t.to_dict())))
    assert np.allclose(back.per_state_firm, t.per_state_firm) and back.labels == t.labels


@pytest.mark.parametrize("delta", [0.51, 0.54, 0.56])
def test_rotemberg_saloner_capped_boom_profit_below_the_threshold(delta):
    """Below the threshold, Rotemberg and Saloner's firms keep the monopoly price in the low state and
    cut the boom price until the boom constraint binds. With n firms, probabilities w_L, w_H and the
    capped boom profit X:
        (n - 1) X = delta / (1 - delta) (w_L Pi_L + w_H X)
        =>  X = delta w_L Pi_L / ((n - 1)(1 - delta) - delta w_H),
    valid while the low state's constraint (n - 1)(1 - delta) Pi_L <= delta (w_L Pi_L + w_H X) holds
    (derived from the condition of the previous test). Duopoly, w = (1/2, 1/2), Pi_L = 16, Pi_H = 32:
    the threshold is 4/7 and the formula applies for delta in [1/2, 4/7). The boom price is the root
    below the monopoly price of 2 (p - 2)(10 - p) = X: prices are counter-cyclical."""
    wL, wH, PiL = 0.5, 0.5, 16.0
    X = delta * wL * PiL / ((1 - delta) - delta * wH)
    path = best_state_path(DemandStates.iid([wL, wH], labels=["low", "high"]), sized(2, [1.0, 2.0]), delta)
    assert path.weights[0] == 1.0 and path.weights[1] < 1.0
    # the deviation is one price step (1e-9 of the choke price) below the path price: relative 1e-8
    assert path.profits[1].sum() == pytest.approx(X, rel=1e-6)
    p_boom = 6.0 - math.sqrt(16.0 - X / 2.0)
    assert path.prices[1] == pytest.approx(p_boom, rel=1e-6)
    assert path.prices[0] == pytest.approx(6.0)
    assert path.price_cyclicality == "countercyclical" and path.collusion_cyclicality == "countercyclical"
    assert np.all(path.slack >= -1e-9)
    back = StatePath.from_dict(json.loads(json.dumps(path.to_dict())))
    assert np.array_equal(back.weights, path.weights) and back.price_cyclicality == path.price_cyclicality


def test_full_collusion_above_the_threshold_and_nothing_below_one_half():
    """Above 4/7 every state keeps the agreement (weights one, prices acyclical since the monopoly price
    is the same in both states); a Bertrand duopoly cannot sustain any price above cost when
    delta < 1/2 whatever the state, since then even equal profits in both states fail
    (n - 1) X <= delta / (1 - delta) X."""
    states, markets = DemandStates.iid([0.5, 0.5]), sized(2, [1.0, 2.0])
    full = best_state_path(states, markets, 0.6)
    assert full.full_collusion and np.all(full.weights == 1.0) and full.price_cyclicality == "acyclical"
    none = best_state_path(states, markets, 0.45)
    assert np.all(none.profits.sum(axis=1) < 1e-5)


# --------------------------------------------------------------------------------------------------
# Growth
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [2, 3, 6])
@pytest.mark.parametrize("g", [0.0, 0.05, 0.3, -0.1, -0.6])
def test_growth_turns_delta_into_delta_times_one_plus_g(n, g):
    """A market whose size grows at rate g scales every profit by (1 + g) per period, so the Bertrand
    condition 1 - 1/n <= delta becomes 1 - 1/n <= delta (1 + g) (Ivaldi, Jullien, Rey, Seabright and
    Tirole, 2003, "The economics of tacit collusion", IDEI report, section on demand growth -- from
    memory): delta* = (1 - 1/n) / (1 + g), unsustainable when that is not below one."""
    t = state_thresholds(DemandStates.iid([1.0], growth=g), [bertrand(n)])
    expected = (1 - 1 / n) / (1 + g)
    if expected >= 1:
        assert math.isnan(t.market)
    else:
        assert t.market == pytest.approx(expected, rel=1e-10)
        assert t.effective == pytest.approx(1 - 1 / n, rel=1e-10)


def test_growth_with_states_and_the_discount_limit():
    """With iid states and growth, the Rotemberg-Saloner threshold on the effective discount factor
    is unchanged: delta* = 4/7 / (1 + g) for the duopoly of the capped-profit test. Discounted values
    need delta (1 + g) < 1."""
    t = state_thresholds(DemandStates.iid([0.5, 0.5], growth=0.1), sized(2, [1.0, 2.0]))
    assert t.market == pytest.approx(4 / 7 / 1.1, rel=1e-10)
    with pytest.raises(InputError) as e:
        best_state_path(DemandStates.iid([0.5, 0.5], growth=0.2), sized(2, [1.0, 2.0]), 0.9)
    assert e.value.key == "delta" and "\n" not in str(e.value)


# --------------------------------------------------------------------------------------------------
# Markov chains and cycles
# --------------------------------------------------------------------------------------------------

P3 = np.array([[0.7, 0.2, 0.1], [0.25, 0.5, 0.25], [0.1, 0.3, 0.6]])


def _truncated_values(P, pi, beta, K=3000):
    """Brute force: sum_{t < K} beta^t P^t pi. The omitted tail is at most beta^K max|pi| / (1 - beta)."""
    out = np.zeros_like(pi, dtype=float)
    Pt = np.eye(P.shape[0])
    for t in range(K):
        out += beta**t * (Pt @ pi)
        Pt = Pt @ P
    return out


def test_markov_values_against_a_truncated_expectation_and_a_simulation():
    """The linear system V = (I - beta P)^{-1} pi against (i) the truncated series sum beta^t P^t pi
    (3,000 terms; tail below 1e-100, so agreement to rounding, 1e-12 relative) and (ii) the mean
    discounted profit over 4,000 simulated paths of 300 periods from state 1 (0.9^300 ~ 2e-14 of
    truncation), within 3 SE (a fixed-seed check that fails with probability about 0.3% if the
    draws were wrong by chance). Growth 5% with delta 0.857 gives beta = 0.9."""
    states = DemandStates.markov(P3, growth=0.05)
    pi = np.array([[1.0, 2.0], [3.0, 2.5], [6.0, 1.0]])
    delta = 0.9 / 1.05
    V = state_values(states, pi, delta)
    assert V == pytest.approx(_truncated_values(P3, pi, 0.9), rel=1e-12)
    disc = 0.9 ** np.arange(300)
    sims = []
    for s in np.random.SeedSequence(99).spawn(4000):
        path = draw_state_path(np.random.default_rng(s), states, 300, initial_state=0)
        sims.append(disc @ pi[path, 0])
    sims = np.array(sims)
    assert abs(sims.mean() - V[0, 0]) < 3 * sims.std(ddof=1) / math.sqrt(sims.size)


def test_markov_threshold_makes_the_binding_constraint_hold_with_equality():
    """Kandori (1991) and Bagwell and Staiger (1997) -- from memory: with persistent states the
    expected loss from cheating depends on today's state. At each state's threshold the deviation
    gain equals sum_{t >= 1} beta^t (P^t (pi_C - pi_N))(s), computed here by brute force; linear
    Cournot duopolies whose intercept moves with the state."""
    markets = markets_by_state(Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=2), "intercept", [8.0, 10.0, 13.0])
    t = state_thresholds(DemandStates.markov(P3), markets)
    A = np.array([6.0, 8.0, 11.0])
    pn, pc, pd = A**2 / 9, A**2 / 8, 9 * A**2 / 64
    for s in range(3):
        b = t.per_state[s]
        loss = _truncated_values(P3, pc - pn, b) - (pc - pn)  # from the next period on
        assert loss[s] == pytest.approx(pd[s] - pc[s], rel=1e-9)
    assert t.binding_state == 2
    # identical rows are iid: the Markov computation reproduces Rotemberg and Saloner
    w = np.array([0.2, 0.5, 0.3])
    a = state_thresholds(DemandStates.markov(np.tile(w, (3, 1))), markets)
    b = state_thresholds(DemandStates.iid(w), markets)
    assert a.per_state == pytest.approx(b.per_state, rel=1e-12)


def test_deterministic_cycle_peak_is_hardest():
    """Haltiwanger and Harrington (1991, RAND 22(1)): with demand alternating high and low, the
    constraint is hardest where demand is about to fall. Bertrand duopoly, two-period cycle:
    at the peak Pi_H (1 - beta^2) <= beta Pi_L + beta^2 Pi_H, so 2 Pi_H beta^2 + Pi_L beta - Pi_H = 0;
    at the trough 2 Pi_L beta^2 + Pi_H beta - Pi_L = 0 (derived by summing the alternating streams)."""
    PiL, PiH = 16.0, 32.0
    t = state_thresholds(DemandStates.cycle(2, labels=["trough", "peak"]), sized(2, [1.0, 2.0]))
    peak = (-PiL + math.sqrt(PiL**2 + 8 * PiH**2)) / (4 * PiH)
    trough = (-PiH + math.sqrt(PiH**2 + 8 * PiL**2)) / (4 * PiL)
    assert t.per_state == pytest.approx([trough, peak], rel=1e-10)
    assert t.labels == ("trough", "peak") and t.binding_state == 1


# --------------------------------------------------------------------------------------------------
# Stationary distributions and simulated state frequencies
# --------------------------------------------------------------------------------------------------


def test_stationary_distribution_closed_form_and_eigenvector():
    """Two states with switching probabilities a (1 -> 2) and b (2 -> 1): w = (b, a) / (a + b)
    (Norris, 1997, Markov Chains, section 1.7 -- from memory); three states against numpy's
    eigenvector of P' for the eigenvalue 1."""
    a, b = 0.3, 0.1
    assert stationary_distribution([[1 - a, a], [b, 1 - b]]) == pytest.approx([b / (a + b), a / (a + b)], rel=1e-12)
    vals, vecs = np.linalg.eig(P3.T)
    v = np.real(vecs[:, np.argmin(np.abs(vals - 1))])
    assert stationary_distribution(P3) == pytest.approx(v / v.sum(), rel=1e-10)
    assert DemandStates.cycle(4).probabilities == pytest.approx([0.25] * 4)


def test_iid_state_frequencies_within_three_standard_errors():
    """Each state's frequency over 20,000 iid draws is a binomial proportion with SE sqrt(w (1 - w) / N);
    3 SE (fixed seed; see the value test for the tolerance)."""
    w = np.array([0.15, 0.6, 0.25])
    path = draw_state_path(np.random.default_rng(20261201), DemandStates.iid(w), 20_000)
    freq = np.bincount(path, minlength=3) / path.size
    assert np.all(np.abs(freq - w) < 3 * np.sqrt(w * (1 - w) / path.size))


def test_markov_state_frequencies_match_the_stationary_distribution():
    """500 independent chains of 200 periods started from the stationary distribution: each chain's
    frequency of a state has expectation exactly its stationary probability, so the mean over chains is
    within 3 SE (SE from the 500 chains, which are independent though periods within a chain are not)."""
    states = DemandStates.markov(P3)
    freqs = np.array([np.bincount(draw_state_path(np.random.default_rng(s), states, 200), minlength=3) / 200
                      for s in np.random.SeedSequence(5).spawn(500)])
    se = freqs.std(axis=0, ddof=1) / math.sqrt(len(freqs))
    assert np.all(np.abs(freqs.mean(axis=0) - stationary_distribution(P3)) < 3 * se)


def test_state_draws_follow_the_package_stream_and_cycles_draw_nothing():
    """Same seed, same path on the package's generator twin: one next_double() per period (the first
    from the initial distribution), the state the first whose cumulative probability exceeds it."""
    state = stream_states(4, (1,), 0, 1)[0]
    states = DemandStates.markov(P3, initial=[0.2, 0.3, 0.5])
    path = draw_state_path(ReferenceStream(state), states, 50)
    twin = ReferenceStream(state)
    expected = [int(np.searchsorted(np.cumsum(states.initial), twin.next_double(), side="right"))]
    for _ in range(49):
        expected.append(int(np.searchsorted(np.cumsum(P3[expected[-1]]), twin.next_double(), side="right")))
    assert path.tolist() == expected
    assert draw_state_path(None, DemandStates.cycle(3), 7, initial_state=2).tolist() == [2, 0, 1, 2, 0, 1, 2]


# --------------------------------------------------------------------------------------------------
# Properties
# --------------------------------------------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(st.floats(0.05, 0.95), st.floats(1.0, 5.0), st.floats(1.0, 5.0), st.floats(-0.3, 0.3), st.floats(-0.3, 0.3))
def test_thresholds_rise_with_the_boom_and_fall_with_growth(wH, r1, r2, g1, g2):
    """Rotemberg and Saloner: a bigger boom (relative to the low state) makes full collusion harder;
    faster growth makes it easier (delta* = beta* / (1 + g) with beta* independent of g). Profits are
    given directly as StageProfits (Bertrand duopoly, Pi_L = 1)."""
    def thr(ratio, g):
        sps = [StageProfits([0.5, 0.5], [1.0, 1.0], [0.0, 0.0]),
               StageProfits([ratio / 2, ratio / 2], [ratio, ratio], [0.0, 0.0])]
        x = state_thresholds(DemandStates.iid([1 - wH, wH], growth=g), sps).market
        return math.inf if math.isnan(x) else x
    lo_r, hi_r = sorted((r1, r2))
    lo_g, hi_g = sorted((g1, g2))
    assert thr(hi_r, lo_g) >= thr(lo_r, lo_g) - 1e-12
    assert thr(hi_r, hi_g) <= thr(hi_r, lo_g) + 1e-12


@settings(max_examples=8, deadline=None)
@given(st.floats(0.5, 0.6), st.floats(0.5, 0.6))
def test_more_patience_never_means_less_collusion(d1, d2):
    """The largest sustainable weights rise with delta (the expected loss from cheating does)."""
    states, markets = DemandStates.iid([0.5, 0.5]), sized(2, [1.0, 2.0])
    lo, hi = sorted((d1, d2))
    assert np.all(best_state_path(states, markets, hi).weights >= best_state_path(states, markets, lo).weights - 1e-9)


def test_cyclicality_labels():
    assert cyclicality([1, 2, 3], [5, 6, 7], [1 / 3] * 3) == "procyclical"
    assert cyclicality([1, 2, 3], [7, 6, 5], [1 / 3] * 3) == "countercyclical"
    assert cyclicality([1, 2, 3], [6, 6, 6], [1 / 3] * 3) == "acyclical"


# --------------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("build,key,fragment", [
    (lambda: DemandStates.iid([0.5, 0.4]), "demand_states.probabilities", "sum to one"),
    (lambda: DemandStates.iid([1.2, -0.2]), "demand_states.probabilities", "[0, 1]"),
    (lambda: DemandStates.markov([[0.5, 0.5], [0.3, 0.6]]), "demand_states.transition", "row 2"),
    (lambda: DemandStates.markov([[0.5, 0.5, 0.0], [0.3, 0.7, 0.0]]), "demand_states.transition", "square"),
    (lambda: DemandStates.markov([[1.1, -0.1], [0.5, 0.5]]), "demand_states.transition", "row 1"),
    (lambda: DemandStates.markov(P3, initial=[0.5, 0.5, 0.5]), "demand_states.initial", "sum to one"),
    (lambda: DemandStates.iid([0.5, 0.5], growth=-1.0), "demand_states.growth", "(-1, 1)"),
    (lambda: DemandStates.cycle(1), "demand_states.n_states", "[2,"),
    (lambda: DemandStates.from_dict({"kind": "iid", "probabilities": [0.3, 0.3]}, "scenario.demand"),
     "scenario.demand.probabilities", "sum to one"),
    (lambda: DemandStates.from_dict({"kind": "iid", "transition": [[1.0]]}), "demand_states.transition",
     "unknown key"),
    (lambda: stationary_distribution(np.eye(2)), "demand_states.transition", "closed class"),
    (lambda: state_thresholds(DemandStates.iid([0.5, 0.5]), [bertrand()]), "demand_states.markets", "one market"),
    (lambda: state_thresholds(DemandStates.iid([0.5, 0.5]), [bertrand(2), bertrand(3)]), "demand_states.markets[1]",
     "same firms"),
    (lambda: markets_by_state(bertrand(), "elasticity", [1, 2]), "demand_states.parameter", "'elasticity'"),
    (lambda: markets_by_state(bertrand(), "intercept", [10.0, -1.0]), "demand_states.markets[1].intercept", "-1.0"),
])
def test_bad_state_input_is_one_line_naming_the_key(build, key, fragment):
    with pytest.raises(InputError) as e:
        build()
    assert e.value.key == key and fragment in str(e.value) and "\n" not in str(e.value)


def test_demand_states_round_trip():
    for s in (DemandStates.iid([0.2, 0.8], growth=0.02, labels=["off", "peak"]), DemandStates.markov(P3),
              DemandStates.cycle(4, growth=-0.01)):
        back = DemandStates.from_dict(json.loads(json.dumps(s.to_dict())))
        assert back.kind == s.kind and np.allclose(back.transition, s.transition)
        assert np.allclose(back.initial, s.initial) and back.growth == s.growth and back.labels == s.labels
