"""A demand model added from outside the package (``tests/models/toy_demand_plugin.py``, loaded as a user's
plugin) gets thresholds, a run of an experiment file and simulations through the extension points alone; a
capability it lacks is refused by name.

References: the closed forms derived in the plugin's docstring (Cournot first-order conditions, Vives, 1999,
"Oligopoly Pricing", ch. 4; the textbook linear Cournot profits); the grim-trigger threshold
``(pi_D - pi_C) / (pi_D - pi_N)`` (Friedman, 1971, "A non-cooperative equilibrium for supergames"); Lambert's
W from scipy.special.lambertw (a general-purpose reference library).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.special import lambertw

import sim
import strategies as S
from sim.cli import main
from sim.core.errors import InputError
from sim.models import DEMAND_TYPES
from sim.models.stagecore import evaluate_py, market_arrays
from sim.runner.kinds import load_plugin_file

PLUGIN = Path(__file__).with_name("toy_demand_plugin.py")


@pytest.fixture(scope="module")
def plugin():
    load_plugin_file(PLUGIN)
    return DEMAND_TYPES


def _exponential_closed_forms(A, b, c, n):
    """Per-firm Nash, collusive and deviation profits of the plugin's exponential demand (its docstring)."""
    K = A * math.exp(-c / b)
    w = float(lambertw((n - 1) / n).real)
    R = (n - 1) * (K / math.e) / n
    return {"nash": b * K * math.exp(-1.0 / n) / n**2, "collusive": b * K / (math.e * n),
            "deviation": b * R * (1 - w) ** 2 / w}


@pytest.mark.parametrize("n, cost", [(2, 3.0), (3, 0.0)])
def test_thresholds_of_a_plugin_model_match_closed_forms(plugin, n, cost):
    """Generic best responses, Gauss-Seidel Nash and the merit-order joint maximum on a model that gives only
    its demand and marginal revenue; tolerance 1e-8, far above the solvers' 1e-13 but below any reported digit."""
    A, b = 200.0, 8.0
    market = sim.Market(plugin["exponential"](size=A, scale=b), cost=cost, n_firms=n)
    rep = sim.critical_discount_factors(market, punishments=(1,))
    ref = _exponential_closed_forms(A, b, cost, n)
    st = rep.stage
    np.testing.assert_allclose(st.nash.firm_profits, ref["nash"], rtol=1e-8)
    np.testing.assert_allclose(st.nash.prices, cost + b / n, rtol=1e-8)
    np.testing.assert_allclose(st.collusive.firm_profits, ref["collusive"], rtol=1e-8)
    np.testing.assert_allclose(st.collusive.prices, cost + b, rtol=1e-8)
    np.testing.assert_allclose(st.deviation_profits, ref["deviation"], rtol=1e-8)
    grim = (ref["deviation"] - ref["collusive"]) / (ref["deviation"] - ref["nash"])
    assert rep.grim.market == pytest.approx(grim, rel=1e-8)
    # one period of Nash reversion: delta = (pi_D - pi_C) / (pi_C - pi_N), or not sustainable at all
    one = (ref["deviation"] - ref["collusive"]) / (ref["collusive"] - ref["nash"])
    if one < 1:
        assert rep.finite[0].market == pytest.approx(one, rel=1e-8)
    else:
        assert not rep.finite[0].sustainable


def test_a_thresholds_experiment_file_names_the_plugin_model(plugin, tmp_path, capsys):
    """The same numbers through ``supergame run --plugin FILE``: the [market] table names the model."""
    exp = tmp_path / "plugin-thresholds.toml"
    exp.write_text('[experiment]\nname = "plugin-demand"\nkind = "thresholds"\n\n'
                   '[market]\ndemand = "exponential"\nsize = 200.0\nscale = 8.0\ncost = 3.0\nn_firms = 2\n')
    out = tmp_path / "run"
    assert main(["run", str(exp), "--plugin", str(PLUGIN), "--out", str(out), "--workers", "1"]) == 0
    capsys.readouterr()
    with open(out / "results.csv", newline="") as f:
        row = next(csv.DictReader(f))
    ref = _exponential_closed_forms(200.0, 8.0, 3.0, 2)
    grim = (ref["deviation"] - ref["collusive"]) / (ref["deviation"] - ref["nash"])
    assert float(row["threshold.grim"]) == pytest.approx(grim, rel=1e-8)


def test_checking_a_file_refuses_what_the_plugin_model_cannot_do(plugin, tmp_path, capsys):
    """``supergame check`` refuses the trigger-price equilibrium of a model without a price signal before any
    work, naming the model."""
    exp = tmp_path / "plugin-trigger.toml"
    exp.write_text('[experiment]\nname = "plugin-trigger"\nkind = "thresholds"\n\n'
                   '[market]\ndemand = "exponential"\nsize = 200.0\nscale = 8.0\ncost = 3.0\nn_firms = 2\n\n'
                   '[monitoring]\nsignal = "price"\nsigma = 0.1\n\n[thresholds]\ndeltas = [0.9]\n')
    assert main(["check", str(exp), "--plugin", str(PLUGIN)]) == 2
    err = capsys.readouterr().err
    assert "market.demand" in err and "price distribution of the demand model 'exponential'" in err


def test_missing_capabilities_are_refused_by_name(plugin):
    """No price signal: the trigger-price equilibrium refuses the model (it used to apply the isoelastic
    formula to every homogeneous demand that was not linear); no stage-core code: so do the simulations."""
    market = sim.Market(plugin["exponential"](size=200.0, scale=8.0), cost=3.0, n_firms=2)
    with pytest.raises(InputError) as e:
        sim.trigger_price_equilibrium(market, 0.9, "lognormal", 0.1)
    assert e.value.key == "market.demand"
    assert "price distribution of the demand model 'exponential', which it does not provide" in e.value.message
    with pytest.raises(InputError) as e:
        sim.simulate(market, S.GrimTrigger(), periods=5, replications=2, baseline=False)
    assert e.value.key == "market.demand" and "'exponential'" in e.value.message
    assert "stage-core code" in e.value.message


def test_a_plugin_model_reusing_a_kernel_code_evaluates_like_its_own_definition(plugin, rng):
    """The linear Cournot code with the plugin's parameters gives the plugin's own prices and profits."""
    ms = sim.Market(plugin["sized_linear"](choke=120.0, size=60.0), cost=[20.0, 25.0, 30.0]).spec()
    arrays = market_arrays(ms)
    for a in rng.uniform(0.0, 40.0, (200, 3)):
        theta = float(rng.uniform(0.5, 1.5))
        _, p, pi, _, _ = evaluate_py(arrays, a, theta)
        _, p0, pi0 = ms.evaluate(a[None, :], theta)
        np.testing.assert_allclose(p, p0[0], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(pi, pi0[0], rtol=1e-12, atol=1e-9)


def test_a_short_simulation_of_a_plugin_model_matches_closed_forms(plugin):
    """Grim trigger against grim trigger earns the collusive profit every period; an opportunist that cheats in
    period 0 earns the deviation profit once and then Nash, its victim the victim's profit once. Deterministic
    (no noise), so the tolerance is rounding only."""
    a, size, c, T = 120.0, 60.0, 20.0, 50
    b = a / size
    market = sim.Market(plugin["sized_linear"](choke=a, size=size), cost=c, n_firms=2)
    pi_n, pi_c = (a - c) ** 2 / (9 * b), (a - c) ** 2 / (8 * b)
    pi_d, pi_v = 9 * (a - c) ** 2 / (64 * b), 3 * (a - c) ** 2 / (32 * b)
    both = sim.simulate(market, S.GrimTrigger(), periods=T, replications=3, delta=0.9, seed=1, baseline=False)
    np.testing.assert_allclose(both.profits, pi_c, rtol=1e-9)
    cheat = sim.simulate(market, [S.Opportunist(probability=1.0, start=0), S.GrimTrigger()], periods=T,
                         replications=3, delta=0.9, seed=1, baseline=False)
    np.testing.assert_allclose(cheat.profits[:, 0], (pi_d + (T - 1) * pi_n) / T, rtol=1e-9)
    np.testing.assert_allclose(cheat.profits[:, 1], (pi_v + (T - 1) * pi_n) / T, rtol=1e-9)
    assert np.all(cheat.first_breakdown == 1)
