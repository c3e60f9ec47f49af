"""What a practitioner reads from the payoff sets -- named schemes on the grid, the lowest threshold
under any punishment, the frontier, grid refinement -- against closed forms of the linear Cournot
duopoly."""

import json
import math

import numpy as np
import pytest

import sim
from sim import LinearDemand, Market
from sim.core.errors import InputError
from sim.theory.discretize import discretize, game_from_payoffs
from sim.theory.payoff_sets import equilibrium_payoffs
from sim.theory.practice import (
    AgreementThreshold,
    Frontier,
    PenalCode,
    lowest_threshold,
    named_thresholds,
    penal_codes,
    sustainable_frontier,
)
from sim.theory.refinement import GridRefinement, grid_refinement

DUOPOLY = Market(LinearDemand(10, 1), cost=1.0, n_firms=2)


@pytest.fixture(scope="module")
def duopoly():
    return discretize(DUOPOLY, 20)


def test_named_schemes_on_the_grid(duopoly):
    """Joint-profit collusion in the linear Cournot duopoly: grim trigger needs 9/17 (Friedman, 1971;
    (n + 1)^2 / (n^2 + 6n + 1) with n = 2) and the best symmetric stick and carrot 9/32 (Abreu, 1986,
    "Extremal equilibria of oligopolistic supergames", JET 39 -- value from memory, and equal to the
    continuous-market computation of :func:`sim.stick_and_carrot`). The grid holds the collusive,
    deviation and punishment levels, so both hold exactly on it."""
    named = named_thresholds(duopoly)
    assert named["grim"] == pytest.approx(9 / 17, rel=1e-12)
    assert named["stick_carrot"] == pytest.approx(9 / 32, rel=1e-9)
    assert named["stick_carrot"] == pytest.approx(sim.stick_and_carrot(DUOPOLY).market, rel=1e-9)
    assert named["two_phase"] <= named["stick_carrot"]


def test_lowest_threshold_interval(duopoly):
    """Any punishment: no equilibrium payoff is below the minmax (zero), so the agreement needs
    (1 - d) (pi_D - pi_C) <= d pi_C, d >= (pi_D - pi_C) / pi_D = 1 - (81/8) / (729/64) = 1/9 (closed
    form); asymmetric optimal penal codes (Abreu, 1988) go well below the symmetric 9/32."""
    t = lowest_threshold(duopoly, tol=2e-3)
    assert 1 / 9 - 1e-12 <= t.low <= t.high <= 9 / 32
    assert t.high - t.low <= 2e-3
    assert t.high < 0.2
    verdicts = dict(t.evaluations)
    assert all(v == "refuted" for d, v in verdicts.items() if d <= t.low)
    assert verdicts[t.high] == "sustained"
    back = AgreementThreshold.from_dict(json.loads(json.dumps(t.to_dict(), allow_nan=False)))
    assert json.dumps(back.to_dict()) == json.dumps(t.to_dict())


def test_frontier_and_penal_codes(duopoly):
    """At delta = 0.4, above the any-punishment threshold, the joint-profit maximum is sustained: best
    joint profit (a - c)^2 / 4b = 20.25 and best symmetric payoff 10.125 (closed forms)."""
    r = equilibrium_payoffs(duopoly, 0.4)
    fr = sustainable_frontier(r)
    assert fr.joint == pytest.approx((20.25, 20.25), abs=1e-6)
    assert fr.symmetric == pytest.approx((10.125, 10.125), abs=1e-6)
    assert np.all(fr.per_firm_best[:, 0] <= fr.per_firm_best[:, 1] + 1e-9)
    assert np.all(fr.pareto.sum(axis=1) <= 20.25 + 1e-9)
    back = Frontier.from_dict(json.loads(json.dumps(fr.to_dict(), allow_nan=False)))
    assert json.dumps(back.to_dict()) == json.dumps(fr.to_dict())
    codes = penal_codes(r, duopoly, n_periods=5)
    assert [c.firm for c in codes] == [0, 1]
    for c in codes:
        assert c.worst_low <= c.worst_high <= c.worst_low + 10 * r.tol
        rebuilt = PenalCode.from_dict(json.loads(json.dumps(c.to_dict(), allow_nan=False)))
        assert json.dumps(rebuilt.to_dict()) == json.dumps(c.to_dict())


@pytest.mark.slow
def test_grid_refinement_table():
    """The table recomputes every answer per grid; the closed-form bounds hold on each grid."""
    table = grid_refinement(DUOPOLY, 0.4, n_actions=(8, 12), threshold_tol=5e-3)
    assert [r.n_actions for r in table.rows] == [(8, 8), (12, 12)]
    for row in table.rows:
        assert 1 / 9 - 1e-12 <= row.threshold[0] <= row.threshold[1] <= 9 / 32
        assert row.grim == pytest.approx(9 / 17) and row.stick_carrot == pytest.approx(9 / 32)
        assert row.joint == pytest.approx((20.25, 20.25), abs=1e-6)
    back = GridRefinement.from_dict(json.loads(json.dumps(table.to_dict(), allow_nan=False)))
    assert json.dumps(back.to_dict()) == json.dumps(table.to_dict())


def test_agreement_never_sustained():
    """A profile that pays a firm less than its minmax can never be sustained: the interval is empty
    below the upper discount factor tried (``high`` is nan, ``low`` the upper end)."""
    game = game_from_payoffs([[[9, 9], [1, 10]], [[10, 1], [3, 3]]])
    t = lowest_threshold(game, (0, 1))
    assert math.isnan(t.high) and t.low == pytest.approx(0.999)


@pytest.mark.parametrize("call, key", [
    (lambda g: lowest_threshold(g, "monopoly"), "payoff_set.agreement"),
    (lambda g: lowest_threshold(g, (0, 99)), "payoff_set.agreement"),
    (lambda g: lowest_threshold(g, (0,)), "payoff_set.agreement"),
    (lambda g: lowest_threshold(g, tol=0.0), "payoff_set.threshold_tol"),
    (lambda g: lowest_threshold(g, upper=1.0), "payoff_set.upper"),
    (lambda g: penal_codes(equilibrium_payoffs(g, 0.5), g, n_periods=0), "payoff_set.periods"),
    (lambda g: grid_refinement(DUOPOLY, 0.5, n_actions=()), "payoff_set.n_actions"),
    (lambda g: grid_refinement(DUOPOLY, 1.5), "payoff_set.delta"),
])
def test_bad_input(call, key):
    game = discretize(DUOPOLY, 8)
    with pytest.raises(InputError) as err:
        call(game)
    assert err.value.key == key and "\n" not in str(err.value)
