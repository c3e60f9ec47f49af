"""Evolutionary dynamics against published results: the Moran fixation probability with constant fitness
(Nowak, 2006, "Evolutionary Dynamics", ch. 6), the weak-selection condition of Nowak, Sasaki, Taylor and
Fudenberg (2004, Nature 428), a reference library's Moran simulation (nashpy), the replicator dynamics'
rest points (Maynard Smith, 1982, "Evolution and the Theory of Games"; Hofbauer and Sigmund, 1998,
"Evolutionary Games and Population Dynamics"), and multi-player payoffs by random group formation
(Gokhale and Traulsen, 2010, PNAS 107)."""

import math

import numpy as np
import pytest
from scipy.special import comb

from sim.core.errors import InputError
from sim.tournament.evolution import evolve
from sim.tournament.moran import (
    fixation_probabilities,
    fixation_probability,
    moran_reference,
    simulate_fixation,
    stationary_distribution,
    up_table,
)
from sim.tournament.payoffs import PayoffTable
from sim.tournament.replicator import replicator
from sim.tournament.stability import stability


def constant_ratio(r: float) -> PayoffTable:
    """Type 0 always has fitness r, type 1 fitness 1 (payoff = fitness with w = 1, linear map)."""
    return PayoffTable.from_matrix([[r, r], [1.0, 1.0]], labels=["mutant", "resident"])


def binomial_se(p: float, n: int) -> float:
    return math.sqrt(p * (1.0 - p) / n)


# --------------------------------------------------------------------------------------------------
# Moran process
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("r", [0.8, 1.05, 1.5, 3.0])
@pytest.mark.parametrize("N", [2, 7, 40])
def test_constant_fitness_formula(r, N):
    # Nowak (2006), ch. 6: rho = (1 - 1/r) / (1 - 1/r^N); the resident invading back has ratio 1/r
    rho = fixation_probabilities(constant_ratio(r), N, selection=1.0)
    assert rho[0, 1] == pytest.approx((1 - 1 / r) / (1 - r**-N), rel=1e-12)
    assert rho[1, 0] == pytest.approx((1 - r) / (1 - r**N), rel=1e-12)
    assert np.isnan(rho[0, 0]) and np.isnan(rho[1, 1])


def test_neutral_drift_is_one_over_n():
    # equal payoffs: every fitness map gives rho = 1/N (Nowak, 2006, ch. 6)
    t = PayoffTable.from_matrix([[2.0, 2.0], [2.0, 2.0]])
    for mapping in ("linear", "exponential"):
        assert fixation_probabilities(t, 25, 0.3, mapping)[0, 1] == pytest.approx(1 / 25, rel=1e-12)


@pytest.mark.parametrize("r, N", [(1.2, 10), (0.9, 6), (2.0, 30)])
def test_constant_fitness_simulation(r, N):
    # the seeded simulation against the formula; tolerance: 3 binomial standard errors of the share of
    # 20,000 runs (a gap that large has probability about 0.003 per pair)
    runs = 20_000
    fixed = simulate_fixation(constant_ratio(r), N, selection=1.0, runs=runs, seed=20261201)
    exact = fixation_probabilities(constant_ratio(r), N, selection=1.0)
    for i, j in ((0, 1), (1, 0)):
        share = fixed[i, j] / runs
        assert abs(share - exact[i, j]) <= 3 * binomial_se(exact[i, j], runs)
    assert fixed[0, 0] == -1 and fixed[1, 1] == -1


def test_simulation_kernel_equals_reference_and_threads():
    t = PayoffTable.from_matrix([[3.0, 0.5, 1.0], [4.0, 1.0, 2.0], [1.5, 1.5, 1.5]])
    pairs, up = up_table(t, 12, 0.4, "linear")
    from sim.core.rng import stream_states
    from sim.tournament.moran import MORAN_KEY

    states = stream_states(5, (MORAN_KEY,), 0, len(pairs))
    ref = moran_reference(up, 300, states)
    for threads in (1, 2):
        k = simulate_fixation(t, 12, 0.4, runs=300, seed=5, threads=threads)
        assert [k[i, j] for i, j in pairs] == ref.tolist()


def weak_selection_condition(a, b, c, d, N):
    # Nowak et al. (2004), Nature 428, eq. 4 (from memory): with weak selection rho_A > 1/N iff
    # a (N - 2) + b (2N - 1) > c (N + 1) + d (2N - 4)
    return a * (N - 2) + b * (2 * N - 1) - c * (N + 1) - d * (2 * N - 4)


def test_weak_selection_condition_of_nowak_et_al(rng):
    N = 20
    checked = 0
    for _ in range(200):
        a, b, c, d = rng.uniform(0, 4, size=4)
        margin = weak_selection_condition(a, b, c, d, N)
        if abs(margin) < 0.5:  # too close to the boundary for the first-order approximation
            continue
        rho = fixation_probabilities(PayoffTable.from_matrix([[a, b], [c, d]]), N, selection=1e-4)[0, 1]
        assert (rho > 1 / N) == (margin > 0)
        checked += 1
    assert checked > 100


def test_against_nashpy_moran_simulation():
    # nashpy (a reference library on PyPI) simulates the same birth-death process: reproduction in
    # proportion to the total payoff against everyone else, death uniform; that is fitness = mean
    # payoff, i.e. our linear map with w = 1. Tolerance: 3 binomial standard errors of 4,000 runs.
    nashpy = pytest.importorskip("nashpy")
    A = np.array([[3.0, 1.0], [4.0, 2.0]])
    N, runs = 4, 4000
    np.random.seed(20261201)  # noqa: NPY002 (nashpy draws from numpy's legacy global generator)
    est = nashpy.Game(A).fixation_probabilities(initial_population=np.array([0, 1, 1, 1]), repetitions=runs)
    share = est.get(tuple([np.int64(0)] * N), 0.0)
    rho = fixation_probabilities(PayoffTable.from_matrix(A), N, selection=1.0)[0, 1]
    assert abs(share - rho) <= 3 * binomial_se(rho, runs)


def test_fixation_probability_in_logs_is_stable():
    # strong selection against the mutant (r = 1/3): the products of g/f reach 3^(N-1), which overflows
    # plain arithmetic for large N; in logs the result is right where it is representable and underflows
    # to 0 (not nan) where it is not
    r = 1.0 / 3.0
    rho = fixation_probability(np.full(199, 1.0), np.full(199, 3.0))
    assert rho == pytest.approx((1 - 1 / r) / (1 - 3.0**200), rel=1e-9)
    with np.errstate(all="raise"):
        assert fixation_probability(np.full(1999, 1.0), np.full(1999, 3.0)) == 0.0
        assert fixation_probability(np.full(1999, 3.0), np.full(1999, 1.0)) == pytest.approx(2 / 3, rel=1e-12)


def test_stationary_distribution_two_types():
    # with rare mutations between two types the time shares are in the ratio of the fixation
    # probabilities (Fudenberg and Imhof, 2006, J. Econ. Theory 131)
    t = PayoffTable.from_matrix([[3.0, 0.0], [5.0, 1.0]])
    rho = fixation_probabilities(t, 30, 0.1)
    pi = stationary_distribution(rho)
    assert pi.sum() == pytest.approx(1.0)
    assert pi[0] / pi[1] == pytest.approx(rho[0, 1] / rho[1, 0], rel=1e-9)


# --------------------------------------------------------------------------------------------------
# Replicator dynamics
# --------------------------------------------------------------------------------------------------


def test_strictly_dominant_entrant_takes_over():
    # prisoner's dilemma (Axelrod, 1984 payoffs 3, 0, 5, 1): defection strictly dominates
    pd = PayoffTable.from_matrix([[3.0, 0.0], [5.0, 1.0]], labels=["C", "D"])
    path = replicator(pd, [0.99, 0.01], generations=3000, selection=0.2)
    assert path.final[1] > 1 - 1e-9
    assert np.all(np.diff(path.shares[:, 1]) >= 0)  # rises until it reaches 1 in floating point
    # three types, the third strictly dominant, from several interior starts
    A = np.array([[2.0, 0.0, 1.0], [3.0, 1.0, 0.5], [3.5, 1.5, 1.5]])  # row 3 beats rows 1 and 2 everywhere
    t = PayoffTable.from_matrix(A)
    for x0 in ([0.6, 0.3, 0.1], [0.1, 0.8, 0.1], [1 / 3, 1 / 3, 1 / 3]):
        for mapping in ("linear", "exponential"):
            assert replicator(t, x0, 4000, 0.3, mapping).final[2] > 1 - 1e-6


@pytest.mark.parametrize("x0", [0.05, 0.5, 0.95])
def test_interior_rest_point_hawk_dove(x0):
    # Hawk-Dove with value V = 2 and cost C = 3: the mixed ESS has a hawk share V / C (Maynard Smith, 1982);
    # for [[a, b], [c, d]] with c > a and b > d the rest point is x* = (b - d) / (b - d + c - a)
    V, C = 2.0, 3.0
    a, b, c, d = (V - C) / 2, V, 0.0, V / 2
    xstar = (b - d) / (b - d + c - a)
    assert xstar == pytest.approx(V / C)
    t = PayoffTable.from_matrix([[a, b], [c, d]], labels=["hawk", "dove"])
    for mapping, w in (("linear", 0.5), ("exponential", 1.0)):
        path = replicator(t, [x0, 1 - x0], generations=3000, selection=w, fitness_map=mapping)
        assert path.final[0] == pytest.approx(xstar, abs=1e-9)
        assert path.last_change < 1e-12
        f = t.against(path.final)
        assert f[0] == pytest.approx(f[1], abs=1e-9)  # every type present earns the mean payoff


def test_interior_rest_point_matches_nashpy_equilibrium():
    # the interior rest point of a symmetric 2x2 game is its symmetric mixed Nash equilibrium; nashpy's
    # support enumeration (a reference library) finds it independently
    nashpy = pytest.importorskip("nashpy")
    A = np.array([[1.0, 4.0], [2.0, 3.0]])
    eq = [s for s, _ in nashpy.Game(A, A.T).support_enumeration() if 0 < s[0] < 1]
    assert eq
    path = replicator(PayoffTable.from_matrix(A), [0.2, 0.8], 5000, 0.2)
    assert path.final[0] == pytest.approx(eq[0][0], abs=1e-9)


def test_replicator_keeps_absent_types_absent_and_shares_normalised():
    t = PayoffTable.from_matrix([[1.0, 2.0, 0.0], [0.5, 1.0, 3.0], [2.0, 0.0, 1.0]])
    path = replicator(t, {"type 1": 1, "type 2": 3}, 200, 0.1)
    assert np.all(path.shares[:, 2] == 0.0)
    assert np.allclose(path.shares.sum(axis=1), 1.0, atol=1e-12)
    assert path.shares[0].tolist() == [0.25, 0.75, 0.0]


# --------------------------------------------------------------------------------------------------
# Multi-player payoffs
# --------------------------------------------------------------------------------------------------


def pairwise_group(A, seats):
    """A group game whose payoff is the mean of pairwise payoffs against the rivals."""
    A = np.asarray(A, dtype=float)
    return PayoffTable.from_function(lambda i, c: sum(c[e] * A[i, e] for e in range(len(c))) / (seats - 1),
                                     A.shape[0], seats)


def test_pairwise_group_game_reduces_to_the_matrix_game(rng):
    # with payoffs averaged over pairwise encounters, random group formation gives f(x) = A x in an
    # infinite population and Nowak et al.'s (2004) finite-population payoffs (the expected number of
    # invader rivals is the same under the hypergeometric draw)
    A = rng.uniform(0, 3, size=(3, 3))
    two = PayoffTable.from_matrix(A)
    for seats in (3, 4):
        many = pairwise_group(A, seats)
        x = rng.dirichlet(np.ones(3))
        assert np.allclose(many.against(x), A @ x, rtol=1e-12)
        assert np.allclose(fixation_probabilities(many, 15, 0.2), fixation_probabilities(two, 15, 0.2),
                           rtol=1e-10, equal_nan=True)
        p2 = replicator(two, x, 50, 0.2).shares
        pn = replicator(many, x, 50, 0.2).shares
        assert np.allclose(p2, pn, rtol=1e-10, atol=1e-15)


def test_group_payoff_against_population_is_multinomial():
    # a focal earns 1 only when every rival is of its own type: against shares x that happens with
    # probability x_i^(n-1) (independent draws); in a finite population of N with k of type a, a focal a
    # meets n - 1 a's with probability C(k-1, n-1) / C(N-1, n-1) (draws without replacement)
    seats = 3
    t = PayoffTable.from_function(lambda i, c: float(c[i] == seats - 1), 3, seats)
    x = np.array([0.2, 0.5, 0.3])
    assert np.allclose(t.against(x), x**2, rtol=1e-12)
    N = 11
    pa, pb = t.finite(0, 1, N)
    k = np.arange(1, N)
    assert np.allclose(pa, comb(k - 1, 2) / comb(N - 1, 2), rtol=1e-12)
    assert np.allclose(pb, comb(N - k - 1, 2) / comb(N - 1, 2), rtol=1e-12)


# --------------------------------------------------------------------------------------------------
# Stability against the entrant set
# --------------------------------------------------------------------------------------------------


def test_stability_prisoners_dilemma_and_hawk_dove():
    pd = PayoffTable.from_matrix([[3.0, 0.0], [5.0, 1.0]], labels=["C", "D"])
    s = stability(pd, population=50, selection=0.1)
    assert s["ess"] == [False, True] and s["ess_n"] == [False, True]
    assert s["invaded_by"] == [["D"], []]
    hd = PayoffTable.from_matrix([[-0.5, 2.0], [0.0, 1.0]], labels=["hawk", "dove"])
    s = stability(hd, population=50, selection=0.1)
    assert s["ess"] == [False, False]  # the ESS is mixed (Maynard Smith, 1982)


def test_stability_second_order_condition_and_ties():
    # A[0,0] = A[1,0]: the first-order condition ties, the second decides (Maynard Smith, 1982):
    # type 0 resists type 1 because A[0,1] > A[1,1]
    t = PayoffTable.from_matrix([[2.0, 1.0], [2.0, 0.0]])
    s = stability(t, 30, 0.1)
    assert s["ess"] == [True, False]
    assert s["pairs"][0]["invaders_among_rivals"] == 1
    # a difference within the margin of its standard errors is a tie: neutral, not an ESS
    se = np.full((2, 2), 0.1)
    t = PayoffTable.from_matrix([[2.0, 1.0], [1.9, 1.0]], se=se)
    s = stability(t, 30, 0.1)
    assert s["ess"][0] is False and s["neutral"][0] is True
    t = PayoffTable.from_matrix([[2.0, 1.0], [1.9, 1.0]])
    assert stability(t, 30, 0.1)["ess"][0] is True


def test_evolve_bundle_and_bad_input():
    t = PayoffTable.from_matrix([[3.0, 0.0], [5.0, 1.0]], labels=["C", "D"])
    ev = evolve(t, generations=100, population=20, runs=2000, seed=3, selection=0.2)
    assert ev.agreement()["within"] is True
    assert ev.to_dict()["fixation"]["neutral"] == pytest.approx(1 / 20)
    with pytest.raises(InputError, match="selection: the fitness 1 - w"):
        evolve(PayoffTable.from_matrix([[-3.0, 0.0], [0.0, 1.0]]), selection=0.5)
    with pytest.raises(InputError, match=r"^tournament\.shares:"):
        evolve(t, shares=[1.0, 2.0, 3.0], prefix="tournament")
    with pytest.raises(InputError, match=r"^population:"):
        evolve(PayoffTable.from_function(lambda i, c: 1.0, 2, 3), population=2)
    with pytest.raises(InputError, match=r"^fitness:"):
        evolve(t, fitness_map="logistic")


def test_quoted_family_wise_bounds_match_the_computation():
    # the docstring of EvolutionResult.agreement quotes the Bonferroni bound for two and ten entrants; both
    # must be what the method computes: the normal quantile of 1 - 0.01 / (2 E (E - 1)) (scipy.stats.norm)
    import re

    from sim.tournament.evolution import EvolutionResult

    doc = " ".join(EvolutionResult.agreement.__doc__.split())
    quoted = re.search(r"([\d.]+) for two entrants, ([\d.]+) for ten", doc)
    assert quoted is not None
    for E, text in ((2, quoted.group(1)), (10, quoted.group(2))):
        rho = np.full((E, E), 0.5)
        np.fill_diagonal(rho, np.nan)
        sim = np.where(np.isnan(rho), -1, 50).astype(np.int64)
        res = EvolutionResult(None, None, rho, sim, 100, np.ones(E) / E, {}, {})
        z = res.agreement()["z"]
        assert round(z, len(text.split(".")[1])) == float(text), (E, z, text)
