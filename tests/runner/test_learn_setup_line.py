"""The setup line of a learning run's evidence names the learners' family and writes whole numbers as numbers."""

from sim.runner.analyses.learn import KIND


def _line(learning: dict) -> str:
    lines = KIND.describe({"market": {}, "learning": learning, "run": {"sessions": 3, "seed": 1}})
    return next(x for x in lines if x.startswith("Learners: "))


def test_a_whole_number_written_as_a_float_reads_as_the_number():
    # max_periods = 2e6 in a TOML file is the float 2000000.0
    line = _line({"max_periods": 2e6, "alpha": 0.15})
    assert "max_periods 2000000" in line and "2000000.0" not in line
    assert "alpha 0.15" in line


def test_the_family_is_named_in_words():
    assert _line({}).startswith("Learners: Q-learning (the published defaults)")
    assert _line({"family": "ucb", "m": 7}).startswith("Learners: upper-confidence-bound bandits (m 7)")
    assert _line({"family": "thompson"}).startswith("Learners: Thompson-sampling bandits")
    assert "family" not in _line({"family": "thompson", "m": 5})


def test_a_line_up_is_named_seat_by_seat_not_by_the_learning_tables_family():
    # every seat a fixed policy, with [learning] keeping the default family: the line read "Q-learning"
    fixed = {"strategy": "qlearning", "family": "fixed", "policy_from": "a.npz", "firm": 1}
    doc = {"market": {}, "learning": {"convergence": 500}, "run": {"sessions": 3, "seed": 1},
           "strategies": [fixed, dict(fixed, firm=2)]}
    line = next(x for x in KIND.describe(doc) if x.startswith("Line-up: "))
    assert line == ("Line-up: fixed policy read from a saved run; fixed policy read from a saved run; "
                    "[learning]: convergence 500")
    assert not any(x.startswith("Learners: ") for x in KIND.describe(doc))
    doc["strategies"] = [{"strategy": "qlearning", "seats": 2}, {"strategy": "tit_for_tat"}]
    line = next(x for x in KIND.describe(doc) if x.startswith("Line-up: "))
    assert line.startswith("Line-up: Q-learner (2 seats); tit_for_tat; ")
    doc["learning"]["family"] = "ucb"  # [learning]'s family serves the entries without their own
    assert next(x for x in KIND.describe(doc) if x.startswith("Line-up: ")).startswith(
        "Line-up: upper-confidence-bound bandit (2 seats); tit_for_tat")
    # seats = "all": every firm of the market
    doc["market"], doc["strategies"] = {"n_firms": 3}, [{"strategy": "qlearning", "family": "thompson", "seats": "all"}]
    assert next(x for x in KIND.describe(doc) if x.startswith("Line-up: ")).startswith(
        "Line-up: Thompson-sampling bandit (3 seats); [learning]: ")
