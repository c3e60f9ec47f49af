"""Properties of equilibrium payoff sets on small random games (hypothesis): the bracket holds, the sets
grow with the discount factor, static Nash payoffs are inside, the best punishment beats the named
schemes, and patient firms reach the feasible individually rational payoffs (folk theorem)."""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.optimize import linprog
from scipy.spatial import ConvexHull, QhullError

from sim import LinearDemand, Market
from sim.theory.discretize import discretize, game_from_payoffs
from sim.theory.payoff_sets import equilibrium_payoffs, hausdorff_distance
from sim.theory.practice import lowest_threshold, named_thresholds

SETTINGS = settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def two_firm_games(draw, low=-5, high=10):
    n1 = draw(st.integers(2, 3))
    n2 = draw(st.integers(2, 3))
    flat = draw(st.lists(st.integers(low, high), min_size=2 * n1 * n2, max_size=2 * n1 * n2))
    return np.array(flat, float).reshape(n1, n2, 2)


def _outside(points, hull_points, tol):
    """Largest violation of membership in the hull of ``hull_points`` (0 inside), from a HiGHS
    programme per point: the smallest box slack s with |P' mu - x| <= s, mu in the simplex."""
    P = np.asarray(hull_points, float)
    worst = 0.0
    for x in np.asarray(points, float):
        k, n = P.shape
        # variables mu (k) and s; minimise s
        c = np.zeros(k + 1)
        c[-1] = 1.0
        A = np.vstack([np.hstack([P.T, -np.ones((n, 1))]), np.hstack([-P.T, -np.ones((n, 1))])])
        b = np.concatenate([x, -x])
        res = linprog(c, A_ub=A, b_ub=b, A_eq=np.append(np.ones(k), 0.0)[None, :], b_eq=[1.0],
                      bounds=[(0, None)] * (k + 1), method="highs")
        worst = max(worst, float(res.x[-1]))
    return worst if worst > tol else 0.0


@SETTINGS
@given(two_firm_games(), st.sampled_from([0.2, 0.35, 0.5, 0.65, 0.8]))
def test_bracket_and_nash_inside(P, delta):
    """Inner set inside the outer set (Abreu, Pearce and Stacchetti, 1990: self-generated sets lie in
    the equilibrium set, which lies in every iterate from the feasible set); static Nash payoffs in
    both (Nash reversion forever is an equilibrium)."""
    game = game_from_payoffs(P)
    r = equilibrium_payoffs(game, delta)
    tol = 1e-7 * game.scale
    if r.empty:
        assert game.pure_nash().size == 0
        return
    assert _outside(r.inner_vertices, r.outer_vertices, tol) == 0.0
    nash = game.flat_payoffs[[game.flat_index(p) for p in game.pure_nash()]]
    if nash.size:
        assert _outside(nash, r.outer_vertices, tol) == 0.0
        assert _outside(nash, r.inner_vertices, tol) == 0.0


@SETTINGS
@given(two_firm_games(), st.sampled_from([(0.3, 0.5), (0.5, 0.7), (0.6, 0.9)]))
def test_sets_grow_with_delta(P, deltas):
    """With public randomisation the equilibrium set grows with the discount factor (Abreu, Pearce and
    Stacchetti, 1990): inner(d1) lies in outer(d2) exactly, and each bracket lies in the other's to
    within the two accuracies."""
    game = game_from_payoffs(P)
    a, b = (equilibrium_payoffs(game, d) for d in deltas)
    assume(not a.empty and a.inner_vertices.shape[0])
    tol = 1e-7 * game.scale
    assert not b.empty
    assert _outside(a.inner_vertices, b.outer_vertices, tol) == 0.0
    assert _outside(a.outer_vertices, b.outer_vertices, tol + a.accuracy + b.accuracy) == 0.0


@pytest.mark.slow
@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(two_firm_games(0, 9), st.data())
def test_any_punishment_beats_named_schemes(P, data):
    """For every agreed profile, the lowest discount factor under any punishment is at most those of
    grim trigger, the best one-period punishment (two-phase) and the best symmetric stick and carrot
    on the same grid: each named scheme is an equilibrium, so the outer set cannot refute the
    agreement where a scheme sustains it (the bisection's lower end must stay below every named
    threshold). An upper end found by the bisection (not a named scheme's own threshold) is
    certified again here from the inner set's worst payoffs."""
    game = game_from_payoffs(P)
    assume(game.pure_nash().size)
    # agreements worth testing: each firm earns more than its minmax and some firm is tempted
    worth = np.flatnonzero(np.all(game.flat_payoffs > game.minmax, axis=1) & np.any(game.deviation_gains > 0, axis=1))
    assume(worth.size)
    k = int(worth[data.draw(st.integers(0, worth.size - 1))])
    prof = game.profile(k)
    named = named_thresholds(game, prof)
    t = lowest_threshold(game, prof, tol=0.05, set_tol=1e-6, max_iter=300)
    for name in ("grim", "two_phase", "stick_carrot"):
        if math.isfinite(named[name]):
            assert t.low <= named[name] + 1e-12
    if math.isfinite(t.high) and t.high > 0 and t.high not in (named["grim"], named["two_phase"]):
        r = equilibrium_payoffs(game, t.high, tol=1e-6, max_iter=300)
        g, gain = game.flat_payoffs[k], game.deviation_gains[k]
        assert np.all((1 - t.high) * gain <= t.high * (g - r.worst_inner) + 1e-9 * game.scale)


@settings(max_examples=8, deadline=None)
@given(st.floats(20, 100), st.floats(0.5, 5), st.integers(7, 14))
def test_stick_and_carrot_beats_grim_in_linear_cournot(a, c, n):
    """In a symmetric linear Cournot duopoly the best symmetric two-phase punishment is at least as
    severe as Nash reversion (Abreu, 1986, "Extremal equilibria of oligopolistic supergames", JET 39),
    so on a grid that holds its punishment level: any punishment <= stick and carrot <= grim."""
    game = discretize(Market(LinearDemand(a, 1.0), cost=c, n_firms=2), n)
    named = named_thresholds(game)
    assert named["stick_carrot"] <= named["grim"] + 1e-12
    t = lowest_threshold(game, tol=0.02, set_tol=1e-6, max_iter=300)
    assert t.low <= named["stick_carrot"] + 1e-12


def _feasible_rational(game):
    """Vertices of the feasible payoffs at or above the pure minmax (Sutherland-Hodgman clipping of
    the hull of the stage payoffs by the two half-planes)."""
    G = game.flat_payoffs
    poly = G[ConvexHull(G).vertices]
    for axis in (0, 1):
        m = game.minmax[axis]
        out = []
        for j in range(len(poly)):
            p, q = poly[j], poly[(j + 1) % len(poly)]
            if p[axis] >= m:
                out.append(p)
            if (p[axis] >= m) != (q[axis] >= m):
                out.append(p + (m - p[axis]) / (q[axis] - p[axis]) * (q - p))
        poly = np.array(out)
    return poly


@pytest.mark.slow
@settings(max_examples=8, deadline=None)
@given(two_firm_games())
def test_folk_theorem(P):
    """As delta tends to one the set approaches the feasible payoffs that are individually rational
    against pure minmax punishments (Fudenberg and Maskin, 1986, "The folk theorem in repeated games
    with discounting or with incomplete information", Econometrica 54; two players, pure minmax
    actions, public randomisation). Checked on games where that set has an interior: its distance to
    the equilibrium set shrinks from delta = 0.8 to 0.95 and is below 10 % of the payoff range at
    0.95 (the tolerance is a rule of thumb for these small games, common practice, no source: the
    distance falls about in proportion to 1 - delta)."""
    game = game_from_payoffs(P)
    try:
        F = _feasible_rational(game)
        area = ConvexHull(F).volume
    except (QhullError, ValueError, IndexError):
        area = 0.0
    spread = float(np.ptp(game.flat_payoffs))
    assume(area > 0.05 * spread**2)
    far = [hausdorff_distance(equilibrium_payoffs(game, d, tol=1e-6).outer_vertices, F) for d in (0.8, 0.95)]
    assert far[1] <= far[0] + 1e-5 * game.scale
    assert far[1] <= 0.1 * spread


@settings(max_examples=6, deadline=None)
@given(st.lists(st.integers(-3, 8), min_size=24, max_size=24))
def test_three_firms_bracket(flat):
    """Three firms, two actions each, supporting hyperplanes: inner inside outer, and the static Nash
    payoffs inside the inner set (Judd, Yeltekin and Conklin, 2003: the outer approximation contains
    the equilibrium set, the inner one is made of generated payoffs)."""
    game = game_from_payoffs(np.array(flat, float).reshape(2, 2, 2, 3))
    r = equilibrium_payoffs(game, 0.6, method="directions", directions=12)
    if r.empty:
        return
    tol = 1e-7 * game.scale
    D, c = r.directions, r.outer_levels
    assert np.all(r.inner_vertices @ D.T <= c[None, :] + tol)
    nash = game.flat_payoffs[[game.flat_index(p) for p in game.pure_nash()]]
    if nash.size and r.inner_vertices.shape[0]:
        assert _outside(nash, r.inner_vertices, tol) == 0.0


@pytest.mark.xfail(strict=True, reason="known defect: an inner vertex (0.4, 4.2000366, 3.0000220) lies outside the "
                                       "outer set by 3.7e-5, above the solver's tolerance; found by the property above")
def test_three_firms_bracket_draw_that_failed():
    """A draw of :func:`test_three_firms_bracket` that fails: the inner set leaves the outer one by 3.7e-5 at
    delta 0.6 with 12 directions. Kept as a strict expected failure, so that the fix is noticed."""
    flat = [0, 5, 3, 0, 0, 0, -1, 6, 4, 0, 0, 0, 1, 0, 0, 0, 0, 3, 0, 0, 0, 2, 1, 3]
    game = game_from_payoffs(np.array(flat, float).reshape(2, 2, 2, 3))
    r = equilibrium_payoffs(game, 0.6, method="directions", directions=12)
    tol = 1e-7 * game.scale
    assert np.all(r.inner_vertices @ r.directions.T <= r.outer_levels[None, :] + tol)


@pytest.mark.parametrize("delta", [0.3, 0.6])
def test_penal_codes_reach_minmax_when_patient(delta):
    """In the linear Cournot duopoly (a = 10, c = 1) with the grid reaching the choke quantity, the
    worst payoff of a firm falls towards its minmax (zero) as delta rises (Abreu, 1988: optimal penal
    codes; the minmax bounds every equilibrium payoff from below)."""
    game = discretize(Market(LinearDemand(10, 1), cost=1.0, n_firms=2), 12)
    r = equilibrium_payoffs(game, delta)
    assert np.all(r.worst_outer >= game.minmax - 1e-7 * game.scale)
    if delta >= 0.6:
        assert np.all(r.worst_inner <= 1e-6 * game.scale)
