"""Line-ups whose collusive action depends on the demand state (sim.simulation.state_game): the kernel against its
plain-Python twin, the actions played in each state against textbook formulas, and the state frequencies against
the stationary distribution.

Outside results used:

* Cournot duopoly with linear inverse demand a - Q and unit cost c: static Nash quantity (a - c) / 3 per firm, the
  joint-profit quantity (a - c) / 4 per firm, the best reply to a rival's q is (a - c - q) / 2 (Tirole, 1988, "The
  Theory of Industrial Organization", ch. 5 -- from memory).
* Rotemberg and Saloner (1986), "A supergame-theoretic model of price wars during booms", AER 76(3): with i.i.d.
  observed demand states, the collusive profit of a state is capped where the one-period gain from cheating exceeds
  the expected loss, which is the same in every state; derivation beside the test.
* The stationary distribution of a two-state chain with switching probabilities a (from state 1) and b (from
  state 2) is (b, a) / (a + b) (Norris, 1997, "Markov Chains", section 1.7 -- from memory).

Fixed-seed frequency checks use 3 standard errors across replications (a normal statistic leaves +-3 SE with
probability 0.27 %); a wrong row of the chain moves the shares by tens of standard errors at these sizes.
"""

import json
import math

import numpy as np
import pytest

import strategies as S
from sim import InputError, LinearDemand, Market
from sim.core.rng import ReferenceStream, stream_states
from sim.models.monitoring import Monitoring
from sim.runner.single import run_single
from sim.simulation.analysis import SimulateResult
from sim.simulation.engine import RawRun, prepare_game, run_game
from sim.simulation.state_game import compile_state_game, draw_state_paths, state_collusive_actions
from sim.simulation.twin import reference_run
from sim.theory.demand_states import DemandStates, markets_by_state
from sim.theory.draws import draw_state_path

RAW_FIELDS = [f for f in RawRun.__dataclass_fields__ if f != "n_paths"]
DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
INTERCEPTS = [70.0, 100.0, 140.0]
NOISY = Monitoring(sigma=0.1, perception_error=0.03, implementation_error=0.04)


def _same(a: RawRun, b: RawRun):
    for f in RAW_FIELDS:
        x, y = getattr(a, f), getattr(b, f)
        assert x.shape == y.shape, f
        if x.dtype.kind == "f":
            assert np.array_equal(x, y, equal_nan=True), f
        else:
            assert np.array_equal(x, y), f


def _state_game(game, states, source, given=None, delta=0.6):
    markets = markets_by_state(DUOPOLY, "intercept", INTERCEPTS)
    coll = state_collusive_actions(source, states, markets, delta, given=given)
    return compile_state_game(game, states, markets, source, coll)


STATES = {"iid": DemandStates.iid([0.5, 0.3, 0.2]),
          "markov": DemandStates.markov([[0.8, 0.2, 0.0], [0.1, 0.7, 0.2], [0.0, 0.5, 0.5]]),
          "cycle": DemandStates.cycle(3)}
LINEUPS = {"grim_trigger": [S.GrimTrigger()] * 2,
           "finite_punishment": [S.FinitePunishment(length=2), S.StickAndCarrot()],
           "forgiving": [S.ForgivingTitForTat(forgiveness=0.3), S.Opportunist(probability=0.1)]}


@pytest.mark.parametrize("kind", sorted(STATES))
@pytest.mark.parametrize("source", ["agreement", "best", "given"])
@pytest.mark.parametrize("lineup", sorted(LINEUPS))
def test_kernel_equals_twin_with_demand_states(kind, source, lineup):
    """Same seed, same path: every array, the demand states included, equals the plain-Python twin's."""
    game = prepare_game(DUOPOLY, LINEUPS[lineup], NOISY)
    sg = _state_game(game, STATES[kind], source, given=[16.0, 20.0, 26.0])
    kw = dict(periods=25, replications=5, delta=0.9, seed=7, key=(2,), paths=3)
    a, b = run_game(game, demand=sg, **kw), reference_run(game, demand=sg, **kw)
    _same(a, b)
    assert np.array_equal(a.demand_path, b.demand_path)


def test_compiled_state_draws_follow_the_reference_order():
    states = STATES["markov"]
    paths = draw_state_paths(states, 40, 6, 11, key=(4,))
    seeds = stream_states(11, (4, 1), 0, 6)
    for r in range(6):
        assert np.array_equal(paths[r], draw_state_path(ReferenceStream(seeds[r]), states, 40))


def test_states_equal_to_the_market_play_the_plain_run():
    """A state game whose every state is the experiment's market plays exactly the numbers of the plain kernel:
    the demand states only add branches."""
    game = prepare_game(DUOPOLY, LINEUPS["finite_punishment"], NOISY)
    markets = markets_by_state(DUOPOLY, "intercept", [100.0, 100.0])
    sg = compile_state_game(game, DemandStates.iid([0.4, 0.6]), markets, "agreement")
    kw = dict(periods=30, replications=8, delta=0.9, seed=3, key=(1,), paths=8)
    plain, states = run_game(game, **kw), run_game(game, demand=sg, **kw)
    for f in RAW_FIELDS:
        if f != "demand_path":
            assert np.array_equal(getattr(plain, f), getattr(states, f), equal_nan=True), f


def test_collusive_action_in_each_state_is_the_given_level():
    """The automaton plays the level given for the period's demand state, and after a deviation the state's static
    Nash: the collusive quantity is state-contingent as in Rotemberg and Saloner (1986), "A supergame-theoretic model
    of price wars during booms", AER 76(3). Cournot duopoly, inverse demand a_s - Q, cost 10: the Nash quantity
    of state s is (a_s - 10) / 3 and an implementation error plays the best reply (a_s - 10 - q_s) / 2 to the
    state's agreed quantity q_s (Tirole, 1988, ch. 5 -- from memory)."""
    given = np.array([17.0, 21.0, 33.0])
    a = np.array(INTERCEPTS)
    game = prepare_game(DUOPOLY, [S.GrimTrigger()] * 2, Monitoring(implementation_error=0.02))
    sg = _state_game(game, STATES["iid"], "given", given=given.tolist())
    raw = run_game(game, periods=60, replications=20, delta=0.9, seed=5, paths=20, demand=sg)
    d = raw.demand_path
    flags, state = raw.path_flags, raw.path_state
    collusive = (state == 0) & ((flags & 3) == 0)  # grim trigger's first state is collusive; no cheat or tremble
    punishing = (state == 1) & ((flags & 3) == 0)
    trembled = (flags & 2) != 0
    q = raw.path_actions
    assert collusive.any() and punishing.any() and trembled.any()
    np.testing.assert_array_equal(q[collusive], np.broadcast_to(given[d][..., None], q.shape)[collusive])
    np.testing.assert_allclose(q[punishing], np.broadcast_to(((a - 10.0) / 3.0)[d][..., None], q.shape)[punishing],
                               rtol=1e-9)
    best_reply = (a - 10.0 - given) / 2.0
    np.testing.assert_allclose(q[trembled], np.broadcast_to(best_reply[d][..., None], q.shape)[trembled], rtol=1e-9)


def test_agreement_in_each_state_is_the_joint_profit_quantity():
    """collusive_path = "agreement": the joint-profit quantity (a_s - 10) / 4 per firm in every state (Tirole,
    1988, ch. 5 -- from memory)."""
    game = prepare_game(DUOPOLY, [S.GrimTrigger()] * 2)
    sg = _state_game(game, STATES["cycle"], "agreement")
    np.testing.assert_allclose(sg.collusive[:, 0], (np.array(INTERCEPTS) - 10.0) / 4.0, rtol=1e-9)
    raw = run_game(game, periods=6, replications=2, delta=0.9, seed=1, paths=2, demand=sg)
    np.testing.assert_allclose(raw.path_actions[0, :, 0], np.tile(sg.collusive[:, 0], 2), rtol=0)


BERTRAND = {"model": "bertrand", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2}


def _doc(states: dict, market=None, **run):
    return {"experiment": {"kind": "simulate", "name": "quillmoor-weeks"}, "market": dict(market or BERTRAND),
            "strategies": [{"strategy": "grim_trigger", "seats": 2}],
            "run": {"periods": 60, "replications": 300, "delta": 0.6, "seed": 21, **run}, "demand_states": states}


def test_best_path_prices_follow_rotemberg_saloner():
    """Homogeneous Bertrand duopoly, unit cost c = 10, demand a_s - p, i.i.d. states with probabilities w_s, grim
    trigger (Rotemberg and Saloner, 1986, AER 76(3)). Let x_s be the joint profit agreed in state s: cheating takes
    it all, a gain of x_s / 2, and loses delta / (1 - delta) E[x] / 2 from next period on, whatever the state today.
    So x_s <= delta / (1 - delta) E[x]; when only the high state H binds, with monopoly profits P_s = (a_s - c)^2 / 4
    elsewhere, x_H = delta sum_{s != H} w_s P_s / (1 - delta - delta w_H), and the price of state H solves
    (p - c)(a_H - p) = x_H on its lower branch. Intercepts 60, 100, 160, w = (0.3, 0.4, 0.3), delta = 0.6: the
    price of the high state falls below the price of the low state (a price war during a boom)."""
    w, a, c, delta = np.array([0.3, 0.4, 0.3]), np.array([60.0, 100.0, 160.0]), 10.0, 0.6
    sp = run_single(_doc({"kind": "iid", "probabilities": w.tolist(), "parameter": "intercept",
                          "values": a.tolist(), "collusive_path": "best"})).result.states
    monopoly = (a + c) / 2.0
    x_h = delta * float(np.sum(w[:2] * (a[:2] - c) ** 2 / 4.0)) / (1.0 - delta - delta * w[2])
    p_h = ((a[2] + c) - math.sqrt((a[2] - c) ** 2 - 4.0 * x_h)) / 2.0
    expected = np.array([monopoly[0], monopoly[1], p_h])
    np.testing.assert_allclose(sp.contingent.agreed_price, expected, rtol=1e-7)
    np.testing.assert_allclose(sp.contingent.price, expected, rtol=1e-7)
    np.testing.assert_allclose(sp.contingent.full_price, monopoly, rtol=1e-9)
    assert sp.contingent.price[2] < sp.contingent.price[0]
    assert np.all(sp.contingent.collusive_share == 1.0)


def test_state_frequencies_under_state_dependent_play_match_the_stationary_distribution():
    a, b = 0.2, 0.3
    sp = run_single(_doc({"kind": "markov", "transition": [[1 - a, a], [b, 1 - b]], "parameter": "intercept",
                          "values": [80.0, 120.0], "collusive_path": "agreement"}, periods=80, replications=400)
                    ).result.states
    exact = np.array([b, a]) / (a + b)
    assert sp.expected == pytest.approx(exact)
    assert np.all(np.abs(sp.frequencies - exact) <= 3 * sp.frequency_se), (sp.frequencies, sp.frequency_se)


def test_result_with_state_dependent_play_round_trips():
    one = run_single(_doc({"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept",
                           "values": [80.0, 120.0], "collusive_actions": [40.0, [50.0, 52.0]]}, replications=20))
    doc = one.result.to_dict()
    assert SimulateResult.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc
    np.testing.assert_array_equal(one.result.states.contingent.collusive_actions, [[40.0, 40.0], [50.0, 52.0]])
    assert one.cell.metrics["state_play.agreed_price[1]"] == 40.0


@pytest.mark.parametrize("extra, key", [
    ({"collusive_actions": [40.0]}, "demand_states.collusive_actions"),
    ({"collusive_actions": [40.0, [50.0, 52.0, 54.0]]}, "demand_states.collusive_actions[2]"),
    ({"collusive_path": "cleverest"}, "demand_states.collusive_path"),
    ({"collusive_path": "best", "collusive_actions": [40.0, 50.0]}, "demand_states.collusive_actions"),
    ({"collusive_path": "given"}, "demand_states.collusive_actions"),
])
def test_malformed_state_paths_name_their_key(extra, key):
    with pytest.raises(InputError) as e:
        run_single(_doc({"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept",
                         "values": [80.0, 120.0], **extra}))
    assert e.value.key == key
