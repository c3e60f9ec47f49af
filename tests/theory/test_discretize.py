"""Discretised stage games: payoff arrays, best replies, minmax and the key levels on the grid,
checked against profile-by-profile evaluation of the market and closed forms."""

import json

import numpy as np
import pytest

from sim import LinearDemand, Market, stage_game
from sim.core.errors import InputError
from sim.models.demand import DifferentiatedDemand, LogitDemand
from sim.theory.discretize import DiscreteGame, action_grid, discretize, estimate_game_bytes, game_from_payoffs


@pytest.mark.parametrize("market", [
    Market(LinearDemand(10, 1), cost=[1.0, 2.0]),
    Market(LinearDemand(10, 1), cost=1.0, n_firms=3),
    Market(DifferentiatedDemand([10, 9], 1.0, 0.5), cost=[1.0, 1.5], model="bertrand"),
    Market(LogitDemand([2.0, 2.2], 0.0, 0.25), cost=[1.0, 1.1], model="bertrand"),
], ids=["cournot-2", "cournot-3", "diff-bertrand", "logit"])
def test_payoffs_and_best_replies_match_one_profile_at_a_time(market):
    """The batched payoff array equals the market evaluated one profile at a time, and the best
    replies equal a brute-force maximum over each firm's own actions."""
    g = discretize(market, 6)
    ms = market.spec()
    for idx in np.ndindex(g.shape):
        a = g.actions(idx)
        assert np.allclose(g.payoffs[idx], ms.firm_profits(a[None, :])[0], rtol=1e-13, atol=1e-13)
        for i in range(g.n_firms):
            best = max(g.payoffs[idx[:i] + (k,) + idx[i + 1:]][i] for k in range(g.shape[i]))
            assert g.best_reply[idx][i] == pytest.approx(best, rel=1e-14, abs=1e-14)


def test_key_levels_lie_on_the_grid():
    """Static Nash, collusive and deviation actions of the stage game are grid points, so the grid
    game reproduces their profits exactly."""
    m = Market(LinearDemand(10, 1), cost=[1.0, 2.0])
    g = discretize(m, 15)
    st = stage_game(m)
    assert np.array_equal(g.actions(g.marked["nash"]), st.nash.actions)
    assert np.array_equal(g.actions(g.marked["collusive"]), st.collusive.actions)
    for i in range(2):
        assert np.array_equal(g.actions(g.marked[f"deviation {i + 1}"]), st.deviation_profiles[i])
        # the best deviation on the grid is the continuous best deviation
        k = g.flat_index(g.marked["collusive"])
        assert g.flat_payoffs[k, i] + g.deviation_gains[k, i] == pytest.approx(st.deviation_profits[i], rel=1e-13)
    # the continuous static Nash equilibrium is an equilibrium of the grid game
    assert any(tuple(p) == g.marked["nash"] for p in g.pure_nash())


def test_cournot_minmax_is_zero_when_rivals_can_flood():
    """With the grid reaching the choke quantity a/b, rivals drive the price to zero and the best
    reply earns nothing: the pure minmax is 0 (closed form)."""
    g = discretize(Market(LinearDemand(10, 1), cost=1.0, n_firms=2), 9)
    assert np.allclose(g.minmax, 0.0, atol=1e-12)
    for i, prof in enumerate(g.minmax_profiles):
        assert g.best_reply.reshape(-1, 2)[g.flat_index(prof), i] == pytest.approx(0.0, abs=1e-12)


def test_matrix_game_facts():
    """Prisoner's dilemma (T, R, P, S) = (10, 9, 3, 1): defection is the only equilibrium and the
    minmax is P = 3 (textbook, e.g. Mailath and Samuelson, 2006, Repeated Games and Reputations,
    ch. 2 -- from memory)."""
    g = game_from_payoffs([[[9, 9], [1, 10]], [[10, 1], [3, 3]]])
    assert g.pure_nash().tolist() == [[1, 1]]
    assert g.minmax.tolist() == [3.0, 3.0]
    assert g.deviation_gains.tolist() == [[1, 1], [2, 0], [0, 2], [0, 0]]


def test_action_grid_places_every_level():
    levels = [0.37, 2.25, 3.0, 3.375, 9.999]
    grid = action_grid(0.0, 10.0, 12, levels)
    assert grid.size == 12 and np.all(np.diff(grid) > 0)
    assert all(x in grid for x in levels)
    with pytest.raises(InputError, match=r"^payoff_set.grid: 5 key levels need at least 5"):
        action_grid(0.0, 10.0, 4, levels)


def test_round_trip():
    g = discretize(Market(LinearDemand(10, 1), cost=1.0, n_firms=2), 7)
    back = DiscreteGame.from_dict(json.loads(json.dumps(g.to_dict(), allow_nan=False)))
    assert np.array_equal(back.payoffs, g.payoffs) and back.marked == g.marked
    assert all(np.array_equal(a, b) for a, b in zip(back.grids, g.grids))


def test_memory_is_checked_before_any_work():
    """A 3-firm grid of 5000 actions each has 1.25e11 profiles: at 8 bytes per payoff and firm, its
    payoff array alone is 3 TB. Refused with the key path and the estimate, without building
    anything (the estimate counts four arrays of that size)."""
    m = Market(LinearDemand(10, 1), cost=1.0, n_firms=3)
    assert estimate_game_bytes([5000] * 3, 3) >= 5000**3 * 3 * 8
    with pytest.raises(InputError, match=r"^payoff_set.grid: a 5000 x 5000 x 5000 action grid needs about "
                                         r"1\.2e\+04 GB .*use fewer actions per firm$"):
        discretize(m, 5000)


@pytest.mark.parametrize("kwargs, key", [
    ({"n_actions": 1}, "payoff_set.grid"),
    ({"n_actions": [5]}, "payoff_set.grid"),
    ({"grids": [[0, 1], [-1, 2]]}, r"payoff_set.grid\[2\]"),
])
def test_bad_grids(kwargs, key):
    with pytest.raises(InputError, match=rf"^{key}: "):
        discretize(Market(LinearDemand(10, 1), cost=1.0, n_firms=2), **kwargs)


def test_multi_product_firms_are_refused():
    m = Market(DifferentiatedDemand([10, 10, 10], 1.0, 0.5), cost=1.0, owner=[1, 1, 2], model="bertrand")
    with pytest.raises(InputError, match=r"^payoff_set.market: payoff sets need single-product firms"):
        discretize(m, 4)
