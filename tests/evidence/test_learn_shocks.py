"""The words and the figure of the response to one adverse demand draw (sim.evidence.learn_shocks)."""

from __future__ import annotations

import numpy as np

from sim.core.stats import mean_estimate, wilson_estimate
from sim.evidence.catalogue import ENTRIES
from sim.evidence.learn_shocks import shock_response_figure, shock_response_lines
from sim.learning.shock_response import ShockResponse


def _response():
    # three sessions, four rows: the second session cuts its price by 0.3 in period 2 and is back by period 3
    wo = np.full((3, 4), 1.7)
    w = wo.copy()
    w[1, 2] = 1.4
    d = w - wo
    change = [mean_estimate(d[:, r]) for r in range(4)]
    return ShockResponse(0.5, w, wo, change, wilson_estimate(1, 3))


def test_the_lines_give_the_share_of_price_wars_and_the_deepest_cut():
    line = shock_response_lines(_response())[0]
    # 1 of 3 sessions; the deepest mean change is in period 2: -0.3 / 3 = -0.1
    assert "price war in 33.3 % of 3 sessions" in line
    assert "in period 2, -0.1000" in line


def test_the_figure_draws_the_mean_change_and_names_the_draw():
    drawn = shock_response_figure(_response())
    line = drawn.figure.axes[0].lines[0]
    assert np.allclose(line.get_ydata(), [0.0, 0.0, -0.1, 0.0])
    assert drawn.name == "price_after_adverse_shock" and "shock 0.5000 in period 1" in drawn.caption
    assert {"price_war_share", "shock_price_change"} <= set(ENTRIES)
