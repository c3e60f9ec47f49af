"""Workflows of the simulate kind: a line-up entry that seats every firm (``seats = "all"``), so that the number of
firms can be swept alone, and a trigger-price entry that plays the best trigger-price equilibrium of its cell's
market (Green and Porter, 1984, "Noncooperative collusion under imperfect price information", Econometrica 52(1)),
computed per cell and stored with the cell's results."""

import math

from sim.models.market import market_from_dict
from sim.runner.runs import open_run, run_experiment
from sim.theory.trigger_price import trigger_price_equilibrium

TEXT = """
[experiment]
kind = "simulate"
name = "gravel-pits"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 2
[monitoring]
signal = "price"
sigma = 0.05
[[strategies]]
strategy = "trigger_price"
trigger = "equilibrium"
seats = "all"
[run]
periods = 40
replications = 20
delta = 0.9
seed = 5
[sweep]
"market.n_firms" = [2, 4]
"monitoring.sigma" = [0.05, 0.4]
"""


def test_every_cell_plays_the_equilibrium_of_its_own_market(tmp_path, write_experiment):
    f = write_experiment(TEXT)
    s = run_experiment(f, tmp_path / "run", workers=1, progress=False)
    assert s.complete
    with open_run(tmp_path / "run") as rf:
        rows = rf.rows()
    assert len(rows) == 4
    for r in rows:
        n, sigma = int(r.params["market.n_firms"]), float(r.params["monitoring.sigma"])
        market = market_from_dict({"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0,
                                   "cost": 10.0, "n_firms": n})
        ref = trigger_price_equilibrium(market, 0.9, "lognormal", sigma)
        m = r.metrics
        assert m["trigger_price.trigger"] == ref.trigger and m["trigger_price.quantity"] == ref.quantity
        assert (math.isnan(m["trigger_price.war_length"]) if ref.T is None else m["trigger_price.war_length"] == ref.T)
        if ref.trigger == 0.0:
            # no collusion sustainable: the firms compete and nothing is counted as collusion
            assert m["trigger_price.degenerate"] == 1.0 and m["collusive_share"] == 0.0
        else:
            assert m["trigger_price.degenerate"] == 0.0 and 0.0 < m["collusive_share"] <= 1.0
        # the share's interval stays in [0, 1]
        assert 0.0 <= m["collusive_share.low"] <= m["collusive_share"] <= m["collusive_share.high"] <= 1.0


def test_equilibrium_trigger_needs_a_noisy_price(cli, write_experiment):
    f = write_experiment(TEXT.replace('signal = "price"', 'signal = "perfect"'))
    r = cli("check", f)
    assert r.code == 2 and "strategies[1].trigger" in r.err and "noisy market price" in r.err


def test_seats_all_needs_the_market(cli, write_experiment):
    r = cli("check", write_experiment(TEXT.replace('seats = "all"', 'seats = "every"')))
    assert r.code == 2 and "strategies[1].seats" in r.err and "'all'" in r.err
