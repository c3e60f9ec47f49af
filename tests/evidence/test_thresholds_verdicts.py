"""The terminal report of thresholds names every firm that binds and says why a scheme is not sustainable."""

from sim.evidence.thresholds import console
from sim.models.market import market_from_dict
from sim.theory.analysis import ThresholdsSpec, thresholds_analysis


def _report(table, punishments=(2, 3)):
    return console(thresholds_analysis(ThresholdsSpec(market_from_dict(table), "joint", None, punishments, ())))


def test_identical_firms_bind_equally():
    """Three identical Cournot firms: their thresholds differ by rounding only, so the report names all three."""
    text = _report({"demand": "linear", "model": "cournot", "intercept": 10.0, "slope": 1.0, "cost": 1.0,
                    "n_firms": 3})
    assert "Firms 1, 2 and 3 bind equally under every scheme" in text
    assert "within a relative 1e-09" in text


def test_not_sustainable_says_why():
    """Costs 1, 1, 3 (intercept 10, slope 1): the joint optimum shuts firm 3, which earns 0.5625 at the Cournot
    equilibrium ((10 - 4*3 + 5) / 4 squared; Cournot closed form), so grim trigger fails because of firm 3's
    Nash profit, not impatience."""
    text = _report({"demand": "linear", "model": "cournot", "intercept": 10.0, "slope": 1.0,
                    "cost": [1.0, 1.0, 3.0]})
    assert "not sustainable -- the agreement leaves firm 3 below the static Nash profit (0 < 0.5625)" in text
