"""Every market the validator accepts computes, or says why not.

For each market model (linear, differentiated and logit demand in the modes each supports, isoelastic demand, and
price competition with capacities), hypothesis draws markets from the whole box of parameters the validator accepts
(:mod:`sim.core.params` constraints on each demand's ``_constraints`` and on :class:`sim.models.market.Market`),
extreme values included: scales from 1e-6 to 1e9, costs next to the choke price, asymmetric costs, many firms, a
logit ``mu`` down to its floor of 1e-6. The stage game and every threshold scheme run with numpy and scipy warnings
turned into errors. Each scheme must give numbers in range -- a critical discount factor in [0, 1), the binding firm
among the firms that tie -- or a documented result on that scheme alone: "not sustainable" with its reason
(:mod:`sim.theory.verdicts`) or "solver did not converge: ...". These are properties of the computation (no value is
checked against a source, so none is named); the closed-form checks of the thresholds live in test_thresholds.py.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, reject, settings
from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument
from scipy.special import logsumexp

from sim.core.errors import InputError, SolverError
from sim.models.market import market_from_dict
from sim.theory.analysis import ThresholdsResult, ThresholdsSpec, thresholds_analysis
from sim.theory.capacity_analysis import (
    agreement_of,
    capacity_market_from_dict,
    capacity_thresholds,
    require_spare_capacity,
    require_static_equilibrium,
)
from sim.theory.verdicts import TIE_RTOL, not_sustainable_reason, tied_firms

REASONS = {"below_nash", "no_gain", "incentive", "solver"}
# derandomized: the same draws on every run, so that a result does not depend on the day the suite runs; a draw that
# once failed is kept below as a fixed regression case
FAST = settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow,
                                                                       HealthCheck.filter_too_much])
LARGE = settings(max_examples=6, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow,
                                                                         HealthCheck.filter_too_much])


# ---- the box of accepted parameters -------------------------------------------------------------------------------

def magnitude(lo: float = -6.0, hi: float = 9.0):
    """Positive numbers spread over orders of magnitude, with the ends of the accepted range."""
    return st.one_of(st.floats(lo, hi).map(lambda e: float(10.0 ** e)), st.sampled_from([10.0 ** lo, 10.0 ** hi]))


def fraction():
    """Numbers in [0, 1): plain fractions and values a hair below one (costs next to the choke price)."""
    return st.one_of(st.floats(0.0, 1.0, exclude_max=True), st.floats(-12, -1).map(lambda e: 1.0 - 10.0 ** e),
                     st.just(0.0))


@st.composite
def per_firm(draw, n: int, values):
    """One value for every firm, or a list of n values."""
    return draw(values) if draw(st.booleans()) else [draw(values) for _ in range(n)]


@st.composite
def linear_tables(draw, model: str, max_firms: int):
    n = draw(st.integers(2, max_firms))
    a, b = draw(magnitude()), draw(magnitude())
    t = {"demand": "linear", "model": model, "n_firms": n, "intercept": a, "slope": b,
         "cost": draw(per_firm(n, fraction().map(lambda f: a * f)))}
    if model == "cournot" and draw(st.booleans()):
        t["capacity"] = draw(per_firm(n, magnitude(-3, 1).map(lambda k: k * a / b)))
    if model == "bertrand" and draw(st.booleans()):
        t["split"] = [draw(magnitude(-3, 3)) for _ in range(n)]
    if model == "bertrand" and draw(st.booleans()):
        t["tick"] = a * draw(magnitude(-9, -2))
    return t


@st.composite
def differentiated_tables(draw, model: str, max_firms: int):
    n = draw(st.integers(2, max_firms))
    owner = None
    if draw(st.booleans()) and n >= 3:
        owner = [1, 1] + list(range(2, n))
    a = draw(magnitude())
    inter = draw(per_firm(n, st.floats(0.5, 1.0).map(lambda f: a * f)))
    low = min(inter) if isinstance(inter, list) else inter
    top = 1.0 if model == "cournot" else 1.0 - 1e-9
    g = draw(st.one_of(st.floats(0.0, top), st.sampled_from([0.0, top]), st.floats(-12, -1).map(lambda e: 1 - 10 ** e)))
    t = {"demand": "differentiated", "model": model, "n_firms": n, "intercept": inter, "slope": draw(magnitude()),
         "substitution": min(g, top), "cost": draw(per_firm(n, fraction().map(lambda f: low * f)))}
    if owner is not None:
        t["owner"] = owner
        del t["n_firms"]
    if model == "cournot" and draw(st.booleans()):
        t["capacity"] = draw(per_firm(n, magnitude(-3, 1).map(lambda k: k * a / t["slope"])))
    return t


@st.composite
def logit_tables(draw, max_firms: int):
    n = draw(st.integers(2, max_firms))
    level = draw(st.sampled_from([1.0, 10.0, 1e3, 1e6]))
    t = {"demand": "logit", "model": "bertrand", "n_firms": n,
         "mu": draw(st.one_of(magnitude(-6, 6), st.sampled_from([1e-6, 1e-3, 0.02]))),
         "quality": draw(per_firm(n, st.floats(-level, level))), "outside": draw(st.floats(-level, level)),
         "size": draw(magnitude()), "cost": draw(per_firm(n, st.floats(0.0, level)))}
    if draw(st.booleans()) and n >= 3:
        t["owner"] = [1, 1] + list(range(2, n))
        del t["n_firms"]
    return t


@st.composite
def isoelastic_tables(draw, max_firms: int):
    n = draw(st.integers(2, max_firms))
    scale = draw(magnitude(-3, 6))
    eps = draw(st.one_of(st.floats(1.0, 100.0, exclude_min=True), st.sampled_from([1.0 + 1e-9, 100.0])))
    # the validator's floor: (scale / cost)^elasticity at most 1e100, and cost at least 1e-6 of the scale
    floor = max(1e-6, 10.0 ** (-100.0 / eps)) * (1.0 + 1e-12)
    t = {"demand": "isoelastic", "model": "cournot", "n_firms": n, "scale": scale, "elasticity": eps,
         "cost": draw(per_firm(n, st.one_of(magnitude(-6, 3), st.just(floor)).map(lambda r: scale * max(r, floor))))}
    if draw(st.booleans()):
        t["capacity"] = draw(per_firm(n, magnitude(-3, 3)))
    return t


@st.composite
def capacity_tables(draw, max_firms: int):
    n = draw(st.integers(2, max_firms))
    v = draw(magnitude())
    t = {"model": "capacity", "capacity": [draw(magnitude(-3, 3)) for _ in range(n)], "reservation_price": v,
         "market_size": draw(magnitude(-3, 3)), "cost": v * draw(fraction()),
         "demand": draw(st.sampled_from(["inelastic", "linear"])),
         "rationing": draw(st.sampled_from(["efficient", "proportional"]))}
    collusion = {"agreement": draw(st.sampled_from(["proportional", "equal"]))}
    return t, collusion


AGREEMENTS = st.sampled_from(["joint", "symmetric", "proportional"])


# ---- the properties -----------------------------------------------------------------------------------------------

def solve(table: dict, agreement: str, punishments=(1, 3), deltas=()) -> ThresholdsResult | None:
    """The thresholds of an accepted market with warnings as errors (None when the stage game itself has no
    certified solution, a documented one-line result); the example is rejected when the validator refuses it."""
    try:
        market = market_from_dict(table)
    except InputError:
        reject()
    spec = ThresholdsSpec(market, agreement, None, tuple(punishments), tuple(deltas))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            return thresholds_analysis(spec)
        except InputError as e:
            # the one refusal left after the market is valid: an agreement this market cannot express, which the
            # thresholds kind refuses before any work (homogeneous Bertrand with 'proportional')
            assert e.key == "collusion.agreement", str(e)
            reject()
        except SolverError as e:
            # the stage game (static Nash) could not be certified: one line saying so, no traceback
            assert "\n" not in str(e) and str(e)
            event("stage game: solver did not converge")
            return None


def check_scheme(row: dict, n_firms: int) -> None:
    """A scheme gives a threshold in [0, 1) held by its binding firm, or 'not sustainable' with its reason."""
    assert 1 <= row["binding_firm"] <= n_firms
    if row["market"] is None:
        reason = row["not_sustainable"]
        assert reason["code"] in REASONS and reason["text"]
        assert row["binding_firm"] in row["tied_firms"] or reason["code"] == "solver"
        return
    assert 0.0 <= row["market"] < 1.0
    values = [x for x in row["per_firm"] if x is not None]
    assert len(values) == n_firms and all(0.0 <= x < 1.0 for x in values)
    assert row["market"] == max(values)
    assert row["binding_firm"] in row["tied_firms"]
    for f in row["tied_firms"]:
        assert abs(row["per_firm"][f - 1] - row["market"]) <= TIE_RTOL * row["market"]


def _event(text: str) -> None:
    """A statistic of the draws (hypothesis's ``event``); nothing when called from a plain test."""
    try:
        event(text)
    except InvalidArgument:
        pass


def check_result(res: ThresholdsResult | None) -> None:
    """Numbers in range, documented results elsewhere, and a result that survives JSON."""
    if res is None:
        return
    for row in res.scheme_rows():
        _event(f"{row['key']}: " + ("not sustainable, " + row["not_sustainable"]["code"] if row["market"] is None
                                    else f"{len(row['tied_firms'])} firm(s) binding"))
    doc = res.to_dict()
    assert ThresholdsResult.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc
    profits = res.report["profits"]
    for who in ("collusive", "deviation", "nash", "minmax"):
        assert all(x is not None and math.isfinite(x) for x in profits[who]), who
    for row in res.scheme_rows():
        check_scheme(row, res.n_firms)
    for p in res.report["partial_collusion"]:
        assert p.get("note") or 0.0 <= p["weight"] <= 1.0


@pytest.mark.parametrize("model", ["cournot", "bertrand"])
@FAST
@given(data=st.data(), agreement=AGREEMENTS)
def test_linear_markets_compute_or_say_why(model, data, agreement):
    """Homogeneous linear demand: every accepted market gives thresholds or documented results."""
    check_result(solve(data.draw(linear_tables(model, 4)), agreement))


@pytest.mark.parametrize("model", ["cournot", "bertrand"])
@FAST
@given(data=st.data(), agreement=AGREEMENTS)
def test_differentiated_markets_compute_or_say_why(model, data, agreement):
    """Differentiated linear demand (multi-product firms included): thresholds or documented results."""
    check_result(solve(data.draw(differentiated_tables(model, 4)), agreement))


@FAST
@given(data=st.data(), agreement=AGREEMENTS)
def test_logit_markets_compute_or_say_why(data, agreement):
    """Logit demand down to mu = 1e-6 (shares that underflow): thresholds or documented results."""
    check_result(solve(data.draw(logit_tables(3)), agreement))


@FAST
@given(data=st.data(), agreement=AGREEMENTS)
def test_isoelastic_markets_compute_or_say_why(data, agreement):
    """Isoelastic demand up to elasticity 100: thresholds or documented results."""
    check_result(solve(data.draw(isoelastic_tables(4)), agreement))


def solve_capacity(table: dict, collusion: dict):
    """The capacity thresholds of an accepted market with warnings as errors (None when the mixed static equilibrium
    could not be certified, a documented one-line result); rejected when the validator refuses."""
    try:
        market = capacity_market_from_dict(table)
        require_spare_capacity(market)
        agreement = agreement_of(collusion, market.spec().n_firms)
    except InputError:
        reject()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            require_static_equilibrium(market)  # refuses (InputError) a static equilibrium the model cannot compute
            return capacity_thresholds(market, agreement)
        except InputError:
            reject()
        except SolverError as e:
            # the mixed static equilibrium could not be certified: one line saying so, no traceback
            assert "\n" not in str(e) and str(e)
            event("static equilibrium: solver did not converge")
            return None


@FAST
@given(data=st.data())
def test_capacity_markets_compute_or_say_why(data):
    """Price competition with capacities: each firm's thresholds in [0, 1) or nan (not sustainable), a binding
    firm among the ties, and a result that survives JSON."""
    res = solve_capacity(*data.draw(capacity_tables(4)))
    if res is None:
        return
    coll = res.collusion
    n = res.n_firms
    for values, market, binding, _ties in ((coll.grim, coll.grim_market, coll.grim_binding, coll.grim_ties),
                                          (coll.harshest, coll.harshest_market, coll.harshest_binding,
                                           coll.harshest_ties)):
        assert values.shape == (n,)
        assert all(np.isnan(x) or 0.0 <= x < 1.0 for x in values)
        assert np.isnan(market) or 0.0 <= market < 1.0
        assert 0 <= binding < n
    doc = res.to_dict()
    assert type(res).from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc


# ---- the cases that used to fail ----------------------------------------------------------------------------------

@pytest.mark.parametrize("mu", [0.02, 0.001, 1e-6])
def test_small_mu_logit_gives_every_scheme(mu):
    """Logit price competition with a small mu (3 firms, quality 2, cost 1, outside good 0): every scheme computes,
    and the static Nash prices satisfy the logit first-order condition p - c = mu / (1 - s) (Anderson, de Palma and
    Thisse, 1992, "Discrete Choice Theory of Product Differentiation", ch. 7), with the shares computed here by
    log-sum-exp."""
    table = {"demand": "logit", "model": "bertrand", "n_firms": 3, "mu": mu, "quality": 2.0, "outside": 0.0,
             "cost": 1.0}
    res = solve(table, "joint", punishments=(1, 2, 5))
    assert res is not None
    for row in res.scheme_rows():
        check_scheme(row, 3)
    p = np.array(res.report["prices"]["nash"])
    u = np.append((2.0 - p) / mu, 0.0)
    shares = np.exp(u - logsumexp(u))[:3]
    # the markup is about 1.5 mu against prices near 1: the check is relative to the markup, to the rounding
    # of a price (1e-16) over the markup
    np.testing.assert_allclose(p - 1.0, mu / (1.0 - shares), rtol=1e-12 / mu)
    assert res.report["thresholds"]["grim"]["tied_firms"] == [1, 2, 3]


def test_tiny_mu_logit_tends_to_bertrand():
    """As mu -> 0 the products become perfect substitutes: the symmetric Nash markup tends to mu n / (n - 1) (the
    first-order condition above with shares 1/n) and the grim threshold to the homogeneous-Bertrand 1 - 1/n (Tirole,
    1988, "The Theory of Industrial Organization", ch. 6). At mu = 1e-6 the deviator misses a share of order
    mu log(1/mu) (about 1.4e-5) of the market, hence the tolerance 1e-4."""
    table = {"demand": "logit", "model": "bertrand", "n_firms": 3, "mu": 1e-6, "quality": 2.0, "outside": 0.0,
             "cost": 1.0}
    res = solve(table, "joint")
    np.testing.assert_allclose(np.array(res.report["prices"]["nash"]) - 1.0, 1.5e-6, rtol=1e-4)
    assert res.report["thresholds"]["grim"]["market"] == pytest.approx(2 / 3, rel=1e-4)


def test_agreement_below_nash_says_so():
    """Joint-profit agreement with costs 1, 1, 3 under linear Cournot (intercept 10, slope 1): the joint optimum
    shuts firm 3, whose static Nash profit is ((10 - 4*3 + 5) / 4)^2 = 0.5625 (the Cournot closed form
    q_i = (a - (n+1) c_i + sum c) / ((n+1) b); e.g. Tirole, 1988, ch. 5). Grim trigger is not sustainable and says
    that the agreement leaves firm 3 below its Nash profit, not that the firms are too impatient."""
    table = {"demand": "linear", "model": "cournot", "intercept": 10.0, "slope": 1.0, "cost": [1.0, 1.0, 3.0]}
    res = solve(table, "joint")
    assert res.report["profits"]["nash"][2] == pytest.approx(0.5625, rel=1e-12)
    grim = res.report["thresholds"]["grim"]
    assert grim["market"] is None
    assert grim["not_sustainable"]["code"] == "below_nash" and grim["not_sustainable"]["firms"] == [3]


def test_incentive_failure_says_so():
    """Symmetric Cournot duopoly (intercept 100, slope 1, cost 10): with one period of Nash reversion
    K = (pi_D - pi_C) / (pi_C - pi_N) = (1139.0625 - 1012.5) / (1012.5 - 900) = 1.125 >= T = 1, so no delta below one
    sustains it (profits from the Cournot and monopoly closed forms; the T-period condition of Friedman, 1971)."""
    table = {"demand": "linear", "model": "cournot", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2}
    res = solve(table, "joint", punishments=(1,))
    finite = res.report["thresholds"]["finite"][0]
    assert finite["market"] is None
    assert finite["not_sustainable"]["code"] == "incentive" and finite["not_sustainable"]["firms"] == [1, 2]


def test_ties_within_tolerance():
    """Thresholds that differ by less than the stated relative tolerance tie; a larger gap does not."""
    d = 0.5
    assert tied_firms([d, d * (1 + TIE_RTOL / 2), d * (1 - TIE_RTOL / 4)], d * (1 + TIE_RTOL / 2)) == [0, 1, 2]
    assert tied_firms([d, d * (1 + 10 * TIE_RTOL)], d * (1 + 10 * TIE_RTOL)) == [1]
    assert tied_firms([np.nan, 0.2, np.nan], np.nan) == [0, 2]


def test_reason_prefers_the_basic_explanation():
    """A firm below its Nash profit explains the failure before another firm's incentive constraint."""
    r = not_sustainable_reason("finite", [np.nan, np.nan], [1.0, 2.0], [3.0, 5.0], [1.5, 1.0], T=1)
    assert r["code"] == "below_nash" and r["firms"] == [1]
    assert not_sustainable_reason("grim", [0.5, 0.4], [1, 1], [2, 2], [0, 0]) is None


# ---- larger draws -------------------------------------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("kind", ["linear-cournot", "linear-bertrand", "differentiated-cournot",
                                  "differentiated-bertrand", "logit", "isoelastic"])
@LARGE
@given(data=st.data(), agreement=AGREEMENTS)
def test_markets_compute_or_say_why_large(kind, data, agreement):
    """The same property with more draws, more firms and partial collusion at two discount factors."""
    tables = {"linear-cournot": linear_tables("cournot", 12), "linear-bertrand": linear_tables("bertrand", 12),
              "differentiated-cournot": differentiated_tables("cournot", 8),
              "differentiated-bertrand": differentiated_tables("bertrand", 8), "logit": logit_tables(6),
              "isoelastic": isoelastic_tables(12)}
    check_result(solve(data.draw(tables[kind]), agreement, punishments=(1, 2, 5), deltas=(0.5, 0.95)))


@pytest.mark.slow
@LARGE
@given(data=st.data())
def test_capacity_markets_compute_or_say_why_large(data):
    """Capacity markets with up to eight firms."""
    res = solve_capacity(*data.draw(capacity_tables(8)))
    assert res is None or res.collusion.grim.shape == (res.n_firms,)


def test_a_steep_demand_scale_computes_partial_collusion_without_warnings():
    """A draw of the larger property that once failed: linear Cournot with slope 1e-6 puts the punishment levels near
    a million, where Brent's parabola through capped objective values overflowed into a numpy warning. The grim
    threshold of the symmetric linear Cournot duopoly is 9/17 whatever the demand and cost (Friedman, 1971)."""
    table = {"demand": "linear", "model": "cournot", "n_firms": 2, "intercept": 10.0, "slope": 1e-6, "cost": 6.25}
    res = solve(table, "joint", punishments=(1, 2, 5), deltas=(0.5, 0.95))
    check_result(res)
    assert res.report["thresholds"]["grim"]["market"] == pytest.approx(9 / 17, rel=1e-9)


def test_a_failing_solver_is_reported_on_its_scheme_alone(monkeypatch):
    """When the stick-and-carrot search fails, that scheme says 'solver did not converge: ...' and grim trigger
    keeps its closed form: (pi_D - pi_C) / (pi_D - pi_N) = 9/17 for the symmetric Cournot duopoly with intercept
    100, slope 1 and cost 10 (Friedman, 1971; the profits 1012.5, 1139.0625 and 900 from the Cournot and monopoly
    closed forms)."""
    import sim.theory.thresholds as thresholds_module

    def fails(*args, **kwargs):
        raise SolverError("no bracket found for the punishment level")

    monkeypatch.setattr(thresholds_module, "stick_and_carrot", fails)
    table = {"demand": "linear", "model": "cournot", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2}
    res = solve(table, "joint", deltas=(0.6,))
    th = res.report["thresholds"]
    assert th["grim"]["market"] == pytest.approx(9 / 17, rel=1e-12)
    reason = th["stick_carrot"]["not_sustainable"]
    assert reason["code"] == "solver" and reason["text"].startswith("solver did not converge: no bracket")
    notes = [p for p in res.report["partial_collusion"] if p["scheme"] == "stick_carrot"]
    assert notes and notes[0]["note"].startswith("solver did not converge")
