"""Learning entrants are named by their family in a tournament's tables (the rule column of the ranking)."""

from sim.tournament.entrants import Entrant, rule_description
from strategies.qlearning import QLearner


def test_learning_entrants_are_named_by_family():
    q = Entrant("q", QLearner(m=5))
    ucb = Entrant("u", QLearner(family="ucb", m=5))
    ts = Entrant("t", QLearner(family="thompson", m=5))
    assert (q.name, ucb.name, ts.name) == ("qlearning", "ucb", "thompson")
    assert rule_description(ucb).startswith("UCB bandit firm") and rule_description(q).startswith("Q-learning firm")
    # the entry an experiment file holds is unchanged: strategy = "qlearning" with the family beside it
    assert ucb.to_dict()["strategy"] == "qlearning" and ucb.to_dict()["family"] == "ucb"
