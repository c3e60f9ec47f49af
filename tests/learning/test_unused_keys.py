"""Keys a learning run accepts but does not use are named, with the reason, and keys it does use are not.

What each family reads follows its definition: a Q-learner its learning rate, exploration decay, discount factor,
memory and update rule (Calvano, Calzolari, Denicolo and Pastorello, 2020, AER 110(10)); a bandit keeps no state and
reads its grid, exploration constant and observation noise (Auer, Cesa-Bianchi and Fischer, 2002, UCB1; Agrawal and
Goyal, 2013, Thompson sampling); a fixed policy reads nothing of learning (its grid and memory are the saved
learner's). The deviating seat's discount factor values the forced deviation of the impulse response, whatever its
family.
"""

from sim.learning.tables import _unused, learning_from_dict

MARKET = {"model": "bertrand", "demand": "logit", "quality": 2.0, "outside": 0.0, "mu": 0.25, "cost": 1.0,
          "n_firms": 2}


def _doc(learning, strategies, firm=1):
    return {"market": dict(MARKET), "learning": {"convergence": 100, "max_periods": 1000, **learning},
            "strategies": strategies, "impulse": {"firm": firm}, "run": {"sessions": 2}}


def test_a_bandit_deviators_discount_factor_is_used_and_another_seats_is_not():
    ucb = {"strategy": "qlearning", "family": "ucb", "m": 5}
    got = learning_from_dict(_doc({"alpha": 0.3}, [dict(ucb, delta=0.7), dict(ucb, delta=0.6)], firm=2))["unused"]
    assert got["learning.alpha"].startswith("an upper-confidence-bound bandit keeps no state")
    assert "strategies[2].delta" not in got  # firm 2 deviates: its delta discounts the deviation's value
    assert got["strategies[1].delta"].startswith("an upper-confidence-bound bandit")


def test_a_key_is_not_named_when_some_seat_that_takes_it_uses_it():
    # alpha and beta serve the Q-learner of entry 2, not the bandit of entry 1
    got = learning_from_dict(_doc({"alpha": 0.3, "beta": 1e-3}, [{"strategy": "qlearning", "family": "thompson",
                                                                  "m": 5, "exploration": 2.0},
                                                                 {"strategy": "qlearning", "m": 5}]))["unused"]
    assert not {"learning.alpha", "learning.beta", "strategies[1].exploration"} & set(got)
    # a key every learner entry gives itself
    got = learning_from_dict(_doc({"beta": 1e-3}, [{"strategy": "qlearning", "m": 5, "beta": 2e-3},
                                                   {"strategy": "qlearning", "m": 5, "beta": 3e-3}]))["unused"]
    assert got["learning.beta"] == "every learner's entry gives its own"


def test_fixed_policies_name_their_learning_keys_and_an_automaton_deviator_takes_the_first_learners_delta():
    fixed = {"strategy": "qlearning", "family": "fixed", "policy_from": "a.npz", "firm": 1}
    settings = {"deviator": 0}
    got = _unused({"alpha": 0.3, "delta": 0.9}, settings, [dict(fixed, m=7, xi=0.3, update="synchronous"),
                                                          dict(fixed, firm=2)], 2)
    why = "a fixed policy neither learns nor explores; its grid and memory are the saved learner's"
    assert got == {"learning.alpha": why, "strategies[1].m": why, "strategies[1].xi": why,
                   "strategies[1].update": why}
    # firm 1, an automaton, deviates: the deviation is valued with the first learner's (firm 2's) delta
    got = _unused({"delta": 0.9}, {"deviator": 0}, [{"strategy": "tit_for_tat"}, fixed], 2)
    assert got == {}
    got = _unused({"delta": 0.9}, {"deviator": 1}, [fixed, {"strategy": "tit_for_tat"}, fixed], 3)
    assert got == {}
    got = _unused({"delta": 0.9}, {"deviator": 2}, [fixed, {"strategy": "tit_for_tat"}, dict(fixed, delta=0.8)], 3)
    assert got == {"learning.delta": why}
