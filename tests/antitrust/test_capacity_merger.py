"""Mergers in price competition with capacity constraints, checked against the closed forms of Compte, Jenny and
Rey (2002), "Capacity constraints, mergers and collusion", European Economic Review 46(1).

The closed forms (from memory of the paper, and derived again here from its assumptions: inelastic demand ``M`` up
to the reservation price ``v``, common cost ``c``, shares proportional to capacities, each capacity below ``M``,
total capacity ``K`` above ``M``): a firm's collusive profit is ``(v - c) k_i M / K`` and its best deviation sells
its capacity just below ``v``, ``(v - c) k_i``. Held to its minmax -- rivals price at zero and sell first -- firm i
earns ``(v - c) max(0, M - (K - k_i))``. The critical discount factor under minmax punishments is therefore
``1 - M / K`` for a firm whose rivals cover the market and ``k_L / K`` for the largest firm when its rivals cannot;
the market's threshold is ``k_L / K`` when ``K - k_L < M`` (the largest firm binds) and ``1 - M / K`` otherwise.
Under Nash reversion with efficient rationing every firm's static payoff is proportional to its capacity (the
largest earns its residual monopoly ``(v - c)(M - K + k_L)``; Compte, Jenny and Rey, 2002, section 3), which gives
every firm the same threshold, ``k_L / K`` when ``K - k_L < M``.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from sim.antitrust.capacity_assess import CapacityResult, prepare_capacity, run_capacity
from sim.antitrust.capacity_plan import apply_plan, merger_plan_from_dict
from sim.antitrust.capacity_sensitivity import minmax_threshold
from sim.antitrust.screens import hhi
from sim.models.capacity_pricing import CapacityPricing

ROOT = Path(__file__).resolve().parents[2]
KILN = ROOT / "experiments" / "kiln-merger.toml"


def cjr_minmax_threshold(capacity, M: float) -> float:
    """Compte, Jenny and Rey (2002): the market's threshold under the harshest (minmax) punishment."""
    k = np.asarray(capacity, float)
    K, kl = k.sum(), k.max()
    return kl / K if K - kl < M else 1.0 - M / K


def cjr_binding(capacity, names, M: float) -> str | None:
    """The binding firm of the closed form: the largest when its rivals cannot serve the market, else none alone."""
    k = np.asarray(capacity, float)
    if k.sum() - k.max() < M and np.sum(k == k.max()) == 1:
        return names[int(np.argmax(k))]
    return None


@pytest.mark.parametrize("capacity, M", [
    ([40.0, 30.0, 20.0, 20.0, 10.0], 100.0),   # the largest firm's rivals cannot serve the market
    ([30.0, 30.0, 30.0, 30.0], 100.0),         # symmetric: Brock and Scheinkman (1985), threshold 1 - M / K
    ([50.0, 45.0, 40.0], 100.0),               # rivals cover the market: every firm at 1 - M / K
    ([70.0, 20.0, 20.0], 100.0),
])
def test_minmax_threshold_equals_the_compte_jenny_rey_closed_form(capacity, M):
    m = CapacityPricing(capacity, reservation_price=140.0, market_size=M, cost=60.0)
    assert minmax_threshold(m, {"rule": "proportional", "shares": None, "price": None}) == pytest.approx(
        cjr_minmax_threshold(capacity, M), abs=1e-12)


def test_no_spare_capacity_counts_as_zero_in_the_sensitivity_model():
    # common practice, no source: a market that sells every firm's capacity at the reservation price needs no
    # coordination (the convention of sim.antitrust.screens)
    m = CapacityPricing([30.0, 30.0], reservation_price=10.0, market_size=80.0)
    assert minmax_threshold(m, {"rule": "proportional", "shares": None, "price": None}) == 0.0


@pytest.fixture(scope="module")
def kiln():
    doc = tomllib.loads(KILN.read_text())
    doc["assess"].pop("global_sensitivity")  # the Sobol part has its own test below, at a smaller size
    return doc, run_capacity(prepare_capacity(doc))


def test_shipped_kiln_merger_changes_the_binding_firm_as_the_closed_form_says(kiln):
    doc, res = kiln
    mk = doc["market"]
    M = mk["market_size"]
    mg = res.merger
    before = mg.before.collusion.capacity
    after = mg.after.collusion.capacity
    # the capacities after: C and D summed, then 8 moved from Firm A to the merged firm
    assert after.tolist() == [32.0, 30.0, 48.0, 10.0] and after.sum() == before.sum()
    assert mg.harshest_binding_before == cjr_binding(before, mg.before.names, M) == "Firm A"
    assert mg.harshest_binding_after == cjr_binding(after, mg.after.names, M) == "Firm C+D"
    assert mg.before.collusion.harshest_market == pytest.approx(cjr_minmax_threshold(before, M), abs=1e-12)
    assert mg.after.collusion.harshest_market == pytest.approx(cjr_minmax_threshold(after, M), abs=1e-12)
    assert mg.harshest_change == pytest.approx(48 / 120 - 40 / 120, abs=1e-12)
    # Nash reversion: every firm at k_L / K; the static equilibrium is computed on a price grid, so the tolerance
    # is that of its deviation certificate (a few parts in a thousand here)
    assert mg.before.collusion.grim == pytest.approx(np.full(5, 40 / 120), abs=5e-3)
    assert mg.after.collusion.grim == pytest.approx(np.full(4, 48 / 120), abs=5e-3)
    # the largest firm's static payoff is its residual-monopoly profit (v - c)(M - K + k_L)
    v, c = mk["reservation_price"], mk["cost"]
    assert mg.before.equilibrium.payoffs[0] == pytest.approx((v - c) * (M - 80.0), rel=2e-3)


def test_without_the_transfer_the_merger_leaves_the_threshold_where_it_was(kiln):
    # Compte, Jenny and Rey (2002): only the largest capacity share matters; C + D (40) ties with Firm A (40)
    doc, res = kiln
    m = res.merger
    market = CapacityPricing.from_dict({k: v for k, v in doc["market"].items() if k != "model"})
    plan = merger_plan_from_dict({"firms": ["Firm C", "Firm D"]}, market)
    post, _, fmap = apply_plan(market, plan)
    rule = {"rule": "proportional", "shares": None, "price": None}
    assert minmax_threshold(post, rule) == pytest.approx(m.before.collusion.harshest_market, abs=1e-12)
    assert fmap == [0, 1, 2, 2, 3]


def test_concentration_row_matches_hhi_worked_by_hand(kiln):
    # capacity shares 1/3, 1/4, 1/6, 1/6, 1/12: HHI = 10000 (1/9 + 1/16 + 2/36 + 1/144) = 2361.1; the change of a
    # merger of two firms with 1/6 each is 2 * 10000 / 36 = 555.6 (US merger guidelines 2023, section 2.1: above
    # 1,800 and a change above 100 -- the structural presumption)
    _, res = kiln
    cs = res.merger.concentration
    assert cs.hhi_pre == pytest.approx(10000 * (1 / 9 + 1 / 16 + 2 / 36 + 1 / 144))
    assert cs.change == pytest.approx(20000 / 36)
    assert hhi([1 / 3, 1 / 4, 1 / 6, 1 / 6, 1 / 12]) == pytest.approx(cs.hhi_pre)
    assert cs.us_presumption and not cs.eu_safe_harbour
    keys = [r["key"] for r in res.merger.factors]
    assert keys == ["capacity_symmetry", "spare_capacity", "partial_cartels", "concentration"]
    assert all(r["source"] for r in res.merger.factors)
    # less symmetric capacities and a higher threshold: the model agrees with Compte, Jenny and Rey (2002)
    assert res.merger.factors[0]["model_direction"] == "facilitates" and res.merger.factors[0]["agrees"] is True


def test_partial_cartels_before_and_after(kiln):
    # every firm together: threshold k_L / K before (1/3 <= 0.35, sustainable) and after (0.4 > 0.35, not)
    _, res = kiln
    cw = res.merger.cartels
    grand = next(r for r in cw.rows if len(r["members"]) == 4)
    assert grand["sustainable_before"] and not grand["sustainable_after"]
    assert res.merger.factors[2]["model_direction"] == "hinders"


def test_capacity_result_round_trips_through_json(kiln):
    _, res = kiln
    d = res.to_dict()
    back = CapacityResult.from_dict(json.loads(json.dumps(d, allow_nan=False)))
    assert back.to_dict() == d


def test_sobol_of_the_kiln_merger_attributes_the_change_to_the_transfer():
    # With the rivals of the largest firm unable to serve the basin at every draw, the threshold is k_L / K
    # (Compte, Jenny and Rey, 2002): before the merger it does not move at all, after it depends on the amount
    # moved only, so that input carries the whole variance of the change (first-order index 1 up to the
    # estimator's error; 32 base samples: the tolerance 0.35 covers the bootstrap half-width SALib reports)
    doc = tomllib.loads(KILN.read_text())
    gs = doc["assess"]["global_sensitivity"]
    gs["n_base"] = 32
    doc["assess"]["delta"] = 0.35
    res = run_capacity(prepare_capacity(doc))
    s = res.merger.sobol
    j = list(s.inputs).index("move_1")
    assert s.std["before"] < 1e-12 and not np.any(s.first["before"]) and not np.any(s.total["before"])
    assert s.total["change"][j] == pytest.approx(1.0, abs=0.35)
    others = [k for k in range(len(s.inputs)) if k != j]
    assert np.all(np.abs(s.total["change"][others]) < 1e-9)
    assert math.isfinite(s.mean["after"]) and s.mean["after"] > 40 / 120
