"""Price competition with capacity constraints (sim.models.capacity_pricing).

Sources of the checks (beside each test):
* Kreps and Scheinkman (1983), "Quantity precommitment and Bertrand competition yield Cournot
  outcomes", Bell Journal of Economics 14(2); Osborne and Pitchik (1986), "Price competition in a
  capacity-constrained duopoly", Journal of Economic Theory 38(2): the duopoly's mixed equilibrium.
* Hirata (2009), "Asymmetric Bertrand-Edgeworth oligopoly and mergers", B.E. Journal of Theoretical
  Economics 9(1); De Francesco and Salvadori (2010), "Bertrand-Edgeworth games under oligopoly with a
  complete characterization for the triopoly" (MPRA working paper): the largest firm earns its
  residual-monopoly profit with any number of firms (from memory).
* Compte, Jenny and Rey (2002), "Capacity constraints, mergers and collusion", European Economic
  Review 46(1) (abstract read; the thresholds derived below from the model it describes).
* Brock and Scheinkman (1985), "Price setting supergames with capacity constraints", Review of
  Economic Studies 52(3) (abstract read: the sustainable outcome is not monotonic in the number of
  firms). The issue cites it as RAND 16(3); the published record is the Review of Economic Studies.
* pygambit (the Gambit project's Python interface, a general-purpose game solver from the package
  registry): the grid games solved independently.
"""

import inspect
import json
import math

import numpy as np
import pytest

from sim.core.errors import InputError
from sim.models._capacity_numeric import price_bounds
from sim.models._linsolve import lu_factor, lu_factor_reference, lu_solve, lu_solve_reference
from sim.models.capacity_pricing import (
    Agreement,
    CapacityChange,
    CapacityPricing,
    CollusionAnalysis,
    StaticEquilibrium,
)


def linear(cap, v=10.0, M=10.0, c=0.0, **kw):
    return CapacityPricing(cap, reservation_price=v, market_size=M, cost=c, demand="linear", **kw)


def inelastic(cap, v=10.0, M=80.0, c=0.0, **kw):
    return CapacityPricing(cap, reservation_price=v, market_size=M, cost=c, demand="inelastic", **kw)


# --------------------------------------------------------------------------------------------------
# One period: rationing and ties
# --------------------------------------------------------------------------------------------------


def test_rationing_worked_by_hand():
    """D(p) = 10 - p, capacities (4, 3, 5), prices (2, 5, 5). Firm 1 at 2 sells 4 (D = 8). Efficient
    rationing (Levitan and Shubik, 1972): D(5) - 4 = 1 is left, shared 3:5 by the tied firms.
    Proportional rationing (Beckmann, 1965): half the consumers (4 of 8) were served, so
    0.5 * D(5) = 2.5 is left, shared 3:5."""
    p = [2.0, 5.0, 5.0]
    eff = linear([4.0, 3.0, 5.0])
    prop = linear([4.0, 3.0, 5.0], rationing="proportional")
    np.testing.assert_allclose(eff.sales(p), [4.0, 0.375, 0.625], rtol=0, atol=1e-15)
    np.testing.assert_allclose(prop.sales(p), [4.0, 0.9375, 1.5625], rtol=0, atol=1e-15)
    np.testing.assert_allclose(eff.profits(p), [8.0, 1.875, 3.125], rtol=0, atol=1e-14)
    # the residual demand firm 3 faces once firm 1 has sold
    assert eff.residual_demand(p, 2) == pytest.approx(1.0)
    assert prop.residual_demand(p, 2) == pytest.approx(2.5)


def test_tie_weights_fill_up_to_capacity():
    """Weights 1:1:2 on a tied level with 6 units demanded and capacities (1, 4, 4): firm 1 would get
    1.5 > 1, so it sells its capacity 1 and the other 5 units go 1:2 -- water filling, by hand."""
    m = inelastic([1.0, 4.0, 4.0], M=6.0)
    q = m.sales([5.0, 5.0, 5.0], weights=[1.0, 1.0, 2.0])
    np.testing.assert_allclose(q, [1.0, 5.0 / 3.0, 10.0 / 3.0], rtol=1e-15)
    q_ref, _ = m.play_period([5.0, 5.0, 5.0], weights=[1.0, 1.0, 2.0])
    np.testing.assert_allclose(q_ref, q, rtol=1e-15)


@pytest.mark.parametrize("rationing", ["efficient", "proportional"])
@pytest.mark.parametrize("demand", ["linear", "inelastic"])
def test_reference_period_matches_vectorised_sales(rng, rationing, demand):
    m = CapacityPricing([5.0, 3.0, 2.0, 4.0], reservation_price=10.0, market_size=9.0, demand=demand,
                        rationing=rationing)
    P = rng.choice([1.0, 2.0, 3.0, 4.0, 9.0, 11.0], size=(400, 4))
    for w in (None, rng.uniform(0.5, 2.0, 4)):
        fast = m.sales(P, w)
        ref = np.array([m.play_period(p, w)[0] for p in P])
        np.testing.assert_array_equal(fast, ref)
        assert np.all(fast <= m.spec().capacity + 1e-12)


def test_linear_solver_matches_its_plain_python_twin(rng):
    for m in (1, 5, 23):
        A = rng.normal(size=(m, m)) + m * np.eye(m)
        b = rng.normal(size=m)
        lu = A.copy()
        piv, singular = lu_factor(lu)
        x = lu_solve(lu, piv, b)
        lu2 = A.tolist()
        piv2, singular2 = lu_factor_reference(lu2)
        x2 = lu_solve_reference(lu2, piv2, b.tolist())
        assert not singular and not singular2
        assert piv.tolist() == piv2
        np.testing.assert_array_equal(x, np.array(x2))
        # and it solves the system (numpy's solver as the outside reference)
        np.testing.assert_allclose(x, np.linalg.solve(A, b), rtol=1e-10, atol=1e-12)


# --------------------------------------------------------------------------------------------------
# Static equilibrium
# --------------------------------------------------------------------------------------------------


def test_pure_equilibrium_regions():
    """Kreps and Scheinkman (1983): with D(p) = a - b Q... here P(Q) = 10 - Q, capacities so small
    that P(K) - c >= b k_max clear the market at P(K); capacities so large that the rivals of every
    firm cover D(c) give price = cost."""
    small = linear([2.0, 3.0])  # P(5) = 5 >= 3
    eq = small.static_equilibrium()
    assert eq.kind == "market_clearing"
    np.testing.assert_allclose(eq.support_low, [5.0, 5.0])
    np.testing.assert_allclose(eq.payoffs, [10.0, 15.0])
    large = linear([10.0, 10.0, 3.0])
    assert large.static_equilibrium().kind == "cost_pricing"
    assert np.all(large.static_equilibrium().payoffs == 0)
    assert linear([6.0, 4.0]).static_equilibrium().kind == "mixed"
    # proportional rationing needs P(K) >= monopoly price (Davidson and Deneckere, 1986)
    assert linear([2.0, 3.0], rationing="proportional").static_equilibrium().kind == "market_clearing"
    assert linear([3.0, 3.0], rationing="proportional").static_equilibrium().kind == "mixed"
    assert inelastic([30.0, 40.0], M=80.0).static_equilibrium().kind == "market_clearing"


def _duopoly_closed_form(a, b, c, k1, k2):
    """Kreps and Scheinkman (1983), Osborne and Pitchik (1986), written here from the papers (from
    memory) for P(Q) = a - b Q and k1 >= k2 in the mixed region where the larger firm's residual
    monopoly is unconstrained: p_high = (a + c - b k2) / 2, payoff_1 = (a - c - b k2)^2 / (4 b);
    p_low solves (p_low - c) min(k1, D(p_low)) = payoff_1: c + payoff_1 / k1 when the larger firm
    cannot serve the whole demand there, else the smaller root of (p - c)(a - p) / b = payoff_1;
    payoff_2 = (p_low - c) min(k2, D(p_low))."""
    p_high = (a + c - b * k2) / 2.0
    pay1 = (a - c - b * k2) ** 2 / (4.0 * b)
    p_low = c + pay1 / k1
    if (a - p_low) / b < k1:
        p_low = ((a + c) - math.sqrt((a - c) ** 2 - 4.0 * b * pay1)) / 2.0
    return p_high, p_low, pay1, (p_low - c) * min(k2, (a - p_low) / b)


@pytest.mark.parametrize("k1,k2,c", [(6.0, 4.0, 0.0), (5.0, 5.0, 1.0), (7.0, 3.5, 0.5), (8.0, 5.0, 1.0),
                                     (8.0, 6.0, 2.0)])
def test_duopoly_against_the_closed_form(k1, k2, c):
    m = linear([k2, k1], c=c)  # the larger firm second: the order must not matter
    eq = m.static_equilibrium()
    assert eq.kind == "mixed" and eq.method == "closed_form"
    p_high, p_low, pay1, pay2 = _duopoly_closed_form(10.0, 1.0, c, k1, k2)
    np.testing.assert_allclose(eq.support_low, [p_low, p_low], rtol=1e-12)
    np.testing.assert_allclose(eq.support_high, [p_high, p_high], rtol=1e-12)
    np.testing.assert_allclose(eq.payoffs, [pay2, pay1], rtol=1e-12)
    # the larger firm has an atom at p_high when capacities differ (Osborne and Pitchik, 1986)
    assert (eq.atoms[1] > 0.01) == (k1 > k2) and eq.atoms[0] == 0.0


def test_duopoly_distributions_make_the_rival_indifferent():
    """Definition of the mixed equilibrium: against the rival's distribution every price of the
    support earns the equilibrium payoff, and no price earns more. The expected profit of firm i at
    price p is computed here by integrating over the rival's distribution (its cdf on a fine grid
    and its atom), independently of the formulas of the module."""
    m = linear([6.0, 4.0])
    eq = m.static_equilibrium()
    grid = np.linspace(eq.support_low[0], eq.support_high[0], 4001)
    F = eq.cdf_at(grid)
    mass = np.diff(np.concatenate([np.zeros((2, 1)), F], axis=1), axis=1)
    mass[:, -1] = 1.0 - F[:, -2]  # the top point carries the atom
    for i in range(2):
        j = 1 - i
        for p in np.linspace(eq.support_low[i] + 1e-6, eq.support_high[i] - 1e-6, 9).tolist() + [0.5, 4.0]:
            prof = np.empty((grid.size, 2))
            prof[:, i] = p
            prof[:, j] = grid
            e = (m.profits(prof)[:, i] * mass[j]).sum()
            inside = eq.support_low[i] < p < eq.support_high[i]
            if inside:
                assert e == pytest.approx(eq.payoffs[i], rel=2e-3)
            else:
                assert e <= eq.payoffs[i] * (1 + 2e-3)


def _grid_game(m, G):
    import pygambit as gbt

    lo, hi = price_bounds(m.spec())
    grid = np.linspace(lo, hi, G)
    n = m.spec().n_firms
    P = np.stack(np.meshgrid(*([grid] * n), indexing="ij"), axis=-1)
    pi = m.profits(P)
    return gbt, gbt.Game.from_arrays(*[pi[..., i] for i in range(n)]), grid


def test_duopoly_against_a_general_game_solver():
    """The grid game solved by Gambit's linear-complementarity method (pygambit.nash.lcp_solve):
    its payoffs approach the closed form up to the grid's undercutting step (tolerance: one grid
    step times the firm's capacity, the most a one-step undercut can change a payoff)."""
    m = linear([6.0, 4.0])
    gbt, game, grid = _grid_game(m, 61)
    eq = gbt.nash.lcp_solve(game, rational=False, stop_after=1).equilibria[0]
    pay = np.array([float(eq.payoff(p)) for p in game.players])
    closed = m.static_equilibrium().payoffs
    step = grid[1] - grid[0]
    assert np.all(np.abs(pay - closed) <= step * m.spec().capacity + 1e-9)
    numeric = m.static_equilibrium(method="numeric")
    assert np.all(np.abs(numeric.payoffs - closed) <= 1e-2 * closed)
    assert numeric.max_gain < 0.03


def test_three_firms_against_a_general_game_solver():
    """Three firms on an 11-price grid solved by Gambit's logit-path method
    (pygambit.nash.logit_solve) and by the module's own quantal-response path. The module's profile
    is checked to be an equilibrium of the grid game with the full payoff table (no firm gains more
    than 0.1 % of the largest payoff by switching price), and the payoffs agree with Gambit's: to
    0.2 % for the two larger firms; to 1 % for the smallest, whose mixing is not pinned down as
    tightly (asymmetric triopolies can have a continuum of equilibria, Hirata, 2009)."""
    m = linear([5.0, 3.0, 2.0])
    gbt, game, grid = _grid_game(m, 11)
    eq = gbt.nash.logit_solve(game, use_strategic=True).equilibria[0]
    pay = np.array([float(eq.payoff(p)) for p in game.players])
    from sim.models._capacity_numeric import _ConfigGame, solve_grid_game

    sig = solve_grid_game(_ConfigGame(m.spec(), grid))
    P = np.stack(np.meshgrid(grid, grid, grid, indexing="ij"), axis=-1)
    pi = m.profits(P)
    own = np.array([np.einsum("abc,a,b,c->", pi[..., i], *sig) for i in range(3)])
    dev = [np.einsum("abc,b,c->a", pi[..., 0], sig[1], sig[2]).max(),
           np.einsum("abc,a,c->b", pi[..., 1], sig[0], sig[2]).max(),
           np.einsum("abc,a,b->c", pi[..., 2], sig[0], sig[1]).max()]
    assert np.max(np.array(dev) - own) <= 1e-3 * own.max()
    np.testing.assert_allclose(own[:2], pay[:2], rtol=2e-3)
    assert own[2] == pytest.approx(pay[2], rel=1e-2)


@pytest.mark.parametrize("cap", [[5.0, 3.0, 2.0], [4.0, 3.0, 2.0, 1.5], [3.0, 2.5, 2.0, 1.5, 1.2]])
def test_largest_firm_earns_its_residual_monopoly_profit(cap):
    """Hirata (2009); De Francesco and Salvadori (2010): with any number of firms the largest firm's
    equilibrium payoff is max_p (p - c) min(k_L, D(p) - (K - k_L)). Linear demand P = 10 - Q: the
    residual is 10 - (K - k_L) - p, so the payoff is (10 - K + k_L)^2 / 4 (unconstrained here).
    Tolerance 1 %: the numeric equilibrium is that of an 81-price grid (a firm undercuts by one grid
    step, about 1/80 of the support)."""
    m = linear(cap)
    eq = m.static_equilibrium()
    assert eq.method == "numeric"
    K, kL = sum(cap), max(cap)
    closed = (10.0 - K + kL) ** 2 / 4.0
    assert (10.0 - K + kL) / 2.0 <= kL  # unconstrained: D(p_high) - (K - k_L) <= k_L
    L = int(np.argmax(cap))
    assert eq.payoffs[L] == pytest.approx(closed, rel=1e-2)
    assert eq.max_gain < 0.03
    assert eq.support_high[L] == pytest.approx((10.0 - K + kL) / 2.0, rel=2e-2)


def test_largest_firm_inelastic_demand_three_firms():
    """Same result with inelastic demand (Compte, Jenny and Rey, 2002, for the largest firm):
    (v - c)(M - (K - k_L)) = 10 * (60 - 50) = 100."""
    eq = inelastic([50.0, 30.0, 20.0], M=60.0).static_equilibrium()
    assert eq.payoffs[0] == pytest.approx(100.0, rel=1e-2)


# --------------------------------------------------------------------------------------------------
# Collusion: Compte, Jenny and Rey (2002); Brock and Scheinkman (1985)
# --------------------------------------------------------------------------------------------------


def _cjr(cap, M):
    """Compte, Jenny and Rey (2002), inelastic demand M up to v, zero cost, collusion at v with shares
    proportional to capacity, K > M. With alpha_i = k_i / K:

    * collusive profit pi_C = v alpha_i M; deviation pi_D = v min(k_i, M) (undercut and sell to
      capacity);
    * punishment: the minmax, v max(0, M - (K - k_i)) (the rivals price at zero and sell first);
    * threshold (pi_D - pi_C) / (pi_D - pi_P). If the rivals cover the market (K - k_i >= M) this is
      1 - alpha_i M / min(k_i, M) = 1 - M / K when k_i <= M. Otherwise
      (min(k_i, M) - k_i M / K) / (min(k_i, M) - M + K - k_i) = min(k_i, M) / K.

    The market threshold is the largest: max(min(k_L, M) / K, 1 - M / K) when k_L <= M, where the
    first term (the largest firm's capacity share) binds exactly when the largest firm's rivals
    cannot serve the market. For the largest firm the static payoff equals the minmax, so Nash
    reversion gives it the same threshold. When k_L <= M the smaller firms' static payoffs are
    p_low k_i with p_low = v (M - K + k_L) / k_L, and their Nash-reversion thresholds are k_L / K as
    well: (k_i - k_i M / K) / (k_i - k_i (M - K + k_L) / k_L) = k_L / K."""
    k = np.asarray(cap, float)
    K = k.sum()
    out = []
    for ki in k:
        if K - ki >= M:
            out.append(1.0 - ki * M / K / min(ki, M))
        else:
            out.append(min(ki, M) / K)
    return np.array(out)


@pytest.mark.parametrize("cap,M", [([60.0, 40.0], 80.0), ([70.0, 25.0], 60.0), ([30.0, 30.0, 30.0], 50.0),
                                   ([40.0, 30.0, 30.0], 80.0), ([50.0, 30.0, 20.0], 60.0),
                                   ([25.0, 25.0, 25.0, 25.0], 80.0), ([45.0, 25.0, 15.0, 15.0], 90.0)])
def test_compte_jenny_rey_thresholds(cap, M):
    a = inelastic(cap, M=M).critical_discount_factors()
    expected = _cjr(cap, M)
    np.testing.assert_allclose(a.harshest, expected, rtol=1e-12)
    assert a.harshest_market == pytest.approx(expected.max(), rel=1e-12)
    K, kL = sum(cap), max(cap)
    L = int(np.argmax(cap))
    if K - kL < M:  # Nash reversion is the largest firm's harshest punishment
        assert a.nash_is_minmax[L]
        assert a.grim[L] == pytest.approx(min(kL, M) / K, abs=2e-3)
        if kL <= M:  # and every firm's Nash-reversion threshold is k_L / K
            assert a.grim_market == pytest.approx(kL / K, abs=2e-3)


def test_compte_jenny_rey_merger_that_equalises_capacities_eases_collusion():
    """Compte, Jenny and Rey (2002): the threshold is the largest firm's capacity share, so a
    transfer from the largest firm to a smaller one lowers it; HHI-type reasoning would say the
    opposite of nothing here. (50, 30, 20) -> (40, 40, 20): 0.5 -> 0.4."""
    before = inelastic([50.0, 30.0, 20.0], M=70.0)
    after = before.move_capacity(1, 10.0, target=2)
    change = before.compare(after, "transfer")
    assert change.after.harshest_market == pytest.approx(0.4)
    assert change.before.harshest_market == pytest.approx(0.5)
    assert change.symmetry_after["largest_share"] < change.symmetry_before["largest_share"]
    assert change.harshest_change == pytest.approx(-0.1)


def test_brock_scheinkman_symmetric_firms():
    """Symmetric firms of capacity k = 10, inelastic demand M = 38 (Brock and Scheinkman, 1985, the
    symmetric case): with (n - 1) k < M < n k the static payoff is v (M - (n-1) k) and the
    threshold is 1 / n; with (n - 1) k >= M it is 1 - M / (n k). n = 4: 1/4; n = 5: 1 - 38/50 =
    0.24 (lower: an extra firm eases collusion here); n = 6: 1 - 38/60 (higher): not monotonic in n."""
    got = [inelastic([10.0] * n, M=38.0).critical_discount_factors().grim_market for n in (4, 5, 6)]
    np.testing.assert_allclose(got, [0.25, 0.24, 1.0 - 38.0 / 60.0], rtol=1e-9)
    assert got[1] < got[0] < got[2]
    # with three firms (K = 30 < 38) every firm sells its capacity: there is nothing to collude on
    with pytest.raises(InputError) as err:
        inelastic([10.0] * 3, M=38.0).critical_discount_factors()
    assert err.value.key == "market.capacity"


def test_linear_demand_collusion_by_hand():
    """Linear demand D = 10 - p, zero cost, capacities (6, 4): the joint-profit price 5 sells 5,
    shared 3 : 2; firm 1 deviates to just below 5 selling min(6, 5) = 5 (profit 25), firm 2 sells
    4 (profit 20). Nash payoffs (9, 6) from the closed form. Grim: (25 - 15)/(25 - 9) = 0.625 and
    (20 - 10)/(20 - 6) = 5/7."""
    a = linear([6.0, 4.0]).critical_discount_factors()
    np.testing.assert_allclose(a.agreement.profits, [15.0, 10.0])
    np.testing.assert_allclose(a.deviation_profits, [25.0, 20.0])
    np.testing.assert_allclose(a.grim, [0.625, 5.0 / 7.0])
    assert a.grim_binding == 1 and a.binding_name == "Firm 2"
    equal = linear([6.0, 4.0]).critical_discount_factors(rule="equal")
    np.testing.assert_allclose(equal.agreement.quantities, [2.5, 2.5])
    given = linear([6.0, 4.0]).critical_discount_factors(rule="given", shares=[0.7, 0.3])
    np.testing.assert_allclose(given.agreement.quantities, [3.5, 1.5])


# --------------------------------------------------------------------------------------------------
# Capacity changes
# --------------------------------------------------------------------------------------------------


def test_capacity_changes():
    m = inelastic([40.0, 30.0, 20.0, 10.0], names=["A", "B", "C", "D"])
    merged = m.merge(["B", "D"])
    assert merged.spec().names == ("A", "B + D", "C")
    np.testing.assert_allclose(merged.spec().capacity, [40.0, 40.0, 20.0])
    out = m.move_capacity("A", 15.0)
    assert out.spec().names[-1] == "Entrant"
    np.testing.assert_allclose(out.spec().capacity, [25.0, 30.0, 20.0, 10.0, 15.0])
    moved = m.move_capacity(1, 5.0, target="D")
    np.testing.assert_allclose(moved.spec().capacity, [35.0, 30.0, 20.0, 15.0])
    with pytest.raises(InputError) as err:
        m.move_capacity("A", 40.0)
    assert err.value.key == "change.amount"
    with pytest.raises(InputError) as err:
        m.merge(["A", "Z"])
    assert err.value.key == "merger.firms"


# --------------------------------------------------------------------------------------------------
# Bad input, parameters and serialisation
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kwargs,key", [
    ({"capacity": [1.0, -2.0]}, "market.capacity"),
    ({"capacity": [5.0]}, "market.capacity"),
    ({"capacity": 5.0}, "market.capacity"),
    ({"reservation_price": 1.0, "cost": 1.0}, "market.reservation_price"),
    ({"reservation_price": 1.0, "cost": 2.0}, "market.reservation_price"),
    ({"rationing": "random"}, "market.rationing"),
    ({"demand": "quadratic"}, "market.demand"),
    ({"names": ["A", "A"]}, "market.names"),
])
def test_bad_input_names_the_key(kwargs, key):
    params = {"capacity": [5.0, 4.0], "reservation_price": 10.0, "market_size": 8.0}
    params.update(kwargs)
    with pytest.raises(InputError) as err:
        CapacityPricing(**params).spec()
    assert err.value.key == key
    assert "\n" not in str(err.value)


def test_capacities_that_do_not_cover_demand():
    m = inelastic([20.0, 30.0], M=80.0)
    assert m.static_equilibrium().kind == "market_clearing"
    with pytest.raises(InputError) as err:
        m.critical_discount_factors()
    assert err.value.key == "market.capacity" and "does not exceed" in err.value.message
    with pytest.raises(InputError) as err:
        linear([6.0, 4.0]).agreement(price=0.0)
    assert err.value.key == "collusion.price"
    # the second firm's share 0.9 of the 5 units demanded at the joint-profit price is 4.5 > 4
    with pytest.raises(InputError) as err:
        linear([6.0, 4.0]).agreement(rule="given", shares=[0.1, 0.9])
    assert err.value.key == "collusion.shares" and "capacity" in err.value.message
    with pytest.raises(InputError) as err:
        linear([6.0, 4.0]).agreement(rule="given", shares=[0.5, 0.4])
    assert err.value.key == "collusion.shares"
    with pytest.raises(InputError) as err:
        linear([6.0, 4.0]).agreement(rule="cartel")
    assert err.value.key == "collusion.rule"


def test_parameters_are_declared_and_clone():
    names = [p for p in inspect.signature(CapacityPricing.__init__).parameters if p != "self"]
    assert set(names) == set(CapacityPricing._constraints)
    m = linear([6.0, 4.0])
    twin = m.clone()
    assert twin == m and twin is not m
    assert CapacityPricing.from_dict(m.to_dict()) == m
    with pytest.raises(InputError) as err:
        CapacityPricing.from_dict({"capacity": [1.0, 2.0], "size": 3})
    assert err.value.key == "market.size"


def test_results_round_trip_through_json():
    a = inelastic([40.0, 30.0, 30.0]).critical_discount_factors()
    back = CollusionAnalysis.from_dict(json.loads(json.dumps(a.to_dict())))
    assert back.to_dict() == a.to_dict()
    eq = linear([6.0, 4.0]).static_equilibrium()
    assert StaticEquilibrium.from_dict(json.loads(json.dumps(eq.to_dict()))).to_dict() == eq.to_dict()
    ag = a.agreement
    assert Agreement.from_dict(json.loads(json.dumps(ag.to_dict()))).to_dict() == ag.to_dict()
    m = inelastic([50.0, 30.0, 20.0], M=70.0)
    ch = m.compare(m.move_capacity(1, 10.0, target=2), "transfer")
    assert CapacityChange.from_dict(json.loads(json.dumps(ch.to_dict()))).to_dict() == ch.to_dict()
    assert math.isclose(ch.grim_change, ch.after.grim_market - ch.before.grim_market)


def test_kiln_merger_with_a_capacity_transfer_changes_the_binding_firm():
    """An invented region supplied with lime by four kilns (capacities 400, 350, 350, 200 kt a year),
    linear demand with reservation price 120 and 1,000 kt at price zero, cost 40. The joint-profit
    price is (120 + 40) / 2 = 80, where 1000 (1 - 80/120) = 1000/3 kt sell. The rivals of every kiln
    could serve the whole demand at cost (K - k_max = 900 >= D(40) = 2000/3): the static price is
    the cost and every punishment payoff is 0. So (Friedman, 1971, grim trigger; worked by hand)
    delta_i = 1 - pi_C / pi_D with pi_C = 40 (k_i / K) D(80) and pi_D = 40 min(k_i, D(80)):
    kilns of at least 1000/3 kt: 1 - k_i / K; smaller kilns: 1 - D(80) / K.
    Before (K = 1300): A 9/13, B and C 1 - 350/1300, D 1 - 1000/3900 -- D binds (0.744).
    Kilns A and B merge and 250 kt of the merged capacity goes to D: (500, 350, 450). Every kiln is
    now at least 1000/3 kt: 1 - k_i / 1300, and C (350) binds (0.731)."""
    m = CapacityPricing([400.0, 350.0, 350.0, 200.0], reservation_price=120.0, market_size=1000.0, cost=40.0,
                        demand="linear", names=["Kiln A", "Kiln B", "Kiln C", "Kiln D"])
    post = m.merge(["Kiln A", "Kiln B"]).move_capacity("Kiln A + Kiln B", 250.0, target="Kiln D")
    ch = m.compare(post, "A and B merge; 250 kt of the merged capacity goes to D")
    K, Dc = 1300.0, 1000.0 / 3.0
    np.testing.assert_allclose(ch.before.grim, [1 - 400 / K, 1 - 350 / K, 1 - 350 / K, 1 - Dc / K], rtol=1e-12)
    np.testing.assert_allclose(ch.after.grim, [1 - 500 / K, 1 - 350 / K, 1 - 450 / K], rtol=1e-12)
    assert ch.binding_before == "Kiln D" and ch.binding_after == "Kiln C" and ch.binding_changed
    assert ch.before.grim_ties == (3,) and ch.after.grim_ties == (1,)
    assert ch.easier  # 0.744 -> 0.731
    # without the transfer the merged kiln's rivals no longer cover demand at cost: a mixed equilibrium
    assert m.merge(["Kiln A", "Kiln B"]).static_equilibrium().kind == "mixed"


def test_reference_period_compiles_with_numba_to_the_same_bits(rng):
    """The plain-Python one-period play is written for a numba stage core: compiled as it stands
    (its helpers compiled too) it must give bit-identical sales and profits."""
    import inspect

    import numba

    from sim.models import _capacity_reference as ref

    ns = {"_quantity": numba.njit(ref._quantity), "_share": numba.njit(ref._share), "STATUS_OK": ref.STATUS_OK,
          "STATUS_BAD_INPUT": ref.STATUS_BAD_INPUT}
    exec(inspect.getsource(ref.play_period), ns)
    compiled = numba.njit(ns["play_period"])
    cap = np.array([5.0, 3.0, 2.0, 4.0])
    for demand_code in (0, 1):
        for rationing_code in (0, 1):
            for _ in range(50):
                p = rng.choice([1.0, 2.5, 3.0, 4.0, 9.0, 11.0], size=4)
                w = rng.uniform(0.5, 2.0, 4)
                out_py = [np.zeros(4), np.zeros(4)]
                out_nb = [np.zeros(4), np.zeros(4)]
                s1 = ref.play_period(p, cap, w, 0.5, demand_code, 10.0, 9.0, rationing_code, np.zeros(4, np.int64),
                                     *out_py)
                s2 = compiled(p, cap, w, 0.5, demand_code, 10.0, 9.0, rationing_code, np.zeros(4, np.int64), *out_nb)
                assert s1 == s2 == ref.STATUS_OK
                np.testing.assert_array_equal(out_py[0], out_nb[0])
                np.testing.assert_array_equal(out_py[1], out_nb[1])
