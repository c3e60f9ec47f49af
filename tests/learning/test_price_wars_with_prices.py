"""The learned response to one adverse demand draw, measured for learners that see past prices as well as for those
that see the profit signal, and the assumptions a learn run's report states (only those of what it uses).

Sources: Calvano, Calzolari, Denicolo and Pastorello (2021), "Algorithmic collusion with imperfect monitoring",
International Journal of Industrial Organization 79 (learners whose state the shock does not move do not start
price wars after a bad draw; learners that see a signal the shock moves do); Green and Porter (1984), Econometrica
52(1).
"""

from __future__ import annotations

import numpy as np

import sim
from sim.evidence.learn import console
from sim.learning.analysis import LearnSpec, learn_analysis, measures_price_wars
from sim.runner.analyses.learn import SIGNAL_NAMES, learn_metrics
from sim.runner.analyses.learn_assumptions import cell_assumptions
from strategies.qlearning import QLearner


def logit_market():
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)


def test_which_runs_measure_price_wars():
    assert measures_price_wars({"demand_sigma": 0.1})
    assert measures_price_wars({"demand_sigma": 0.1, "observe": "own_profit"})
    assert not measures_price_wars({})  # no shock, nothing to measure
    assert not measures_price_wars({"demand_sigma": 0.1, "observe": "noisy_prices"})
    assert not measures_price_wars({"demand_sigma": 0.1}, event=object())


def test_learners_that_see_prices_get_the_measure_and_its_columns():
    # a small run: 6 sessions of the coarse logit duopoly with a lognormal shock of sigma 0.2
    spec = LearnSpec(logit_market(), QLearner(m=5, beta=2e-3),
                     {"sessions": 6, "seed": 4, "convergence": 2000, "max_periods": 200_000, "demand_sigma": 0.2})
    res = learn_analysis(spec, workers=1)
    sr = res.shock_response
    conv = int(np.sum(res.per_session["converged"]))
    assert conv > 0
    assert sr["cut"]["n"] == conv and 0.0 <= sr["cut"]["low"] <= sr["cut"]["value"] <= sr["cut"]["high"] <= 1.0
    assert "greedy" not in sr  # greedy play that sees prices does not see a draw: nothing to force
    assert len(sr["change"]) == sr["periods"] + 1 and sr["change"][0]["value"] == 0.0  # nothing differs before it
    m = learn_metrics(res)
    for stem in SIGNAL_NAMES:
        assert stem in m
    text = console(res)
    assert "Learned price wars: after one adverse demand draw" in text
    assert "What the learners observe" not in text  # the profit signal's words only under the signal


DOC = {"market": {}, "learning": {}, "run": {}}


def test_the_assumptions_describe_the_learners_and_protocols_used():
    q = cell_assumptions(DOC)
    assert any(a.startswith("Q-learners: tabular Q-learning") for a in q)
    assert any("asynchronous rule" in a for a in q) and any("simultaneous moves" in a for a in q)
    assert not any("demand_sigma" in a or "noisy_prices" in a or "UCB" in a for a in q)
    ucb = cell_assumptions({**DOC, "learning": {"family": "ucb", "noise": 0.1}})
    assert any(a.startswith("UCB bandits") for a in ucb)
    assert not any("Q-learning" in a for a in ucb)
    sync = cell_assumptions({**DOC, "learning": {"update": "synchronous", "demand_sigma": 0.1}})
    assert any("Asker, Fershtman and Pakes" in a for a in sync) and any("demand_sigma" in a for a in sync)
    noisy = cell_assumptions({**DOC, "learning": {"observe": "noisy_prices"}})
    assert any("play with error after learning" in a for a in noisy)
    versus = cell_assumptions({**DOC, "strategies": [{"strategy": "qlearning"}, {"strategy": "grim_trigger"}]})
    assert any(a.startswith("Automata seats") for a in versus)
    alt = cell_assumptions({**DOC, "learning": {"timing": "alternating"}})
    assert any("Klein, 2021" in a for a in alt) and not any("simultaneous moves" in a for a in alt)


def test_limit_profits_and_the_deviation_shares_carry_their_intervals():
    spec = LearnSpec(logit_market(), QLearner(m=5, beta=2e-3),
                     {"sessions": 6, "seed": 5, "convergence": 2000, "max_periods": 200_000})
    m = learn_metrics(learn_analysis(spec, workers=1))
    for stem in ("limit_profit.firm1", "limit_profit.firm2", "deviation_pays", "returned", "periods_to_return"):
        assert m[f"{stem}.low"] <= m[stem] <= m[f"{stem}.high"], stem
    assert m["deviation_pays.high"] > m["deviation_pays.low"] or m["deviation_pays"] in (0.0, 1.0)
    for stem in ("deviation_pays", "returned"):
        assert 0.0 <= m[f"{stem}.low"] and m[f"{stem}.high"] <= 1.0  # a share's interval stays in its domain
