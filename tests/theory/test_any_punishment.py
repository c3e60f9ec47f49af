"""The any-punishment part of the thresholds analysis: its result round-trips, and the reversal of the shipped
experiment (experiments/any-punishment.toml) holds against checks outside the set algorithm."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from sim.core.tomlfile import read_toml
from sim.models.market import market_from_dict
from sim.theory.analysis import ThresholdsResult, ThresholdsSpec, thresholds_analysis
from sim.theory.any_punishment import AnyPunishmentResult, any_punishment_analysis, check_any_punishment
from sim.theory.discretize import discretize

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = ROOT / "experiments" / "any-punishment.toml"


def _round_trip(cls, r):
    doc = r.to_dict()
    back = cls.from_dict(json.loads(json.dumps(doc, allow_nan=False)))
    assert back.to_dict() == doc
    return back


@pytest.fixture(scope="module")
def shipped():
    doc = read_toml(SHIPPED)
    market = market_from_dict(doc["market"])
    agreement = doc["collusion"]["agreement"]
    spec = check_any_punishment(doc["any_punishment"], market, agreement)
    return doc, market, agreement, spec, any_punishment_analysis(market, spec, agreement)


def test_the_result_round_trips_through_json(shipped):
    *_, ap = shipped
    back = _round_trip(AnyPunishmentResult, ap)
    assert back.penal_codes[1].firm == 1 and back.outer.shape == ap.outer.shape
    assert back.low == ap.low and back.verdict == ap.verdict


def test_a_thresholds_result_with_and_without_the_part_round_trips():
    from sim.models.demand import LinearDemand
    from sim.models.market import Market

    market = Market(LinearDemand(10.0, 1.0), cost=[1.0, 1.0])
    spec = check_any_punishment({"grid": 9}, market)  # no delta: reported at the upper end of the interval
    with_part = thresholds_analysis(ThresholdsSpec(market, "joint", None, (1,), (), any_punishment=spec))
    back = _round_trip(ThresholdsResult, with_part)
    assert isinstance(back.any_punishment, AnyPunishmentResult)
    assert back.any_punishment.delta == with_part.any_punishment.high and not back.any_punishment.delta_given
    without = thresholds_analysis(ThresholdsSpec(market, "joint", None, (1,), ()))
    assert _round_trip(ThresholdsResult, without).any_punishment is None


def _quantecon_worst(game, delta):
    """Each firm's worst equilibrium payoff from QuantEcon's implementation of Abreu and Sannikov (2014, "An
    algorithm for two-player repeated games with perfect monitoring", Theoretical Economics 9)."""
    gt = pytest.importorskip("quantecon.game_theory", reason="QuantEcon is the independent reference here")
    P = game.payoffs
    g = gt.NormalFormGame((gt.Player(P[:, :, 0]), gt.Player(P[:, :, 1].T)))
    hull = gt.RepeatedGame(g, delta).equilibrium_payoffs(method="AS", options={"tol": 1e-10})
    return hull.points[hull.vertices].min(axis=0)


def _named_sustain(game, profile, delta):
    """Whether grim trigger or a symmetric stick and carrot on the grid sustains the agreement at ``delta``, by
    brute force over the payoff array. Grim trigger: (pi_D - pi_C) <= delta / (1 - delta) (pi_C - pi_N) (Friedman,
    1971, Review of Economic Studies 38(1)); stick and carrot at common action s: (pi_D - pi_C) <= delta (pi_C -
    pi_S) and (pi_D(s) - pi_S) <= delta (pi_C - pi_S) for every firm (Abreu, 1986, "Extremal equilibria of
    oligopolistic supergames", Journal of Economic Theory 39)."""
    G = game.payoffs
    n = game.n_firms

    def best_dev(prof, i):
        return max(G[prof[:i] + (b,) + prof[i + 1:]][i] for b in range(game.shape[i]))

    gC = G[profile]
    gainC = np.array([best_dev(profile, i) - gC[i] for i in range(n)])
    gN = G[game.marked["nash"]]
    grim = bool(np.all(gainC <= delta / (1 - delta) * (gC - gN)))
    common = sorted(set(game.grids[0].tolist()) & set(game.grids[1].tolist()))
    carrot = False
    for x in common:
        s = tuple(int(np.flatnonzero(game.grids[i] == x)[0]) for i in range(n))
        gS = G[s]
        gainS = np.array([best_dev(s, i) - gS[i] for i in range(n)])
        room = delta * (gC - gS)
        carrot |= bool(np.all(gainC <= room) and np.all(gainS <= room))
    return grim, carrot


def test_the_shipped_reversal_holds_against_independent_checks(shipped):
    """At the market's discount factor the named schemes fail and the best punishment sustains the agreement:
    the named schemes by brute force on the payoff array, the worst equilibrium payoffs from QuantEcon's
    Abreu-Sannikov sets on the same grid, and the sustainability condition of Abreu (1988, "On the theory of
    infinitely repeated games with discounting", Econometrica 56(2)): (1 - delta) gain_i <= delta (pi_C,i - v_i)."""
    doc, market, agreement, spec, ap = shipped
    delta = doc["any_punishment"]["delta"]
    assert ap.verdict == "sustained" and ap.high < delta < min(ap.grim, ap.stick_carrot)
    game = discretize(market, list(spec.grid), agreement=agreement)
    profile = tuple(ap.profile)
    assert _named_sustain(game, profile, delta) == (False, False)
    worst = _quantecon_worst(game, delta)
    # the two algorithms bracket the same set: the worst payoffs agree to the reported accuracy and QuantEcon's
    # tolerance (a hundredth of a money unit on profits of about a thousand)
    np.testing.assert_allclose(worst, ap.worst_high, atol=1e-2 + ap.accuracy)
    gC = game.payoffs[profile]
    gain = game.best_reply[profile] - gC
    assert np.all((1 - delta) * gain <= delta * (gC - worst))
    # and the continuous market's named thresholds agree that the schemes fail at this discount factor
    from sim.theory.thresholds import critical_discount_factors

    th = critical_discount_factors(market, punishments=(1,), agreement=agreement).to_dict()["thresholds"]
    assert th["grim"]["market"] > delta and th["stick_carrot"]["market"] > delta


def test_the_reversal_is_not_an_artefact_of_the_grid(shipped):
    """A finer grid moves the threshold (discretisation) but not the conclusion at the market's discount factor;
    the threshold stays above the bound that no punishment can beat: holding a firm to its minmax forever,
    (pi_D - pi_C) / (pi_D - minmax) (Abreu, 1988)."""
    doc, market, agreement, *_ = shipped
    fine = check_any_punishment({**doc["any_punishment"], "grid": 21}, market, agreement)
    ap = any_punishment_analysis(market, fine, agreement)
    assert ap.verdict == "sustained" and ap.high < doc["any_punishment"]["delta"]
    game = discretize(market, 21, agreement=agreement)
    prof = tuple(ap.profile)
    gain = game.best_reply[prof] - game.payoffs[prof]
    bound = np.max(gain / (gain + game.payoffs[prof] - game.minmax))
    assert bound - 1e-12 <= ap.low <= ap.high and math.isfinite(ap.high)


# --------------------------------------------------------------------------------------------------
# The symmetric slice of a three-firm set
# --------------------------------------------------------------------------------------------------

# symmetric linear Cournot, P = a - b Q, unit cost c, three firms
A3, B3, C3, N3 = 10.0, 1.0, 1.0, 3
THREE = {"grid": 5, "directions": 16, "tolerance": 0.01}


@pytest.fixture(scope="module", params=[0.25, 0.4])
def three_firms(request):
    from sim.models.demand import LinearDemand
    from sim.models.market import Market

    market = Market(LinearDemand(A3, B3), cost=[C3] * N3)
    spec = check_any_punishment({**THREE, "delta": request.param}, market)
    return market, spec, any_punishment_analysis(market, spec)


def test_three_firms_keep_the_symmetric_slice_through_json(three_firms):
    """The slice is stored with the result and read back; a result stored before the slice existed reads back
    with an empty (nan) slice; two firms store none (their set is drawn whole)."""
    *_, ap = three_firms
    back = _round_trip(AnyPunishmentResult, ap)
    np.testing.assert_array_equal(back.symmetric, ap.symmetric)
    assert np.all(np.isfinite(ap.symmetric))
    old = {k: v for k, v in ap.to_dict().items() if k != "symmetric"}
    assert np.all(np.isnan(AnyPunishmentResult.from_dict(old).symmetric))


def test_two_firms_store_no_slice(shipped):
    *_, ap = shipped
    assert ap.symmetric.shape == (4,) and np.all(np.isnan(ap.symmetric))


def test_the_symmetric_slice_lies_in_the_outer_set(three_firms):
    """Every end of the slice, as the payoff vector (t, t, t), meets the outer set's half-spaces recomputed here
    (Judd, Yeltekin and Conklin, 2003, "Computing supergame equilibria", Econometrica 71(4): the outer set is
    {w : h_l . w <= c_l}, a description the slice, read from the set's vertices, does not use), and the inner
    slice lies in the outer one. Tolerance: 1e-7 of the payoff scale, the sets' own tolerance being 1e-8."""
    from sim.theory.payoff_sets import equilibrium_payoffs

    market, spec, ap = three_firms
    lo_out, lo_in, hi_in, hi_out = ap.symmetric
    assert lo_out <= lo_in <= hi_in <= hi_out
    game = discretize(market, list(spec.grid))
    res = equilibrium_payoffs(game, ap.delta, method="directions", directions=spec.directions)
    tol = 1e-7 * game.scale
    for t in ap.symmetric:
        assert np.all(res.directions @ np.full(N3, t) <= res.outer_levels + tol)


def test_the_symmetric_slice_holds_static_nash_and_at_most_the_monopoly_share(three_firms):
    """Static Nash played forever is an equilibrium (Abreu, Pearce and Stacchetti, 1990, Econometrica 58(5)), so
    the symmetric Cournot profit (a - c)^2 / (b (n + 1)^2) (Tirole, 1988, The Theory of
    Industrial Organization, chapter 5, from memory) lies in the inner slice; no feasible payoff gives every firm more
    than its share of the monopoly profit, (a - c)^2 / (4 b n), which the inner slice reaches when the
    agreement (joint-profit maximum) is sustained (Abreu, 1988, Econometrica 56(2)). The grid holds both levels
    (the static Nash and agreed actions are placed on it). Tolerance: 1e-7 of the payoff scale (rounding of the
    sets and of the slice's linear programmes)."""
    market, spec, ap = three_firms
    nash = (A3 - C3) ** 2 / (B3 * (N3 + 1) ** 2)
    monopoly_share = (A3 - C3) ** 2 / (4 * B3 * N3)
    tol = 1e-7 * float(np.abs(discretize(market, list(spec.grid)).flat_payoffs).max())
    _, lo_in, hi_in, hi_out = ap.symmetric
    assert lo_in - tol <= nash <= hi_in + tol
    assert hi_out <= monopoly_share + tol
    if ap.verdict == "sustained":
        assert hi_in >= monopoly_share - tol


# --------------------------------------------------------------------------------------------------
# The frontier of sustainable profits at the reported discount factor
# --------------------------------------------------------------------------------------------------


def test_the_frontier_round_trips_and_an_older_result_reads_back_empty(shipped, three_firms):
    for *_, ap in (shipped, three_firms):
        back = _round_trip(AnyPunishmentResult, ap)
        np.testing.assert_array_equal(back.best_joint, ap.best_joint)
        np.testing.assert_array_equal(back.best_profits, ap.best_profits)
        assert ap.best_profits.shape == (ap.n_firms, 2) and np.all(np.isfinite(ap.best_profits))
    old = {k: v for k, v in ap.to_dict().items() if k not in ("best_joint", "best_profits", "best_equal")}
    back = AnyPunishmentResult.from_dict(old)
    assert np.all(np.isnan(back.best_joint)) and back.best_profits.shape == (0, 2)
    assert np.all(np.isnan(back.best_equal))


def test_the_frontier_brackets_hold_the_agreement_and_stay_feasible(shipped, three_firms):
    """Checks from outside the set algorithm. Every equilibrium payoff is a discounted average of stage payoffs,
    so no equilibrium's joint profit exceeds the largest joint stage profit on the grid, nor a firm's payoff its
    largest stage profit, and no firm's best equilibrium payoff falls below its minmax (Fudenberg and Tirole,
    1991, Game Theory, chapter 5: feasible and individually rational payoffs). Where the agreement is sustained,
    its profits are an equilibrium payoff, so the outer bounds are at least its joint and per-firm profits (Abreu,
    1988, Econometrica 56(2)). The two ends of a bracket are at most the sets' accuracy apart in each firm's
    direction, and at most sqrt(n) times it for the joint profit (a Hausdorff distance d moves the support value
    in a unit direction by at most d; the joint profit is sqrt(n) times the support value in the unit diagonal).
    With three firms, the best equal profit of a constructed equilibrium (the symmetric slice) times three is a
    joint profit of the inner set, and the best equal profit is the symmetric slice's upper end; for any number of
    firms, n times the best equal profit is a joint profit, so at most the best. Tolerance: 1e-7 of the payoff
    scale (rounding of the sets)."""
    market3, spec3, ap3 = three_firms
    for market, agreement, spec, ap in (shipped[1:], (market3, "joint", spec3, ap3)):
        game = discretize(market, list(spec.grid), agreement=agreement)
        G = game.flat_payoffs
        tol = 1e-7 * game.scale
        (j_lo, j_hi), best = ap.best_joint, ap.best_profits
        assert j_lo <= j_hi + tol and j_hi <= G.sum(axis=1).max() + tol
        assert j_hi - j_lo <= np.sqrt(ap.n_firms) * ap.accuracy + tol
        assert np.all(best[:, 0] <= best[:, 1] + tol) and np.all(best[:, 1] - best[:, 0] <= ap.accuracy + tol)
        assert np.all(best[:, 1] <= G.max(axis=0) + tol) and np.all(best[:, 1] >= game.minmax - tol)
        if ap.verdict == "sustained":
            assert j_hi >= ap.profits.sum() - tol and np.all(best[:, 1] >= ap.profits - tol)
        if ap.n_firms >= 3 and np.isfinite(ap.symmetric[2]):
            assert ap.n_firms * ap.symmetric[2] <= j_lo + tol
            np.testing.assert_allclose(ap.best_equal, ap.symmetric[2:], rtol=0, atol=tol)
        e_lo, e_hi = ap.best_equal
        assert e_lo <= e_hi + tol and ap.n_firms * e_lo <= j_lo + tol and ap.n_firms * e_hi <= j_hi + tol


def test_the_best_joint_profit_is_at_most_the_monopoly_profit(three_firms):
    """No feasible payoff gives the industry more than the monopoly profit (a - c)^2 / (4 b) of the linear market
    with a common unit cost (Tirole, 1988, The Theory of Industrial Organization, chapter 1, from memory), and the
    joint-profit agreement on a grid that holds the monopoly output reaches it where it is sustained (Abreu,
    1988). Tolerance: 1e-7 of the payoff scale."""
    market, spec, ap = three_firms
    monopoly = (A3 - C3) ** 2 / (4 * B3)
    tol = 1e-7 * float(np.abs(discretize(market, list(spec.grid)).flat_payoffs).max())
    assert ap.best_joint[1] <= monopoly + tol
    if ap.verdict == "sustained":
        assert ap.best_joint[1] >= monopoly - tol


# --------------------------------------------------------------------------------------------------
# The refinement table ([any_punishment] refine)
# --------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def refined():
    """The linear Cournot duopoly P = 100 - Q, cost 10, joint-profit agreement, on grids of 8, 15 and 30 actions."""
    market = market_from_dict({"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0,
                               "cost": 10.0, "n_firms": 2})
    spec = check_any_punishment({"grid": 15, "refine": [8, 15, 30]}, market)
    return spec, any_punishment_analysis(market, spec)


def test_the_refinement_table_round_trips_and_repeats_the_main_grid(refined):
    _spec, ap = refined
    back = _round_trip(AnyPunishmentResult, ap)
    assert [r.n_actions for r in back.refinement.rows] == [(8, 8), (15, 15), (30, 30)]
    # the table's 15 x 15 row is the main question asked again: the same bracket
    row = ap.refinement.rows[1]
    assert row.threshold == pytest.approx((ap.low, ap.high), abs=1e-12)
    assert ap.refinement.delta == ap.delta


def test_the_refinement_table_against_the_closed_forms_on_every_grid(refined):
    """The key levels lie on every grid, so the named schemes' thresholds are the continuous ones on each: grim
    trigger 9/17 in the linear Cournot duopoly (Friedman, 1971; (n+1)^2 / (n^2 + 6n + 1) at n = 2) and the optimal
    symmetric stick and carrot 9/32 (Abreu, 1986, JET 39, from memory). The best punishment never needs more
    patience than a named scheme on the same grid (its equilibria are in the set: Abreu, Pearce and Stacchetti,
    1990), and the bracket narrows to within the bisection's tolerance."""
    spec, ap = refined
    for r in ap.refinement.rows:
        assert r.grim == pytest.approx(9 / 17, abs=1e-9)
        assert r.stick_carrot == pytest.approx(9 / 32, abs=1e-6)
        low, high = r.threshold
        assert low < high <= r.stick_carrot + 1e-9 and high - low <= 2 * spec.tolerance
    # here the finer grids offer harsher (asymmetric) punishments and the answer falls; the grids are built around
    # the same key levels but are not nested, so this is a check of this market, not a general law
    highs = [r.threshold[1] for r in ap.refinement.rows]
    assert highs[2] <= highs[1] + 2 * spec.tolerance and highs[1] <= highs[0] + 2 * spec.tolerance


def test_the_refinement_grids_are_validated_before_any_work():
    market = market_from_dict({"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0,
                               "cost": 10.0, "n_firms": 2})
    from sim.core.errors import InputError
    from sim.theory.any_punishment import estimate_any_punishment
    for bad in ([16, 8], [8, 8], 8, [1], list(range(8, 17))):
        with pytest.raises(InputError) as e:
            check_any_punishment({"refine": bad}, market)
        assert e.value.key.startswith("any_punishment.refine")
    plain = estimate_any_punishment(check_any_punishment({"grid": 15}, market))
    more = estimate_any_punishment(check_any_punishment({"grid": 15, "refine": [8, 30]}, market))
    assert more["sets"] > plain["sets"] and more["seconds"] > plain["seconds"] and more["bytes"] >= plain["bytes"]
