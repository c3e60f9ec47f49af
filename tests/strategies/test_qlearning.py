"""The Q-learning strategy object: parameter constraints, the published action grid, Q initialisation."""

import inspect
import itertools

import numpy as np
import pytest

import sim
from sim.core.params import optional
from sim.learning.lineup import compile_lineup
from strategies.qlearning import QLearner, published_grid


def baseline_market(n=2, **kw):
    demand = sim.LogitDemand(quality=kw.pop("quality", 2.0), outside=0.0, mu=0.25)
    return sim.Market(demand, cost=kw.pop("cost", 1.0), model="bertrand", n_firms=n, **kw)


# ---- the parametrised-class conventions (see tests/test_params.py) --------------------------------


def test_constraints_cover_the_signature():
    names = [p for p in inspect.signature(QLearner.__init__).parameters if p != "self"]
    assert set(names) == set(QLearner._constraints)


@pytest.mark.parametrize("name", sorted(QLearner._constraints))
def test_bad_values_raise_naming_the_parameter(name):
    constraint = QLearner._constraints[name]
    if isinstance(constraint, optional):
        constraint = constraint.inner
    bad = QLearner().clone(**{name: constraint.example_bad()})
    with pytest.raises(sim.InputError) as err:
        bad.spec(prefix="learning")
    assert err.value.key == f"learning.{name}"


def test_clone_round_trips_and_unknown_parameters_raise():
    a = QLearner(alpha=0.3, grid=[1.0, 2.0, 3.0], init="zeros")
    assert a.clone() == a and a.clone() is not a
    assert a.clone(alpha=0.2) != a
    with pytest.raises(sim.InputError):
        a.clone().set_params(gamma=0.9)
    with pytest.raises(TypeError):
        QLearner(gamma=0.9)


@pytest.mark.parametrize(
    ("kw", "key", "text"),
    [
        ({"alpha": 0.0}, "alpha", "(0, 1]"),
        ({"alpha": 1.5}, "alpha", "(0, 1]"),
        ({"beta": 0.0}, "beta", "(0, inf)"),
        ({"beta": -1e-6}, "beta", "(0, inf)"),
        ({"delta": 1.0}, "delta", "[0, 1)"),
        ({"m": 1}, "m", "[2, 1000]"),
        ({"grid": [1.5]}, "grid", "at least 2 actions"),
        ({"grid": [1.5, 1.5]}, "grid", "strictly increasing"),
        ({"grid": [1.0, 2.0], "m": 3}, "m", "number of grid points"),
        ({"init": "optimistic"}, "init", "'uniform', 'zeros'"),
        ({"k": 0}, "k", "[1, 8]"),
    ],
)
def test_out_of_range_values_name_the_key_and_the_range(kw, key, text):
    with pytest.raises(sim.InputError) as err:
        QLearner(**kw).spec(prefix="learning")
    assert err.value.key == f"learning.{key}"
    assert text in err.value.message


def test_alpha_one_and_delta_zero_are_allowed():
    p = QLearner(alpha=1.0, delta=0.0).spec()
    assert p["alpha"] == 1.0 and p["delta"] == 0.0 and p["m"] == 15


# ---- the published grid ---------------------------------------------------------------------------


def test_published_grid_matches_the_construction_of_calvano_et_al_2020():
    # Calvano, Calzolari, Denicolo and Pastorello (2020, AER), section II: m equally spaced prices on
    # [p_N - xi (p_M - p_N), p_M + xi (p_M - p_N)]
    m = baseline_market()
    st = sim.stage_game(m)
    pn, pm = st.nash.prices[0], st.collusive.prices[0]
    grid = QLearner().compile(st, 0).grid
    assert grid.size == 15
    assert grid[0] == pytest.approx(pn - 0.1 * (pm - pn), abs=1e-12)
    assert grid[-1] == pytest.approx(pm + 0.1 * (pm - pn), abs=1e-12)
    assert np.allclose(np.diff(grid), (pm - pn) * 1.2 / 14, rtol=1e-12)


def test_published_grid_spans_decreasing_collusive_quantities_under_cournot():
    # Cournot: collusive quantities are below Nash ones; the grid still spans both, widened
    m = sim.Market(sim.LinearDemand(intercept=10, slope=1), cost=1.0, n_firms=2)
    g = QLearner(m=7, xi=0.2).compile(sim.stage_game(m), 1).grid
    qn, qm = 3.0, 2.25  # (a - c) / 3b and (a - c) / 4b, textbook linear Cournot duopoly
    assert g[0] == pytest.approx(qm - 0.2 * (qn - qm))
    assert g[-1] == pytest.approx(qn + 0.2 * (qn - qm))


def test_a_user_grid_is_used_as_given():
    g = QLearner(grid=[1.5, 1.6, 1.9]).compile(None, 0).grid
    assert g.tolist() == [1.5, 1.6, 1.9]


def test_grid_reaching_below_zero_is_refused():
    # a huge xi pushes the lower end of the grid below zero on several points
    with pytest.raises(sim.InputError) as err:
        QLearner(xi=50.0).compile(sim.stage_game(baseline_market()), 0, prefix="learning")
    assert err.value.key == "learning.xi"


def test_published_grid_function_clips_at_zero():
    g = published_grid(1.0, 2.0, 5, 2.0)
    assert g[0] == 0.0 and g[-1] == 4.0


# ---- initial Q-values -----------------------------------------------------------------------------


def test_uniform_initialisation_is_the_discounted_value_against_uniform_rivals():
    # Calvano et al. (2020), eq. (8): Q_0(s, a_i) = sum over a_-i of pi_i(a_i, a_-i) / ((1 - delta) |A|^(n-1)),
    # here checked by brute force over every rival profile with unequal grid sizes and discounts
    m = sim.Market(sim.LogitDemand(quality=[2.0, 2.2, 1.9], mu=0.3), cost=[1.0, 1.1, 0.9], model="bertrand")
    learners = [QLearner(m=3, delta=0.9), QLearner(m=4, delta=0.5), QLearner(m=2, delta=0.0)]
    lu = compile_lineup(m, learners)
    ms = m.spec()
    for i, L in enumerate(learners):
        d = L.delta
        sizes = [3, 4, 2]
        for a in range(sizes[i]):
            total, count = 0.0, 0
            for prof in itertools.product(*[range(s) for s in sizes]):
                if prof[i] != a:
                    continue
                prices = [lu.grids[j][prof[j]] for j in range(3)]
                total += ms.profits(np.array(prices))[i]
                count += 1
            expected = total / count / (1 - d)
            assert np.allclose(lu.q0[i, : lu.seats.mod[i], a], expected, rtol=1e-12)


def test_zero_and_given_initialisations():
    m = baseline_market()
    lu = compile_lineup(m, QLearner(m=3, init="zeros"))
    assert not lu.q0.any()
    lu = compile_lineup(m, QLearner(m=3, init=[1.0, 3.0, 2.0]))
    assert np.all(lu.q0[:, :9, :3] == [1.0, 3.0, 2.0])
    assert np.all(lu.initial_greedy() == 1)
    table = np.arange(27.0).reshape(9, 3)
    lu = compile_lineup(m, QLearner(m=3, init=table))
    assert np.array_equal(lu.q0[0, :9, :3], table)


def test_given_initialisation_of_the_wrong_shape_is_refused():
    with pytest.raises(sim.InputError) as err:
        compile_lineup(baseline_market(), QLearner(m=3, init=np.zeros((8, 3))))
    assert err.value.key.endswith("init") and "(9, 3)" in err.value.message
    with pytest.raises(sim.InputError) as err:
        QLearner(m=3, init=[0.0, 1.0]).spec(prefix="learning")
    assert err.value.key == "learning.init"
