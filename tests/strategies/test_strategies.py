"""Automaton strategies: the defining behaviour of every shipped strategy (on recorded paths), the
user-defined table automaton, the registry, parameter constraints and bad input."""

import inspect
import math

import numpy as np
import pytest

import strategies as S
from sim import InputError, LinearDemand, Market
from sim.models.monitoring import Monitoring
from sim.simulation.engine import prepare_game, simulate
from strategies.base import Automaton
from strategies.registry import STRATEGIES, lineup_from_tables, strategy_from_dict

DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
TRIOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
# two-firm linear Cournot, a = 100, c = 10: collusive 22.5 each, Nash 30, best deviation 33.75
Q_C, Q_N, Q_D = 22.5, 30.0, 33.75


def one_shot_cheater(t0: int) -> S.TableAutomaton:
    """Colludes, plays its best deviation once in period t0 (0-based), then colludes forever."""
    states = {f"c{k}": {"action": "collusive", "next": f"c{k + 1}"} for k in range(t0)}
    states[f"c{t0}"] = {"action": "deviation", "collusive": False, "next": "after"}
    states["after"] = {"action": "collusive"}
    return S.TableAutomaton(states=states)


def paths(market, lineup, periods=30, monitoring=None, reps=1, seed=1, **kw):
    res = simulate(market, lineup, monitoring, periods=periods, replications=reps, delta=0.9, seed=seed,
                   paths=reps, baseline=False, **kw)
    return res, res.paths


def state_names(P, i, r=0):
    names = P["state_names"][i]
    return [names[s] for s in P["states"][r, : int(P["length"][r]), i]]


# ---- defining behaviour ------------------------------------------------------------------------


def test_grim_trigger_punishes_forever_after_one_deviation():
    """Grim trigger (Friedman, 1971): collusion until the first deviation, Nash reversion forever."""
    _, P = paths(DUOPOLY, [S.GrimTrigger(), one_shot_cheater(4)])
    a = P["actions"][0, :, 0]
    assert np.all(a[:5] == Q_C) and np.all(a[5:] == Q_N)
    assert state_names(P, 0)[5:] == ["punish"] * 25


def test_finite_punishment_returns_after_exactly_T_periods():
    for T in (1, 3, 5):
        _, P = paths(DUOPOLY, [S.FinitePunishment(length=T), one_shot_cheater(4)])
        a = P["actions"][0, :, 0]
        # the deviation happens in period 4 (0-based); punishment in 5 .. 4+T, collusion again from 5+T
        assert np.all(a[:5] == Q_C)
        assert np.all(a[5:5 + T] == Q_N), T
        assert np.all(a[5 + T:] == Q_C), T


def test_tit_for_tat_answers_last_period():
    _, P = paths(DUOPOLY, [S.TitForTat(), one_shot_cheater(4)])
    a = P["actions"][0, :, 0]
    assert np.all(a[:5] == Q_C) and a[5] == Q_N and np.all(a[6:] == Q_C)
    # against a permanent competitor it competes from period 1 on; against itself it colludes
    _, P = paths(DUOPOLY, [S.TitForTat(), S.AlwaysCompete()])
    assert P["actions"][0, 0, 0] == Q_C and np.all(P["actions"][0, 1:, 0] == Q_N)


def test_forgiving_tit_for_tat_forgives_with_probability_g():
    """Against a rival that deviates every period, each period's defection is forgiven (the firm
    colludes next period) independently with probability g: the share of collusive states from period 2
    on is binomial with mean g (tolerance: 4 standard errors)."""
    g = 0.3
    _res, P = paths(DUOPOLY, [S.ForgivingTitForTat(forgiveness=g), S.AlwaysCompete(action="deviation")],
                   periods=400, reps=5)
    st = P["states"][:, 1:, 0]
    share = float((st == 0).mean())
    se = math.sqrt(g * (1 - g) / st.size)
    assert abs(share - g) < 4 * se
    # forgiveness 1 never punishes
    _, P = paths(DUOPOLY, [S.ForgivingTitForTat(forgiveness=1.0), S.AlwaysCompete()])
    assert np.all(P["actions"][0, :, 0] == Q_C)


def test_win_stay_lose_shift_pavlov_cycle():
    """Win-stay lose-shift (Nowak and Sigmund, 1993): after (collude, compete) the sucker shifts and the
    winner stays, mutual competition makes both shift, and mutual collusion is then kept."""
    _, P = paths(DUOPOLY, [S.WinStayLoseShift(start="collude"), S.WinStayLoseShift(start="punish")], periods=8)
    s0, s1 = state_names(P, 0), state_names(P, 1)
    assert list(zip(s0[:4], s1[:4])) == [("collude", "punish"), ("punish", "punish"), ("collude", "collude"),
                                         ("collude", "collude")]
    assert s0[2:] == ["collude"] * 6 and s1[2:] == ["collude"] * 6


def test_stick_and_carrot_restarts_a_shirked_punishment():
    """Stick and carrot (Abreu, 1986): one period of the punishment level after a deviation, back to
    collusion once everyone punished, the punishment restarts when someone shirks it."""
    from sim import stick_and_carrot

    # firm 2 deviates in period 2, shirks the punishment in period 3 (colludes), punishes in period 4
    shirker = S.TableAutomaton(states={
        "c0": {"action": "collusive", "next": "c1"}, "c1": {"action": "collusive", "next": "dev"},
        "dev": {"action": "deviation", "collusive": False, "next": "shirk"},
        "shirk": {"action": "collusive", "collusive": False, "next": "punish"},
        "punish": {"action": "punishment", "collusive": False, "next": "after"},
        "after": {"action": "collusive"},
    })
    _, P = paths(DUOPOLY, [S.StickAndCarrot(), shirker], periods=10)
    x = float(stick_and_carrot(DUOPOLY).punishment_level)
    a = P["actions"][0, :, 0]
    assert state_names(P, 0) == ["collude"] * 3 + ["punish", "punish", "collude"] + ["collude"] * 4
    assert a[3] == pytest.approx(x, rel=1e-12) and a[4] == pytest.approx(x, rel=1e-12)
    assert np.all(a[5:] == Q_C)


def test_trigger_price_wars_follow_low_prices():
    """Trigger price (Green and Porter, 1984): after a normal period whose price is below the trigger,
    exactly T periods of Nash, then normal again; prices above the trigger keep collusion."""
    T, trigger = 2, 45.0
    mon = Monitoring(signal="price", sigma=0.15)
    _, P = paths(DUOPOLY, [S.TriggerPrice(trigger=trigger, length=T)] * 2, periods=300, monitoring=mon)
    names = state_names(P, 0)
    price = P["market_price"][0]
    wars = 0
    for t in range(299):
        if names[t] == "collude":
            expect = "war1" if price[t] < trigger else "collude"
            assert names[t + 1] == expect
            wars += price[t] < trigger
        elif names[t] == "war1":
            assert names[t + 1] == "war2"
        else:
            assert names[t] == "war2" and names[t + 1] == "collude"
    assert wars > 5
    war = np.array([n != "collude" for n in names])
    assert np.all(P["actions"][0, war, 0] == Q_N) and np.all(P["actions"][0, ~war, 0] == Q_C)


def test_always_compete_and_always_collude():
    _, P = paths(TRIOPOLY, [S.AlwaysCompete(), S.AlwaysCollude(), S.AlwaysCollude(action=12.0)], periods=10)
    assert np.all(P["actions"][0, :, 0] == 22.5)  # three-firm Nash quantity (a - c) / 4
    assert np.all(P["actions"][0, :, 1] == 15.0)  # joint-profit quantity (a - c) / 6
    assert np.all(P["actions"][0, :, 2] == 12.0)
    assert np.all(P["collusive"][0] == 0)  # the competitor never colludes


def test_opportunist_cheats_once_from_t0_or_with_probability_p():
    _, P = paths(DUOPOLY, [S.Opportunist(probability=1.0, start=6), S.GrimTrigger()], periods=15)
    a = P["actions"][0, :, 0]
    assert np.all(a[:6] == Q_C) and a[6] == Q_D and np.all(a[7:] == Q_N)
    assert (P["flags"][0, :, 0] & 1).sum() == 1
    # random cheating, never punishing: cheats are Bernoulli(p) per period (4 standard errors)
    p = 0.2
    res, _ = paths(DUOPOLY, [S.Opportunist(probability=p, after="collude"), S.AlwaysCollude()], periods=500,
                   reps=20)
    share = res.counts["cheats"].sum() / (500 * 20)
    assert abs(share - p) < 4 * math.sqrt(p * (1 - p) / 10_000)


# ---- the table automaton and the registry --------------------------------------------------------


def test_table_automaton_equals_shipped_grim_trigger():
    table = S.TableAutomaton(states={
        "collude": {"action": "collusive", "watch": "all", "good": "collude", "bad": "punish"},
        "punish": {"action": "nash"},
    })
    mon = Monitoring(implementation_error=0.05, perception_error=0.02)
    a = simulate(TRIOPOLY, [table] * 3, mon, periods=60, replications=30, seed=4, baseline=False)
    b = simulate(TRIOPOLY, [S.GrimTrigger()] * 3, mon, periods=60, replications=30, seed=4, baseline=False)
    np.testing.assert_array_equal(a.discounted, b.discounted)
    np.testing.assert_array_equal(a.first_breakdown, b.first_breakdown)


def test_experiment_file_entries_build_the_lineup():
    entries = [{"strategy": "grim_trigger", "seats": 2},
               {"strategy": "automaton", "initial": "c",
                "states": {"c": {"action": "collusive", "watch": "rivals", "bad": "p"},
                           "p": {"action": 20.0, "next": "c"}}}]
    lineup = lineup_from_tables(entries, 3)
    assert [s.name for s in lineup] == ["grim_trigger", "grim_trigger", "automaton"]
    g = prepare_game(TRIOPOLY, lineup)
    assert g.lineup.levels[2, g.lineup.states[2, 1, 0], 2] == 20.0


@pytest.mark.parametrize("entry, key", [
    ({"strategy": "grim"}, "strategies[1].strategy"),
    ({"strategy": "finite_punishment", "lenght": 2}, "strategies[1].lenght"),
    ({"strategy": "finite_punishment", "length": 0}, "strategies[1].length"),
    ({"strategy": "forgiving_tit_for_tat", "forgiveness": 1.5}, "strategies[1].forgiveness"),
    ({"strategy": "opportunist", "probability": -0.1}, "strategies[1].probability"),
    ({"strategy": "grim_trigger", "collude": "cheapest"}, "strategies[1].collude"),
    ({"strategy": "automaton", "states": {"a": {"action": "nash", "next": "b"}}}, "strategies[1].states.a.next"),
    ({"strategy": "automaton", "states": {"a": {"action": "nash", "forgive": 2.0}}},
     "strategies[1].states.a.forgive"),
    ({"strategy": "automaton", "states": {"a": {"action": "nash", "colour": 1}}}, "strategies[1].states.a.colour"),
    ({"strategy": "automaton", "states": {"a": {"action": "nash", "watch": "price"}}},
     "strategies[1].states.a.threshold"),
    ({"strategy": "automaton", "initial": "z", "states": {"a": {"action": "nash"}}}, "strategies[1].initial"),
])
def test_bad_strategy_entries_name_the_key(entry, key):
    with pytest.raises(InputError) as exc:
        lineup = lineup_from_tables([dict(entry, seats=2)], 2)
        prepare_game(DUOPOLY, lineup)
    assert exc.value.key == key
    if key.endswith("strategy"):
        assert "grim_trigger" in exc.value.message  # the known names are listed


def test_lineup_size_and_monitoring_compatibility():
    with pytest.raises(InputError, match="3 seats but the market has 2 firms"):
        prepare_game(DUOPOLY, [S.GrimTrigger()] * 3)
    with pytest.raises(InputError, match="watches the rivals' actions"):
        prepare_game(DUOPOLY, [S.GrimTrigger()] * 2, Monitoring(signal="price"))
    with pytest.raises(InputError, match="no effect") as exc:
        prepare_game(DUOPOLY, [S.AlwaysCompete()] * 2, Monitoring(perception_error=0.1))
    assert exc.value.key == "monitoring.perception_error"
    with pytest.raises(InputError) as exc:
        prepare_game(DUOPOLY, [S.GrimTrigger()] * 2, Monitoring(implementation_error=1.2))
    assert exc.value.key == "monitoring.implementation_error"
    with pytest.raises(InputError, match="exceeds the capacity"):
        prepare_game(Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2, capacity=20.0),
                     [S.AlwaysCollude(action=25.0)] * 2)


@pytest.mark.parametrize("name", sorted(k for k, v in STRATEGIES.items() if issubclass(v, Automaton)))
def test_parameter_constraints_cover_the_signature(name):
    """Common test of every registered class (as for every Parametrized class): the constraints name
    exactly the constructor arguments, a bad value of each raises InputError, clones round-trip."""
    cls = STRATEGIES[name]
    sig = [p for p in inspect.signature(cls.__init__).parameters if p != "self"]
    assert set(cls._constraints) == set(sig)
    base = cls() if name not in ("trigger_price", "automaton") else (
        cls(trigger=40.0) if name == "trigger_price" else cls(states={"a": {"action": "nash"}}))
    assert base.clone() == base
    assert issubclass(cls, Automaton) and cls.summary
    for p, constraint in cls._constraints.items():
        bad = base.clone(**{p: constraint.example_bad()})
        with pytest.raises(InputError) as exc:
            bad.table("s")
        assert exc.value.key.startswith("s.")


def test_strategy_from_dict_round_trip():
    s = S.FinitePunishment(length=4, punish=[25.0, 26.0])
    assert strategy_from_dict(s.to_dict()) == s
