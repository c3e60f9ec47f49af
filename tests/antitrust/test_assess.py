"""The coordinated-effects comparison: closed-form thresholds before and after, the binding firm in
homogeneous Bertrand with unequal shares, simulated persistence against the geometric law of the
first breakdown, asymmetry measures against the Cournot closed form, the factor table's arithmetic,
sensitivity (scale invariance of share-calibrated logit markets; where the conclusion flips) and
validation of the experiment tables."""

import json
import math

import numpy as np
import pytest

import sim
from sim import InputError, LinearDemand, LogitDemand, Market
from sim.antitrust.assess import (
    assess,
    assessment_from_dict,
    asymmetry,
    prepare_assessment,
    symmetric_counterpart,
)
from sim.antitrust.calibration import MarketData
from sim.antitrust.compare import flips
from sim.antitrust.merger import Merger
from sim.core.jsonutil import dumps

SMALL_RUN = {"periods": 200, "replications": 200, "seed": 7}


def _f(k: int) -> float:
    return (k + 1) ** 2 / (k * k + 6 * k + 1)


def test_four_to_three_symmetric_cournot():
    """Symmetric linear Cournot, four firms merging to three without efficiencies: the grim-trigger
    threshold falls from 25/41 to 4/7, as the n-firm formula (n+1)^2/(n^2+6n+1) says (Friedman, 1971;
    the n-firm form as in Vives, 1999, Oligopoly Pricing, ch. 9 -- from memory)."""
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    a = assess(m, Merger([1, 2]), simulate=False, deltas=(0.59, 0.6))
    c = a.conclusion
    assert c["threshold_before"] == pytest.approx(25 / 41, rel=1e-12)
    assert c["threshold_after"] == pytest.approx(4 / 7, rel=1e-12)
    assert c["direction"] == "easier" and c["change"] == pytest.approx(4 / 7 - 25 / 41, rel=1e-10)
    np.testing.assert_allclose(a.before.thresholds["grim"]["per_firm"], 25 / 41, rtol=1e-12)
    np.testing.assert_allclose(a.after.thresholds["grim"]["per_firm"], 4 / 7, rtol=1e-12)
    # at delta = 0.6 the agreement is sustainable only after the merger (4/7 < 0.6 < 25/41)
    assert len(a.after.names) == 3 and len(a.merger["names_post"]) == 3
    a6 = assess(m, Merger([1, 2]), simulate=False, run={"delta": 0.6}, deltas=(0.6,))
    assert a6.conclusion["category"] == "after only"
    # partial collusion at 0.6: the full agreement after, less than full before
    gain = {(p["scheme"], p.get("T"), p["delta"]): p["profit_gain"] for p in a6.before.partial_collusion}
    gain_after = {(p["scheme"], p.get("T"), p["delta"]): p["profit_gain"] for p in a6.after.partial_collusion}
    assert gain_after[("grim", None, 0.6)] == pytest.approx(1.0) and gain[("grim", None, 0.6)] < 1.0
    # the fewer-firms factor uses the symmetric counterpart: the same formula at 4 and 3 firms
    row = next(f for f in a.factors if f["key"] == "firms")
    assert row["factor"] == "fewer firms"
    assert row["values"]["base"] == pytest.approx(_f(4), rel=1e-12)
    assert row["values"]["varied"] == pytest.approx(_f(3), rel=1e-12)
    assert row["model_direction"] == "facilitates" and row["agrees"] is True


def test_homogeneous_bertrand_unequal_shares_binding_firm_is_the_smallest():
    """Homogeneous Bertrand, equal costs, market shares s_i at the common collusive price: firm i's
    grim-trigger constraint s_i pi_M / (1 - delta) >= pi_M gives delta_i = 1 - s_i, so the smallest
    firm binds (Ivaldi, Jullien, Rey, Seabright and Tirole, 2003, The Economics of Tacit Collusion,
    section on symmetry; Tirole, 1988, ch. 6 -- from memory). Shares at a common price are the
    demand's split weights; the merged firm's weight is the sum of its owners'."""
    shares = [0.45, 0.3, 0.15, 0.1]
    m = Market(LinearDemand(10, 1, split=shares), cost=2.0, n_firms=4, model="bertrand")
    a = assess(m, Merger([2, 4]), simulate=False, deltas=())
    g = a.before.thresholds["grim"]
    np.testing.assert_allclose(g["per_firm"], 1 - np.array(shares), rtol=1e-12)
    assert g["binding_firm"] == 4 and g["market"] == pytest.approx(0.9, rel=1e-12)
    # after: Firm 2 + Firm 4 holds 0.4; the smallest is Firm 3 with 0.15
    ga = a.after.thresholds["grim"]
    np.testing.assert_allclose(ga["per_firm"], [0.55, 0.6, 0.85], rtol=1e-12)
    assert ga["binding_name"] == "Firm 3" and ga["market"] == pytest.approx(0.85, rel=1e-12)
    assert a.conclusion["direction"] == "easier"
    assert a.conclusion["binding_before"] == "Firm 4" and a.conclusion["binding_after"] == "Firm 3"


def test_asymmetry_against_the_cournot_closed_form():
    """Linear Cournot quantities q_i = (a - (n+1) c_i + sum c) / ((n+1) b) (e.g. Tirole, 1988,
    ch. 5): with a = 100, b = 1 and costs 10, 10, 20 they are 25, 25 and 15."""
    m = Market(LinearDemand(100, 1), cost=[10, 10, 20])
    s = asymmetry(m)
    sh = np.array([25, 25, 15]) / 65
    np.testing.assert_allclose(s["shares"], sh, rtol=1e-12)
    assert s["hhi"] == pytest.approx(10_000 * (sh * sh).sum(), rel=1e-12)
    assert s["share_ratio"] == pytest.approx(25 / 15, rel=1e-12)
    assert s["cost_ratio"] == pytest.approx(2.0) and s["cost_cv"] == pytest.approx(np.std([10, 10, 20]) / (40 / 3))
    assert s["capacities"] is None and s["products"] == [1, 1, 1]
    sym = symmetric_counterpart(m)
    np.testing.assert_allclose(sym.spec().cost, 40 / 3)
    assert sim.critical_discount_factors(sym, punishments=()).grim.market == pytest.approx(_f(3), rel=1e-12)


def test_persistence_matches_the_geometric_first_breakdown():
    """Grim trigger with implementation errors e only: some firm trembles in a period with
    probability q = 1 - (1 - e)^n, so the first breakdown is geometric and its mean over a horizon H
    is (1 - (1 - q)^H) / q (elementary). The simulated restricted mean (Kaplan-Meier) lies within 4
    standard errors before (n = 4) and after (n = 3) -- 4 s.e. so that two fixed-seed checks fail by
    chance with probability below 1e-4."""
    e, H = 0.01, 200
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    a = assess(m, Merger([1, 2]), monitoring={"implementation_error": e}, run={**SMALL_RUN, "periods": H},
               deltas=())
    for label, side, n in (("before", a.before, 4), ("after", a.after, 3)):
        q = 1 - (1 - e) ** n
        expected = (1 - (1 - q) ** H) / q
        est = side.simulation["first_breakdown"]
        assert abs(est["value"] - expected) < 4 * est["se"], (label, est["value"], expected, est["se"])
    p = a.conclusion["persistence"]
    assert p["collusive_share_after"] > p["collusive_share_before"] and p["significant"]
    # more noise, less persistence: the transparency factor
    row = next(f for f in a.factors if f["key"] == "transparency")
    assert row["factor"] == "more transparent (less noise)"
    assert row["model_direction"] == "facilitates" and row["agrees"] is True


def test_same_seed_same_numbers_and_key_prefix_changes_streams():
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=3)
    kw = {"monitoring": {"perception_error": 0.02}, "run": SMALL_RUN, "deltas": (0.5,)}
    one = dumps(assess(m, Merger([1, 2]), **kw).to_dict())
    two = dumps(assess(m, Merger([1, 2]), **kw).to_dict())
    assert one == two
    other = assess(m, Merger([1, 2]), key=(9,), **kw)
    assert other.before.simulation["collusive_share"]["value"] != json.loads(one)["before"]["simulation"][
        "collusive_share"]["value"]


def test_frequency_and_growth_rows():
    """Frequency: with per-period discount factor delta, interacting once every L periods gives
    delta^L, so collusion survives up to L = ln(threshold) / ln(delta). Growth: profits growing at
    rate g make the effective discount factor delta (1 + g) (derived in the bundle's methods; checked
    against the discounted streams in test_growth_and_decline_against_the_discounted_streams), so the growth
    needed is threshold / delta - 1."""
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    a = assess(m, Merger([1, 2]), simulate=False, run={"delta": 0.8}, deltas=(), growth=0.05)
    rows = {f["key"]: f for f in a.factors}
    fr = rows["frequency"]["values"]
    assert fr["before"]["longest_interval"] == pytest.approx(math.log(25 / 41) / math.log(0.8), rel=1e-12)
    assert fr["after"]["longest_interval"] == pytest.approx(math.log(4 / 7) / math.log(0.8), rel=1e-12)
    gr = rows["growth"]["values"]
    assert gr["before"]["growth_needed"] == pytest.approx((25 / 41) / 0.8 - 1, rel=1e-12)
    # an already symmetric market has nothing to symmetrise
    assert rows["symmetry"]["model_direction"] == "not computed"
    assert rows["transparency"]["model_direction"] == "not computed"


def test_logit_thresholds_do_not_depend_on_the_margin_but_on_the_market_size():
    """With shares fixed, a logit calibration's margin sets mu; every markup (mu / (1 - S_f)) and
    every profit then scales with mu while the effective qualities (a_i - c_i) / mu = 1 / (1 - S_f) +
    ln(s_i / s_0) do not, so every ratio of profits and every critical discount factor is the same
    (derived from the Werden-Froeb calibration equations). The potential market size changes the
    shares and the outside good's share, so it moves the thresholds."""
    d = MarketData("logit", prices=[4.2, 3.9, 4.6, 3.7], shares=[0.22, 0.18, 0.12, 0.10], size=5e4, margin=0.35)
    a = assess(d, Merger([2, 4]), simulate=False, deltas=(),
               sensitivity={"margin": [0.2, 0.35, 0.5], "size": {"start": 4e4, "stop": 1.2e5, "num": 3}})
    s = a.sensitivity["margin"]
    np.testing.assert_allclose(s["threshold_before"], a.conclusion["threshold_before"], rtol=1e-9)
    np.testing.assert_allclose(s["threshold_after"], a.conclusion["threshold_after"], rtol=1e-9)
    assert "do not depend on margin" in s["note"]
    z = a.sensitivity["size"]
    assert np.ptp(z["threshold_before"]) > 1e-3 and "note" not in z
    assert z["observed"] == 5e4 and a.conclusion["robustness"]["margin"].startswith("the merger's effect")


def test_where_the_conclusion_flips_along_a_calibration_input():
    """Differentiated Bertrand calibrated from the market elasticity and a margin: the margin sets
    the substitutability and so the thresholds. At delta = 0.65 the conclusion goes from 'neither'
    to 'before only' to 'both' as the margin rises; each reported bracket is checked against the
    thresholds at its ends."""
    d = MarketData("differentiated", model="bertrand", prices=[10.0] * 4, quantities=[10.0] * 4,
                   market_elasticity=-1.0, margin=0.25)
    xs = [0.15, 0.2, 0.3]
    a = assess(d, Merger([1, 2]), simulate=False, deltas=(), run={"delta": 0.65}, sensitivity={"margin": xs})
    s = a.sensitivity["margin"]
    assert s["category_at_delta"] == ["neither", "before only", "both"]
    assert [c["from"] for c in s["category_flips"]] == ["neither", "before only"]
    for c in s["category_flips"]:
        lo, hi = c["between"]
        i, j = xs.index(lo), xs.index(hi)
        assert (s["threshold_before"][i] > 0.65) != (s["threshold_before"][j] > 0.65) or (
            (s["threshold_after"][i] > 0.65) != (s["threshold_after"][j] > 0.65))
    assert set(s["direction"]) == {"harder"} and s["flips"] == []


def test_flip_locator():
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    assert flips(x, np.array([1.0, 0.5, -0.5, -1.0, 1.0])) == pytest.approx([1.5, 3.5])
    assert flips(x, np.array([0.0, 1.0, 1.0, np.nan, 2.0])) == []
    assert flips(x, np.array([1.0, 0.0, -1.0, 0.0, 0.0])) == pytest.approx([1.0])


def test_delta_and_noise_sensitivity():
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    a = assess(m, Merger([1, 2]), monitoring={"perception_error": 0.01}, run=SMALL_RUN, deltas=(),
               sensitivity={"delta": {"start": 0.5, "stop": 0.7, "step": 0.05}, "noise": [0.0, 1.0, 2.0]})
    sd = a.sensitivity["delta"]
    assert sd["values"] == pytest.approx([0.5, 0.55, 0.6, 0.65, 0.7])
    assert sd["category"] == ["neither", "neither", "after only", "both", "both"]
    assert sd["flips"] == pytest.approx([4 / 7, 25 / 41])
    sn = a.sensitivity["noise"]
    # without noise grim trigger never breaks down
    assert sn["collusive_share_before"][0] == 1.0 and sn["collusive_share_after"][0] == 1.0
    assert sn["collusive_share_before"][2] < sn["collusive_share_before"][1] < 1.0
    assert sn["monitoring"][2]["perception_error"] == pytest.approx(0.02)


_DOC = {
    "experiment": {"name": "t", "kind": "assess"},
    "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 3},
    "merger": {"firms": [1, 2]},
    "assess": {"simulate": False, "deltas": [0.5]},
}


@pytest.mark.parametrize("change, key, words", [
    ({"assess": {"colour": 1}}, "assess.colour", "unknown key"),
    ({"assess": {"scheme": "finite"}}, "assess.length", "missing"),
    ({"assess": {"scheme": "grim", "length": 2}}, "assess.length", "only used"),
    ({"assess": {"deltas": [1.2]}}, "assess.deltas[1]", "(0, 1)"),
    ({"assess": {"sensitivity": {"margin": [0.2, 0.3]}}}, "assess.sensitivity.margin", "[data] table"),
    ({"assess": {"sensitivity": {"delta": {"start": 0.5, "stop": 1.3, "num": 3}}}}, "assess.sensitivity.delta[3]",
     "(0, 1)"),
    ({"assess": {"sensitivity": {"delta": {"start": 0.5, "stop": 0.9}}}}, "assess.sensitivity.delta", "num"),
    ({"assess": {"sensitivity": {"delta": [0.5, 0.6, 0.5]}}}, "assess.sensitivity.delta", "twice"),
    ({"assess": {"sensitivity": {"delta": {"start": 0.5, "stop": 0.9, "num": 3, "base": 2}}}},
     "assess.sensitivity.delta.base", "unknown key"),
    ({"assess": {"sensitivity": {"delta": [0.5]}}}, "assess.sensitivity.delta", "at least 2"),
    ({"assess": {"sensitivity": {"wind": [1, 2]}}}, "assess.sensitivity.wind", "unknown key"),
    ({"collusion": {"agreement": "given"}}, "collusion.agreement", "do not carry over"),
    ({"run": {"speed": 1}}, "run.speed", "unknown key"),
    ({"run": {"delta": 1.5}}, "run.delta", "(0, 1)"),
    ({"monitoring": {"signal": "price"}}, "strategies", "price-watching"),
    ({"merger": {"firms": [1, 7]}}, "merger.firms", "firm 7 does not exist"),
    ({"data": {"demand": "logit"}}, "data", "not both"),
    ({"sweep": {"run.delta": [0.5, 0.6]}}, "sweep", "supergame run"),
    ({"experiment": {"kind": "simulate"}}, "experiment.kind", "assess"),
])
def test_bad_tables_raise_naming_the_field(change, key, words):
    doc = {**_DOC, **change}
    with pytest.raises(InputError) as err:
        assess(**assessment_from_dict(doc))
    assert err.value.key == key and words in err.value.message


def test_missing_tables():
    with pytest.raises(InputError, match="merger"):
        assessment_from_dict({k: v for k, v in _DOC.items() if k != "merger"})
    with pytest.raises(InputError) as err:
        assessment_from_dict({k: v for k, v in _DOC.items() if k != "market"})
    assert err.value.key == "data" and "missing" in err.value.message


def test_post_merger_line_up_keeps_the_first_merging_firms_strategy():
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=3)
    lineup = [{"strategy": "grim_trigger"}, {"strategy": "finite_punishment", "length": 2},
              {"strategy": "grim_trigger"}]
    a = assess(m, Merger([2, 3]), lineup=lineup, monitoring={"perception_error": 0.01}, run=SMALL_RUN, deltas=())
    assert [e["strategy"] for e in a.settings["lineup_after"]] == ["grim_trigger", "finite_punishment"]
    assert a.after.simulation["settings"]["lineup"][1]["strategy"] == "finite_punishment"
    # the assumptions say so
    said = [x for x in a.assumptions if "the merged firm Firm 2 + Firm 3 plays" in x]
    assert len(said) == 1
    assert "strategy of Firm 2, the lowest-numbered merging firm: finite_punishment (length 2)" in said[0]
    assert "the strategies of Firm 3 are dropped" in said[0]


def test_assessment_is_json_ready_and_carries_the_caution():
    m = Market(LinearDemand(100, 1), cost=[10, 12, 14], capacity=[40, 40, 40])
    a = assess(m, Merger([2, 3], efficiency=0.1), simulate=False, deltas=(0.6,), agreement="proportional")
    d = json.loads(dumps(a.to_dict()))
    assert "not proof of conduct" in d["caution"]
    assert d["merger"]["post_market"]["cost"] == pytest.approx([10.0, 12 * 0.9])
    assert d["before"]["thresholds"]["grim"]["binding_name"] in ("Firm 1", "Firm 2", "Firm 3")
    assert d["conclusion"]["statement"].startswith("Under the stated assumptions")
    assert any("efficiency" in x for x in d["assumptions"])


def test_warning_when_the_agreement_leaves_a_firm_below_its_nash_profit():
    """The joint-profit maximum of a logit market sets one markup for every product (Anderson, de
    Palma and Thisse, 1992, ch. 7); with a dominant two-product firm it leaves the small firms below
    their static Nash profits, so no punishment can sustain it: the conclusion says so, and the
    proportional agreement is sustainable."""
    d = MarketData("logit", prices=[1.5, 1.4, 1.6, 1.2], shares=[0.3, 0.2, 0.1, 0.1], margin=0.3, owner=[1, 1, 2, 3])
    a = assess(d, Merger([1, 2]), simulate=False, deltas=())
    pr = a.before.stage["profits"]
    assert pr["collusive"][1] < pr["nash"][1]
    assert a.conclusion["threshold_before"] is None and len(a.conclusion["warnings"]) == 2
    assert "Firm 2 and Firm 3 no more than their static Nash profit" in a.conclusion["statement"]
    p = assess(d, Merger([1, 2]), simulate=False, deltas=(), agreement="proportional")
    assert p.conclusion["warnings"] == [] and 0 < p.conclusion["threshold_before"] < 1


FACTOR_NAMES = ["fewer firms", "more symmetric firms", "more transparent (less noise)", "more frequent interaction",
                "growing demand"]


def test_factor_table_names_factors_by_their_direction():
    """Each factor is named by the change it considers, so that 'facilitates' reads 'this change makes
    collusion easier', and every direction the literature states is 'facilitates' under those names, each with
    the source that states it: section titles III.4 'Frequent interaction facilitates collusion' and III.5
    'Market transparency facilitates collusion' of Ivaldi, Jullien, Rey, Seabright and Tirole (2003, The
    Economics of Tacit Collusion); the abstract of Davies and Olczak (2008, Competition Policy International:
    "conventional wisdom that collusion is more likely the fewer firms there are in a market and the more
    symmetric they are"); section 1 of Correia-da-Silva, Pinho and Vasconcelos (2013, FEP Working Paper 487:
    "Demand growth is usually understood as facilitating collusion"). The two structural rows (frequency, growth)
    are not computed directions: reported as structural, with no 'agree'."""
    m = Market(LinearDemand(100, 1), cost=[10.0, 10.0, 12.0, 14.0])
    a = assess(m, Merger([3, 4]), monitoring={"implementation_error": 0.01}, run=SMALL_RUN, deltas=())
    rows = {f["key"]: f for f in a.factors}
    assert [f["factor"] for f in a.factors] == FACTOR_NAMES
    assert {f["literature_direction"] for f in a.factors} == {"facilitates"}
    assert rows["transparency"]["source"] == "Ivaldi et al. (2003), section III.5"
    assert rows["frequency"]["source"] == "Ivaldi et al. (2003), section III.4"
    assert rows["symmetry"]["source"].startswith("Davies and Olczak (2008), abstract")
    assert rows["growth"]["source"].startswith("Correia-da-Silva, Pinho and Vasconcelos (2013), section 1")
    fr = rows["frequency"]
    assert fr["model_direction"] == "structural (by construction)" and fr["structural"]
    assert fr["agrees"] is None and "not a computed direction" in fr["reading"]
    # growth is computed: the threshold with the stated growth (0.02 by default) against the one without
    gr = rows["growth"]
    assert not gr["structural"] and gr["model_direction"] in ("facilitates", "not computed")
    assert gr["agrees"] is (True if gr["model_direction"] == "facilitates" else None)
    # computed rows: linear Cournot thresholds rise with the number of firms, (n+1)^2 / (n^2 + 6n + 1)
    assert rows["firms"]["model_direction"] == "facilitates" and rows["firms"]["agrees"] is True
    assert rows["firms"]["reading"].startswith("in the model fewer firms make collusion easier")
    assert not rows["firms"]["structural"] and not rows["transparency"]["structural"]
    # the row's words match its cells in every case, and nothing is left unsourced
    for f in a.factors:
        lit = "collusion easier" if f["literature_direction"] == "facilitates" else "collusion harder"
        assert f["reading"].endswith(lit) and f["source"] and "memory" not in json.dumps(f)


def test_fewer_firms_factor_counts_firms_not_products():
    """Three firms of two logit products each: the factor compares the symmetric counterparts with
    three and with two firms (of two products each), not six and five products. The market is
    already symmetric, so its three-firm counterpart is the market itself."""
    d = LogitDemand(quality=2.0, mu=0.5, size=1.0)
    m = Market(d, cost=1.0, model="bertrand", owner=[1, 1, 2, 2, 3, 3])
    a = assess(m, Merger([1, 2]), simulate=False, deltas=())
    row = next(f for f in a.factors if f["key"] == "firms")
    v = row["values"]
    assert (v["base_label"], v["varied_label"], v["products_per_firm"]) == ("3 firms", "2 firms", 2)
    assert "3 vs 2 firms of 2 products each" in row["varied"]
    assert v["base"] == pytest.approx(a.conclusion["threshold_before"], rel=1e-12)
    two = Market(d, cost=1.0, model="bertrand", owner=[1, 1, 2, 2])
    assert v["varied"] == pytest.approx(sim.critical_discount_factors(two, punishments=()).grim.market, rel=1e-12)
    # uneven ownership: firms of one product each, and a note saying so
    u = assess(Market(d, cost=1.0, model="bertrand", owner=[1, 1, 2, 3]), Merger([2, 3]), simulate=False, deltas=())
    row = next(f for f in u.factors if f["key"] == "firms")
    assert "3 vs 2 single-product firms" in row["varied"] and "different numbers of products" in row["note"]
    three = Market(d, cost=1.0, model="bertrand", n_firms=3)
    assert row["values"]["base"] == pytest.approx(sim.critical_discount_factors(three, punishments=()).grim.market,
                                                  rel=1e-12)


def test_scaled_noise_is_validated_before_any_work():
    """The transparency factor's rescaled noise and every noise-sensitivity scale are built and
    checked when the assessment is prepared: a normal shock of sigma 0.2 doubled (0.4) is above the
    1/3 cap, and scale 3 takes a perception error of 0.4 to 1.2 (above one) -- refused, naming the
    setting, where before the first failed mid-run and the second was clipped to one."""
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    with pytest.raises(InputError) as err:
        prepare_assessment(m, Merger([1, 2]), monitoring={"noise": "normal", "sigma": 0.2}, run=SMALL_RUN)
    assert err.value.key == "assess.transparency_scale"
    assert "monitoring.sigma from 0.2 to 0.4" in err.value.message and "at most 1.667" in err.value.message
    p = prepare_assessment(m, Merger([1, 2]), monitoring={"noise": "normal", "sigma": 0.2}, run=SMALL_RUN,
                           transparency_scale=0.5)
    assert p.rescaled_monitoring.sigma == pytest.approx(0.1)
    mon = {"perception_error": 0.4}
    with pytest.raises(InputError) as err:
        prepare_assessment(m, Merger([1, 2]), monitoring=mon, run=SMALL_RUN, sensitivity={"noise": [1.0, 3.0]})
    assert err.value.key == "assess.sensitivity.noise[2]"
    assert "monitoring.perception_error from 0.4 to 1.2" in err.value.message
    assert "at most 2.5" in err.value.message
    # the largest scale is allowed, and the scaled values are the products, never clipped
    a = assess(m, Merger([1, 2]), monitoring=mon, run={**SMALL_RUN, "periods": 20, "replications": 20}, deltas=(),
               transparency_scale=2.5, sensitivity={"noise": [0.5, 2.5]})
    assert [x["perception_error"] for x in a.sensitivity["noise"]["monitoring"]] == [0.2, 1.0]
    assert a.settings["transparency_scale"] == 2.5
    with pytest.raises(InputError) as err:
        prepare_assessment(m, Merger([1, 2]), monitoring=mon, simulate=False, sensitivity={"noise": [1.0, 2.0]})
    assert err.value.key == "assess.sensitivity.noise" and "assess.simulate" in err.value.message


def test_default_stream_key_is_that_of_cell_zero():
    """assess() with no key draws from the streams of cell 0 -- CellContext(index=0).key, the key
    supergame run gives the one cell of a file without a sweep -- so the library, supergame assess and
    supergame run give the same numbers for the same file and seed."""
    from sim.runner.kinds import CellContext

    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=3)
    kw = {"monitoring": {"perception_error": 0.02}, "run": SMALL_RUN, "deltas": ()}
    plain = assess(m, Merger([1, 2]), **kw).before.simulation["collusive_share"]["value"]
    cell0 = assess(m, Merger([1, 2]), key=CellContext(index=0).key, **kw).before.simulation
    assert plain == cell0["collusive_share"]["value"]
    empty = assess(m, Merger([1, 2]), key=(), **kw).before.simulation["collusive_share"]["value"]
    assert plain != empty


def test_sensitivity_ranges_take_the_sweep_syntax():
    """[assess.sensitivity] ranges are read by the experiment files' one range parser (the [sweep]
    syntax): log ranges, values with labels, steps, and a range given from high to low (sorted)."""
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    a = assess(m, Merger([1, 2]), monitoring={"perception_error": 0.01}, run={**SMALL_RUN, "replications": 20},
               deltas=(), sensitivity={"delta": {"start": 0.7, "stop": 0.5, "num": 3},
                                       "noise": {"start": 0.25, "stop": 4.0, "num": 3, "log": True}})
    assert a.sensitivity["delta"]["values"] == pytest.approx([0.5, 0.6, 0.7])
    assert a.sensitivity["noise"]["scales"] == pytest.approx([0.25, 1.0, 4.0], rel=1e-12)
    assert a.sensitivity["noise"]["log"] is True and a.sensitivity["delta"]["log"] is False
    b = assess(m, Merger([1, 2]), simulate=False, deltas=(),
               sensitivity={"delta": {"values": [0.9, 0.5], "labels": ["patient", "impatient"]}})
    s = b.sensitivity["delta"]
    assert s["values"] == [0.5, 0.9] and s["labels"] == ["impatient", "patient"]


def test_the_assessment_round_trips_through_json():
    """The result is plain data: its JSON document rebuilds an equal result, whose document is the same; numbers
    that are not finite (a threshold no discount factor below one reaches, a ratio over a zero cost) are stored
    as None, so the document is strict JSON."""
    from sim.antitrust.result import Assessment

    d = MarketData("logit", prices=[4.2, 3.9, 4.6], shares=[0.25, 0.2, 0.15], size=1000.0, margin=0.4)
    a = assess(d, Merger([2, 3]), monitoring={"perception_error": 0.01}, run={**SMALL_RUN, "replications": 30},
               deltas=(0.9,), sensitivity={"size": [800.0, 2000.0], "delta": [0.5, 0.9], "noise": [0.0, 1.0]},
               name="round-trip", currency="EUR", period="month")
    doc = json.loads(json.dumps(a.to_dict(), allow_nan=False))
    back = Assessment.from_dict(doc)
    assert back == a and back.to_dict() == a.to_dict()
    assert (back.name, back.currency, back.period) == ("round-trip", "EUR", "month")
    assert "name" not in a.document() and a.document()["caution"] == a.caution
    z = assess(Market(LinearDemand(100, 1), cost=[0.0, 10.0, 10.0]), Merger([2, 3]), simulate=False, deltas=())
    assert z.before.asymmetry["cost_ratio"] is None and "simulation" not in z.before.to_dict()
    assert Assessment.from_dict(json.loads(json.dumps(z.to_dict(), allow_nan=False))) == z


def test_a_cell_of_the_kind_returns_the_assessment_and_its_flat_metrics():
    """The assess kind's cell carries the result object; its metrics are read from the result's plain data (the
    headline thresholds and the per-firm grim-trigger thresholds of the four-to-three Cournot merger: 25/41 and
    4/7 from (n+1)^2 / (n^2 + 6n + 1), Friedman, 1971)."""
    from sim.runner.analyses.assess import KIND
    from sim.runner.kinds import CellContext

    doc = {**_DOC, "market": {**_DOC["market"], "n_firms": 4}}
    cell = KIND.run(KIND.prepare(doc), CellContext(index=0))
    a = cell.result
    assert type(a).__name__ == "Assessment" and cell.arrays["assessment"] == a.document()
    m = cell.metrics
    assert m["threshold.before"] == pytest.approx(25 / 41, rel=1e-12) and m["direction"] == -1.0
    assert m["threshold.grim.after.firm1"] == pytest.approx(4 / 7, rel=1e-12) and m["binding.after"] in (1, 2, 3)
    assert set(m) == set(KIND.metric_names(KIND.prepare(doc)))


@pytest.mark.parametrize("g", [0.05, 0.0, -0.05])
def test_growth_and_decline_against_the_discounted_streams(g):
    """assess.growth accepts no growth and declining markets. With every profit growing at rate g, grim trigger
    holds the binding firm when colluding forever is worth at least deviating once and earning the static Nash
    profit ever after; summing the two discounted streams term by term (20,000 periods, delta (1 + |g|) <= 0.66, so
    the neglected tails are below 1e-300) decides it without the closed form delta (1 + g). The row's flags at the
    stated rate and at the opposite one agree with the sums, before and after the merger (thresholds 25/41 and
    4/7, Friedman, 1971)."""
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    delta = 0.6
    a = assess(m, Merger([1, 2]), simulate=False, run={"delta": delta}, deltas=(), growth=g)
    assert a.settings["growth"] == g
    row = next(f for f in a.factors if f["key"] == "growth")
    t = np.arange(20_000)
    for label, side in a.sides():
        i = side.thresholds["grim"]["binding_firm"] - 1
        pr = side.stage["profits"]
        C, D, N = pr["collusive"][i], pr["deviation"][i], pr["nash"][i]

        def holds(rate, C=C, D=D, N=N):
            w = (delta * (1 + rate)) ** t
            return C * w.sum() >= D + N * w[1:].sum()

        v = row["values"][label]
        assert v["sustainable"] == holds(0.0)
        assert v["sustainable_growing"] == holds(abs(g)) and v["sustainable_declining"] == holds(-abs(g))
    # at delta = 0.6 the market before the merger (25/41 > 0.6) needs growth, the one after (4/7 < 0.6) bears a decline
    assert row["values"]["before"]["growth_needed"] > 0 > row["values"]["after"]["growth_needed"]
    if g < 0:
        assert "declining by 0.05 per period, as stated" in row["varied"]


@pytest.mark.parametrize("g", [-1.0, 1.0, 1.5])
def test_growth_outside_minus_one_to_one_is_refused(g):
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    with pytest.raises(InputError) as err:
        prepare_assessment(m, Merger([1, 2]), simulate=False, growth=g)
    assert err.value.key == "assess.growth" and "(-1, 1)" in err.value.message
