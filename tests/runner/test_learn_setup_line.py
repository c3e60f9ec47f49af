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
