"""A simulated line-up with demand states (``[demand_states]`` in the simulate kind, sim.simulation.states_run).

Checks against outside results:

* The stationary distribution of a two-state Markov chain with switching probabilities a (from state 1) and b
  (from state 2) is (b, a) / (a + b) (e.g. Norris, 1997, "Markov Chains", section 1.7 -- from memory); a chain
  started from it has that distribution in every period, so the simulated share of periods in each state is an
  unbiased estimate of it.
* Logit demand scales quantities with the market size, so every profit at given prices scales with the size and
  the static Nash and joint-profit prices do not move (Anderson, de Palma and Thisse, 1992, "Discrete Choice Theory
  of Product Differentiation", ch. 7 -- from memory): a state with size s earns s times the profit of size 1.
* Cournot with a higher linear-demand intercept moves the equilibrium quantities (Tirole, 1988, "The Theory of
  Industrial Organization", ch. 5): a line-up with fixed actions cannot play it, so the table is refused.

Tolerance of the fixed-seed frequency checks: 3 standard errors across replications (a normal statistic leaves
+-3 SE with probability 0.27 %); a wrong transition row or an off-by-one in the draws moves the shares by tens of
standard errors at these sizes.
"""

import json

import numpy as np
import pytest

from sim.core.errors import InputError
from sim.runner.single import run_single
from sim.simulation.analysis import SimulateResult

LOGIT = {"model": "bertrand", "demand": "logit", "quality": 2.0, "outside": 0.0, "mu": 0.25, "cost": 1.0,
         "n_firms": 2, "size": 1.0}


def _doc(states, market=LOGIT, **run):
    return {"experiment": {"kind": "simulate", "name": "brightwater-seasons"}, "market": dict(market),
            "strategies": [{"strategy": "grim_trigger", "seats": 2}],
            "run": {"periods": 60, "replications": 400, "delta": 0.9, "seed": 21, **run},
            "demand_states": states}


def test_markov_frequencies_match_the_stationary_distribution():
    a, b = 0.2, 0.3
    one = run_single(_doc({"kind": "markov", "transition": [[1 - a, a], [b, 1 - b]], "parameter": "size",
                           "values": [1.0, 1.6]}))
    sp = one.result.states
    exact = np.array([b, a]) / (a + b)
    assert sp.expected == pytest.approx(exact)
    assert np.all(np.abs(sp.frequencies - exact) <= 3 * sp.frequency_se), (sp.frequencies, sp.frequency_se)


def test_iid_frequencies_match_the_probabilities():
    p = [0.5, 0.3, 0.2]
    sp = run_single(_doc({"kind": "iid", "probabilities": p, "parameter": "size", "values": [0.8, 1.0, 1.4]})
                    ).result.states
    assert np.all(np.abs(sp.frequencies - np.array(p)) <= 3 * sp.frequency_se)


def test_profits_by_state_are_the_size_times_the_collusive_profit():
    # grim trigger without noise colludes in every period: each state's profit per period is size x pi_C
    one = run_single(_doc({"kind": "cycle", "n_states": 2, "parameter": "size", "values": [1.0, 2.5]}))
    sp, fp = one.result.states, one.config["game"].levels.firm_profits
    assert sp.factors == pytest.approx([1.0, 2.5], rel=1e-12)
    assert sp.profit_by_state[1] == pytest.approx(2.5 * fp["collusive"], rel=1e-12)
    # a cycle of two states from the first: half the periods each, no draws
    assert sp.frequencies.tolist() == [0.5, 0.5]
    assert sp.profit[0].value == pytest.approx(30 * (1.0 + 2.5) * fp["collusive"][0], rel=1e-12)


def test_result_round_trips_and_plain_simulation_is_unchanged():
    states = {"kind": "iid", "probabilities": [0.6, 0.4], "parameter": "size", "values": [1.0, 1.3]}
    with_states = run_single(_doc(states, paths=1))
    plain_doc = _doc(states, paths=1)
    del plain_doc["demand_states"]
    plain = run_single(plain_doc)
    assert json.dumps(with_states.result.simulation.to_dict()) == json.dumps(plain.result.simulation.to_dict())
    doc = with_states.result.to_dict()
    assert SimulateResult.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc


COURNOT = {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2}


@pytest.mark.parametrize("states, market, key", [
    ({"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "intercept", "values": [80.0, 120.0]}, COURNOT,
     "demand_states.parameter"),
    ({"kind": "iid", "probabilities": [0.5, 0.6], "parameter": "size", "values": [1.0, 1.2]}, LOGIT,
     "demand_states.probabilities"),
    ({"kind": "markov", "transition": [[0.5, 0.6], [0.5, 0.5]], "parameter": "size", "values": [1.0, 1.2]}, LOGIT,
     "demand_states.transition"),
    ({"kind": "iid", "probabilities": [0.5, 0.5], "parameter": "size", "values": [1.0]}, LOGIT,
     "demand_states.values"),
])
def test_refused_input_names_the_key(states, market, key):
    with pytest.raises(InputError) as info:
        run_single(_doc(states, market))
    assert info.value.key == key
