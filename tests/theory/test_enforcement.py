"""Collusion under antitrust enforcement: the incentive constraint with detection and fines against its
closed forms, the deterrence frontier, the variants, and the reference detection draws.

The default convention (see :mod:`sim.theory.enforcement`): detection with probability rho in every
colluding period, a fine F per firm in the period of detection, static Nash forever after; the deviator
is not exposed in its deviation period. With c = pi_C - pi_N and d = pi_D - pi_N the value of collusion
over static Nash solves W = c - rho F + delta (1 - rho) W, and the firm keeps the agreement when
W >= d, i.e.

    delta >= (pi_D - pi_C + rho F) / ((1 - rho)(pi_D - pi_N)).                        (*)

At rho = 0 this is Friedman's (1971) grim-trigger threshold. The expected fine and a per-period
probability that the cartel ends enter the constraint in the same way in Motta and Polo (2003,
"Leniency programs and cartel prosecution", IJIO 21(3)) -- from memory.
"""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim import DifferentiatedDemand, InputError, LinearDemand, LogitDemand, Market
from sim.core.rng import ReferenceStream, stream_states
from sim.theory.deterrence import (
    DeterrenceFrontier,
    EnforcementAnalysis,
    deterrence_frontier,
    enforced_partial_collusion,
    enforcement_analysis,
)
from sim.theory.draws import draw_detection, simulate_detections
from sim.theory.enforcement import (
    Enforcement,
    EnforcementTerms,
    PriceDetection,
    deterrence_fine,
    discounted_fines,
    enforcement_terms,
    enforcement_threshold,
)
from sim.theory.equilibrium import stage_game
from sim.theory.stage_profits import StageProfits
from sim.theory.thresholds import grim_threshold


def bertrand(n, a=10.0, c=2.0):
    return Market(LinearDemand(a, 1.0), cost=c, n_firms=n, model="bertrand")


def closed_form(pc, pd, pn, rho, F):
    """(*) of the module docstring, with nan for 'not below one'."""
    t = max(0.0, (pd - pc + rho * F) / ((1 - rho) * (pd - pn)))
    return t if t < 1 else math.nan


# --------------------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [2, 3, 5])
@pytest.mark.parametrize("rho,F", [(0.0, 0.0), (0.05, 4.0), (0.2, 1.0), (0.1, 30.0)])
def test_homogeneous_bertrand_threshold_matches_closed_form(n, rho, F):
    """Homogeneous Bertrand with n firms, demand Q = a - p, cost c: the monopoly profit
    Pi = (a - c)^2 / 4 is shared equally, a deviator undercuts and takes all of it, static Nash earns 0
    (Tirole, 1988, The Theory of Industrial Organization, ch. 6). Substituting pi_C = Pi / n,
    pi_D = Pi, pi_N = 0 in (*):

        delta* = ((n - 1) / n + rho F / Pi) / (1 - rho).

    At rho = 0 this is 1 - 1/n. The undercut is one price step below the monopoly price (1e-9 of the
    choke price), which changes the deviation profit by a second-order amount only."""
    Pi = (10.0 - 2.0) ** 2 / 4
    expected = ((n - 1) / n + rho * F / Pi) / (1 - rho)
    got = enforcement_threshold(bertrand(n), Enforcement(detection=rho, fine=F))
    if expected >= 1:
        assert np.all(np.isnan(got))
    else:
        assert got == pytest.approx(np.full(n, expected), rel=1e-10)


@pytest.mark.parametrize("n,a,b,c", [(2, 10.0, 1.0, 2.0), (3, 100.0, 2.0, 10.0), (4, 5.0, 0.5, 1.0)])
@pytest.mark.parametrize("rho,F", [(0.0, 0.0), (0.1, 0.5), (0.3, 0.05)])
def test_linear_cournot_threshold_matches_closed_form(n, a, b, c, rho, F):
    """Linear Cournot P = a - b Q, cost c, A = a - c (Vives, 1999, Oligopoly Pricing, ch. 9 -- from
    memory): static Nash pi_N = A^2 / (b (n+1)^2); the joint maximum splits the monopoly output
    A / (2b) equally, pi_C = A^2 / (4 b n); a deviator best-responds to (n - 1) A / (2 b n) with
    q = A (n + 1) / (4 b n), earning pi_D = A^2 (n + 1)^2 / (16 b n^2). The threshold is (*) with
    these profits (F is scaled by A^2 / b so that it matters at every size)."""
    A = a - c
    pn, pc, pd = A**2 / (b * (n + 1) ** 2), A**2 / (4 * b * n), A**2 * (n + 1) ** 2 / (16 * b * n**2)
    F = F * A**2 / b
    m = Market(LinearDemand(a, b), cost=c, n_firms=n)
    got = enforcement_threshold(m, Enforcement(detection=rho, fine=F))
    exp = closed_form(pc, pd, pn, rho, F)
    if math.isnan(exp):
        assert np.all(np.isnan(got))
    else:
        assert got == pytest.approx(np.full(n, exp), rel=1e-9)


@pytest.mark.parametrize("market", [
    Market(LinearDemand(10, 1), cost=[1.0, 2.0, 3.0]),
    Market(DifferentiatedDemand([10, 9], 1.0, 0.6), cost=[1.0, 1.5], model="bertrand"),
    Market(LogitDemand([2.0, 2.2], 0.0, 0.25), cost=[1.0, 1.1], model="bertrand"),
    bertrand(4),
])
def test_zero_detection_is_plain_grim_trigger(market):
    """rho = 0: no detection, so the fine never bites and the constraint is grim trigger's
    (Friedman, 1971), computed independently by sim.theory.thresholds.grim_threshold."""
    stg = stage_game(market)
    ref = grim_threshold(stg.collusive.firm_profits, stg.deviation_profits, stg.nash.firm_profits)
    for F in (0.0, 7.0, 1e6):
        got = enforcement_threshold(stg, Enforcement(detection=0.0, fine=F))
        assert got == pytest.approx(ref, rel=1e-12, nan_ok=True)


def test_fine_bases_scale_the_fine_by_profit_or_gain():
    """A fine proportional to the period's collusive profit (rate phi) is phi pi_C; to the gain over
    Nash, phi (pi_C - pi_N). Substituting in (*) for a linear Cournot duopoly (a = 10, c = 2, b = 1:
    pi_C = 8, pi_N = 64/9, pi_D = 9) -- closed forms as in the previous test."""
    pn, pc, pd = 64 / 9, 8.0, 9.0
    m = Market(LinearDemand(10, 1), cost=2.0, n_firms=2)
    for basis, F in (("profit", 0.3 * pc), ("gain", 0.3 * (pc - pn))):
        got = enforcement_threshold(m, Enforcement(detection=0.1, fine=0.3, fine_basis=basis))
        assert got == pytest.approx(np.full(2, closed_form(pc, pd, pn, 0.1, F)), rel=1e-10)


def _cartel_value(pc, pn, rho, F, T, delta):
    """Value of colluding from a colluding period, by solving the explicit state machine: state 0
    colludes (payoff pc - rho F; detected with probability rho), states k = T..1 compete with k
    periods left (payoff pn), and state 1 returns to 0. A linear system V = r + delta Q V."""
    n = T + 1
    Q = np.zeros((n, n))
    r = np.full(n, pn)
    r[0] = pc - rho * F
    Q[0, 0], Q[0, T] = 1 - rho, rho
    for k in range(1, T + 1):
        Q[k, k - 1] = 1.0
    return np.linalg.solve(np.eye(n) - delta * Q, r)[0]


@pytest.mark.parametrize("T", [1, 3, 12])
def test_competition_for_T_periods_then_collusion_resumes(T):
    """Variant: after a detection the firms compete for T periods, then collude again. The threshold
    must make the value of colluding, computed here independently from the explicit state machine of
    the cartel (colluding, or k periods of competition left), equal to the deviation's
    pi_D + delta pi_N / (1 - delta); a shorter punishment after detection lowers the threshold, and
    a long one approaches (*)."""
    pn, pc, pd = 64 / 9, 8.0, 9.0
    sp = StageProfits([pc, pc], [pd, pd], [pn, pn])
    rho, F = 0.2, 0.5
    t = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, after_detection=T))[0]
    dev = pd + t * pn / (1 - t)
    assert _cartel_value(pc, pn, rho, F, T, t) == pytest.approx(dev, rel=1e-11)
    for x, holds in ((t + 1e-4, True), (t - 1e-4, False)):
        assert (_cartel_value(pc, pn, rho, F, T, x) >= pd + x * pn / (1 - x)) == holds
    forever = closed_form(pc, pd, pn, rho, F)
    assert t < forever
    long = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, after_detection=400))[0]
    assert long == pytest.approx(forever, rel=1e-9)


def test_leniency_can_stabilise_or_destabilise():
    """Leniency after Motta and Polo (2003) -- from memory: an investigation (rate rho) convicts with
    probability p unless a firm reports; a reporting firm pays s F. Without a programme (or s >= p)
    collusion ends with probability rho p and the expected fine is rho p F:
        delta* = (d - c + rho p F) / (d (1 - rho p)).
    With s < p every firm reports when investigated: collusion ends with probability rho and the
    expected fine is rho s F:
        delta* = (d - c + rho s F) / (d (1 - rho)).
    Leniency thus shortens the cartel (destabilising) and cuts the fine (stabilising): with a small
    fine the first effect wins, with a large one the second, as Motta and Polo discuss."""
    pc, pd, pn = 8.0, 16.0, 0.0
    sp = StageProfits([pc, pc], [pd, pd], [pn, pn])
    rho, p, s = 0.2, 0.5, 0.0
    d, c = pd - pn, pc - pn
    for F in (0.0, 2.0, 20.0):
        without = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, proof=p))[0]
        weak = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, proof=p, leniency=0.6))[0]
        lenient = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, proof=p, leniency=s))[0]
        assert without == pytest.approx((d - c + rho * p * F) / (d * (1 - rho * p)), rel=1e-12)
        assert weak == pytest.approx(without, rel=1e-12)  # s >= p: nobody reports
        assert lenient == pytest.approx((d - c + rho * s * F) / (d * (1 - rho)), rel=1e-12)
    assert enforcement_threshold(sp, Enforcement(detection=rho, fine=0.0, proof=p, leniency=s))[0] > \
        enforcement_threshold(sp, Enforcement(detection=rho, fine=0.0, proof=p))[0]
    assert enforcement_threshold(sp, Enforcement(detection=rho, fine=20.0, proof=p, leniency=s))[0] < \
        enforcement_threshold(sp, Enforcement(detection=rho, fine=20.0, proof=p))[0]


def test_exposed_deviator_pays_the_same_expected_fine():
    """With the deviator exposed to its deviation period's investigation, the fine enters both sides:
    c - rho p F >= (d - rho p F)(1 - delta (1 - rho p)), so delta* = (d - c) / ((d - rho p F)(1 - rho p))
    (derived from (*) by subtracting the deviator's expected fine from d). With leniency s < p the
    deviator's expected fine is rho s F and collusion ends with probability rho."""
    pc, pd, pn = 8.0, 16.0, 0.0
    sp = StageProfits([pc, pc], [pd, pd], [pn, pn])
    rho, p, F = 0.1, 0.8, 20.0
    got = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, proof=p, deviator_exposed=True))[0]
    assert got == pytest.approx((pd - pc) / ((pd - rho * p * F) * (1 - rho * p)), rel=1e-12)
    s = 0.25
    got = enforcement_threshold(sp, Enforcement(detection=rho, fine=F, proof=p, leniency=s, deviator_exposed=True))
    assert got[0] == pytest.approx((pd - rho * s * F - pc + rho * s * F) / ((pd - rho * s * F) * (1 - rho)), rel=1e-12)


def test_detection_rising_with_the_price_lowers_the_cartel_price():
    """Detection rate rho(p) = 0.1 (p - 2) (a table from (2, 0) to (6, 0.4)), no fine, Bertrand
    duopoly Q = 10 - p, cost 2. On the path of common prices p the constraint (*) with F = 0 reads
    pi/2 >= pi (1 - delta (1 - rho(p))), i.e. rho(p) <= 1 - 1/(2 delta): the cartel keeps the
    highest price with p <= 2 + 10 (1 - 1/(2 delta)) (derived by hand; the mechanism of Block, Nold
    and Sidak, 1981, JPE -- from memory). With delta = 0.6: p = 11/3."""
    table = PriceDetection([2.0, 6.0], [0.0, 0.4])
    r = enforced_partial_collusion(bertrand(2), Enforcement(detection=table, fine=0.0), 0.6)
    assert r.price == pytest.approx(2 + 10 * (1 - 1 / 1.2), rel=1e-6)
    assert r.detection_rate == pytest.approx(1 - 1 / 1.2, rel=1e-5)
    # at the monopoly price 6 the cartel is detected at 0.4 a period: (*) gives 8 / (0.6 * 16) > 0.6
    full = enforcement_threshold(bertrand(2), Enforcement(detection=table))
    assert full == pytest.approx([8 / (0.6 * 16)] * 2, rel=1e-10)


# --------------------------------------------------------------------------------------------------
# Deterrence frontier and expected fines
# --------------------------------------------------------------------------------------------------


def test_deterrence_frontier_against_closed_form():
    """Solving (*) for F at a given delta: collusion is sustainable iff
    F <= F* = (delta (1 - rho)(pi_D - pi_N) - (pi_D - pi_C)) / rho,
    0 when that is negative (no fine needed) and unbounded at rho = 0 (no fine deters without
    detection). Bertrand duopoly: pi_C = 8, pi_D = 16, pi_N = 0."""
    delta = 0.7
    rates = np.array([0.0, 0.05, 0.1, 0.2, 0.3])
    fines = np.linspace(0.0, 60.0, 13)
    fr = deterrence_frontier(bertrand(2), Enforcement(), delta, rates, fines)
    expected = [math.inf] + [max(0.0, (delta * (1 - r) * 16 - 8) / r) for r in rates[1:]]
    assert fr.boundary == pytest.approx(np.array(expected), rel=1e-10)
    for r, b in enumerate(fr.boundary):
        for j, F in enumerate(fines):
            if abs(F - b) > 1e-9:
                assert fr.sustainable[r, j] == (F < b)
    # at the boundary fine the threshold is exactly delta
    for rho, b in zip(rates[1:4], fr.boundary[1:4]):
        t = enforcement_threshold(bertrand(2), Enforcement(detection=float(rho), fine=float(b)))
        assert t == pytest.approx([delta, delta], rel=1e-10)
    back = DeterrenceFrontier.from_dict(json.loads(json.dumps(fr.to_dict())))
    assert np.array_equal(back.boundary, fr.boundary) and np.array_equal(back.sustainable, fr.sustainable)
    assert np.allclose(back.thresholds, fr.thresholds, equal_nan=True)


def test_expected_fines_and_analysis_round_trip():
    """Expected fine per colluding period rho F; discounted along the collusive path
    sum_t delta^t (1 - rho)^t rho F = rho F / (1 - delta (1 - rho)) (geometric series); expected
    colluding periods up to detection 1 / rho (geometric distribution)."""
    a = enforcement_analysis(bertrand(3), Enforcement(detection=0.1, fine=4.0), delta=0.9)
    assert a.expected_fine == pytest.approx([0.4] * 3)
    assert a.discounted_fines == pytest.approx([0.4 / (1 - 0.9 * 0.9)] * 3, rel=1e-12)
    assert a.expected_spell == pytest.approx(10.0)
    assert a.collusion_share == 0.0
    assert a.sustainable == (a.market <= 0.9)
    back = EnforcementAnalysis.from_dict(json.loads(json.dumps(a.to_dict())))
    assert back.per_firm == pytest.approx(a.per_firm) and back.market_deterrence_fine == a.market_deterrence_fine
    assert back.enforcement == a.enforcement
    assert "not proof" in a.to_dict()["caution"]


# --------------------------------------------------------------------------------------------------
# Properties
# --------------------------------------------------------------------------------------------------

profits = st.tuples(st.floats(0.0, 5.0), st.floats(0.1, 10.0), st.floats(0.0, 10.0)).map(
    lambda t: (t[0] + t[1], t[0] + t[1] + t[2], t[0]))  # (pi_C, pi_D, pi_N) with pi_N < pi_C <= pi_D


def _as_inf(x):
    return math.inf if math.isnan(x) else x


@settings(max_examples=60, deadline=None)
@given(profits, st.floats(0.0, 0.9), st.floats(0.0, 0.9), st.floats(0.0, 20.0), st.floats(0.0, 20.0),
       st.sampled_from([None, 1, 4]))
def test_threshold_rises_with_fine_and_detection(p, r1, r2, f1, f2, T):
    """Comparative statics of (*) (and of its finite-T variant, whose weight 1 - delta(1 - q + q
    delta^T) rises with q): a larger fine or a higher detection rate never makes collusion easier,
    and enforcement never beats plain grim trigger."""
    pc, pd, pn = p
    sp = StageProfits([pc], [pd], [pn])
    lo_r, hi_r = sorted((r1, r2))
    lo_f, hi_f = sorted((f1, f2))
    base = _as_inf(enforcement_threshold(sp, Enforcement(detection=lo_r, fine=lo_f, after_detection=T))[0])
    more_fine = _as_inf(enforcement_threshold(sp, Enforcement(detection=lo_r, fine=hi_f, after_detection=T))[0])
    more_rate = _as_inf(enforcement_threshold(sp, Enforcement(detection=hi_r, fine=lo_f, after_detection=T))[0])
    assert more_fine >= base - 1e-12 and more_rate >= base - 1e-12
    assert base >= _as_inf(grim_threshold(pc, pd, pn)) - 1e-12


@settings(max_examples=60, deadline=None)
@given(profits, st.floats(0.01, 0.9), st.floats(0.01, 0.9), st.floats(0.05, 0.95))
def test_deterrence_fine_falls_with_detection(p, r1, r2, delta):
    """Solving (*) for F: F* = (delta (1 - rho) d - (d - c)) / rho falls as rho rises: more detection
    needs a smaller fine to deter."""
    pc, pd, pn = p
    sp = StageProfits([pc], [pd], [pn])
    lo, hi = sorted((r1, r2))
    assert deterrence_fine(sp, Enforcement(detection=hi), delta)[0] <= \
        deterrence_fine(sp, Enforcement(detection=lo), delta)[0] + 1e-9


# --------------------------------------------------------------------------------------------------
# Reference draws: simulated detections against their probabilities
# --------------------------------------------------------------------------------------------------


def _exact_share(rho, T, n):
    """Expected share of colluding periods over n periods, by propagating the distribution of the
    cartel's state machine (colluding, or k periods of competition left) exactly."""
    x = np.zeros(T + 1)
    x[0] = 1.0
    Q = np.zeros((T + 1, T + 1))
    Q[0, 0], Q[0, T] = 1 - rho, rho
    for k in range(1, T + 1):
        Q[k, k - 1] = 1.0
    total = 0.0
    for _ in range(n):
        total += x[0]
        x = x @ Q
    return total / n


def test_simulated_detections_within_three_standard_errors():
    """One uniform per colluding period, detected below rho: the detected share of colluding
    periods is a binomial proportion (SE sqrt(rho (1 - rho) / N)); the share of time in collusion
    over 400 independent replications (streams from one SeedSequence) matches its exact expectation
    (SE from the replications), which tends to the renewal value 1 / (1 + rho T). 3 SE: a fixed-seed
    check that fails with probability about 0.3% per comparison if the draws were wrong by chance."""
    rho, T, n, R = 0.15, 4, 300, 400
    seqs = np.random.SeedSequence(20261201).spawn(R)
    shares, det, coll = [], 0, 0
    for s in seqs:
        c, d = simulate_detections(np.random.default_rng(s), n, rho, T)
        shares.append(c.mean())
        det += int(d.sum())
        coll += int(c.sum())
    se = math.sqrt(rho * (1 - rho) / coll)
    assert abs(det / coll - rho) < 3 * se
    shares = np.array(shares)
    exact = _exact_share(rho, T, n)
    assert abs(shares.mean() - exact) < 3 * shares.std(ddof=1) / math.sqrt(R)
    assert _exact_share(rho, T, 20_000) == pytest.approx(1 / (1 + rho * T), abs=1e-3)


def test_simulated_discounted_fines_match_the_analytic_value():
    """Discounted fines along simulated paths (F in each detected period, delta^t weights, 400
    periods so that 0.9^400 is negligible) average to rho F / (1 - delta (1 - rho)) within 3 SE over
    2,000 independent replications (tolerance as in the previous test)."""
    rho, F, delta, n, R = 0.1, 5.0, 0.9, 400, 2000
    disc = delta ** np.arange(n)
    vals = []
    for s in np.random.SeedSequence(7).spawn(R):
        _, d = simulate_detections(np.random.default_rng(s), n, rho)
        vals.append(F * disc[d].sum())
    vals = np.array(vals)
    analytic = discounted_fines(StageProfits([8.0], [16.0], [0.0]), Enforcement(detection=rho, fine=F), delta)[0]
    assert abs(vals.mean() - analytic) < 3 * vals.std(ddof=1) / math.sqrt(R)


def test_detection_draws_follow_the_package_stream_one_per_colluding_period():
    """The same order on the package's own generator twin: one next_double() per colluding period,
    none while competing (same seed, same path)."""
    state = stream_states(11, (3,), 0, 1)[0]
    c, d = simulate_detections(ReferenceStream(state), 60, 0.3, after_detection=2)
    twin = ReferenceStream(state)
    wait = 0
    for t in range(60):
        if wait:
            assert not c[t]
            wait -= 1
            continue
        assert c[t] and d[t] == (twin.next_double() < 0.3)
        wait = 2 if d[t] else 0
    assert draw_detection(np.random.default_rng(0), 1.0) and not draw_detection(np.random.default_rng(0), 0.0)


# --------------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kwargs,key,fragment", [
    ({"detection": 1.5}, "enforcement.detection", "[0, 1]"),
    ({"detection": -0.1}, "enforcement.detection", "-0.1"),
    ({"fine": -2.0}, "enforcement.fine", "-2.0"),
    ({"fine_basis": "revenue"}, "enforcement.fine_basis", "'revenue'"),
    ({"after_detection": 0}, "enforcement.after_detection", "got 0"),
    ({"proof": 0.0}, "enforcement.proof", "(0, 1]"),
    ({"leniency": 1.2}, "enforcement.leniency", "1.2"),
])
def test_bad_enforcement_input_is_one_line_naming_the_key(kwargs, key, fragment):
    with pytest.raises(InputError) as e:
        Enforcement(**kwargs)
    assert e.value.key == key and fragment in str(e.value) and "\n" not in str(e.value)


def test_bad_input_under_a_prefix_and_in_tables():
    with pytest.raises(InputError) as e:
        Enforcement.from_dict({"detection": 2.0}, prefix="markets[2].enforcement")
    assert e.value.key == "markets[2].enforcement.detection"
    with pytest.raises(InputError) as e:
        Enforcement.from_dict({"detection": {"prices": [1, 2], "rates": [0.1, 1.4]}})
    assert e.value.key == "enforcement.detection.rates"
    with pytest.raises(InputError) as e:
        Enforcement.from_dict({"rate": 0.1})
    assert e.value.key == "enforcement.rate"
    with pytest.raises(InputError) as e:
        deterrence_fine(bertrand(2), Enforcement(detection=0.1), 1.0)
    assert e.value.key == "delta"
    with pytest.raises(InputError) as e:
        deterrence_frontier(bertrand(2), Enforcement(), 0.5, [0.1, 1.1], [1.0])
    assert e.value.key == "enforcement.detection"
    with pytest.raises(InputError) as e:
        StageProfits([1.0, 2.0], [3.0], [0.0, 0.0])
    assert e.value.key == "profits.deviation"


def test_price_table_and_terms_round_trip():
    """JSON round trips of a regime with a price table and of its terms (leniency reported when the
    reduced share 0.2 is below the conviction probability 0.6: rate rho, share 0.2 of the fine)."""
    enf = Enforcement(detection=PriceDetection.from_function(lambda p: 0.02 * p, [2.0, 4.0, 6.0]), fine=10.0,
                      proof=0.6, leniency=0.2)
    back = Enforcement.from_dict(json.loads(json.dumps(enf.to_dict())))
    assert back == enf and back.detection.rate(5.0) == pytest.approx(0.1)
    t = enforcement_terms(bertrand(2), enf)
    assert t.detection_rate == pytest.approx(0.12) and t.conviction_rate == pytest.approx(0.12) and t.firms_report
    assert t.expected_fine == pytest.approx([0.12 * 0.2 * 10.0] * 2)
    again = EnforcementTerms.from_dict(json.loads(json.dumps(t.to_dict())))
    assert np.array_equal(again.expected_fine, t.expected_fine) and again.firms_report
