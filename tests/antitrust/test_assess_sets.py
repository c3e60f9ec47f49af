"""The assessment's payoff-set comparison, its computed growth row and its multimarket-contact row, each checked
against a published result or closed form named beside the check."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from sim.antitrust.assess import assess, prepare_assessment
from sim.antitrust.merger import Merger
from sim.antitrust.merger_sets import symmetric_slice
from sim.antitrust.result import Assessment
from sim.cli import main
from sim.core.errors import InputError
from sim.models.market import market_from_dict
from sim.runner.analyses.assess import KIND
from sim.runner.kinds import CellContext

ROOT = Path(__file__).resolve().parents[2]
COURNOT3 = {"model": "cournot", "demand": "linear", "intercept": 10.0, "slope": 1.0, "cost": [1.0, 1.0, 1.0]}
NAMES = ["Firm A", "Firm B", "Firm C"]
SETS = {"grid": 7, "directions": 16, "tolerance": 0.01}


def _cournot_rule(n: int) -> float:
    """Grim-trigger threshold of n symmetric linear Cournot firms at joint profit maximisation: (n + 1)^2 / ((n + 1)^2
    + 4n) (Friedman, 1971; e.g. Vives, 1999, Oligopoly Pricing, ch. 9 -- from memory)."""
    return (n + 1) ** 2 / ((n + 1) ** 2 + 4 * n)


@pytest.fixture(scope="module")
def merged():
    return assess(market_from_dict(COURNOT3), Merger(["Firm A", "Firm B"], names=NAMES), simulate=False,
                  run={"delta": 0.4}, deltas=(), growth=0.0, payoff_sets=SETS)


def test_three_to_two_cournot_lowers_the_any_punishment_threshold(merged):
    """A merger from three to two symmetric linear Cournot firms makes tacit collusion easier: with fewer firms each
    firm's share of the collusive profit is larger and its gain from deviating smaller (Tirole, 1988, The Theory of
    Industrial Organization, ch. 6; Ivaldi, Jullien, Rey, Seabright and Tirole, 2003, The Economics of Tacit
    Collusion, section III.1 on the number of competitors; section numbers from memory). Under any punishment the
    certified intervals must say so:
    the interval after lies below the one before. On each side, on the same grid: the lowest threshold under any
    punishment <= the best symmetric stick and carrot <= grim trigger (the named schemes are particular
    equilibria; Abreu, 1988, optimal penal codes are the harshest), and grim trigger on the grid equals the closed
    form, since the grid holds the static Nash, collusive and deviation quantities exactly."""
    ps = merged.payoff_sets
    b, a = ps.before.sets, ps.after.sets
    assert ps.direction == "easier" and a.high <= b.low
    for ap, n in ((b, 3), (a, 2)):
        assert 0 < ap.low < ap.high <= ap.stick_carrot + 1e-12 <= ap.grim + 2e-12
        assert ap.grim == pytest.approx(_cournot_rule(n), rel=1e-9)
        assert ap.high - ap.low <= 0.01 + 1e-12
    # the continuous market's grim thresholds agree with the grid's
    assert merged.before.thresholds["grim"]["market"] == pytest.approx(_cournot_rule(3), rel=1e-9)
    assert merged.after.thresholds["grim"]["market"] == pytest.approx(_cournot_rule(2), rel=1e-9)


def test_frontier_and_worst_payoffs_at_the_assessment_delta(merged):
    """At delta 0.4, above both intervals, joint profit maximisation is an equilibrium on each side, so the best
    joint profit is the monopoly profit (a - c)^2 / (4 b) = 20.25 (textbook linear monopoly), bracketed; the worst
    equilibrium payoffs lie between the pure minmax (zero before: two rivals can flood the market) and the static
    Nash profit (a - c)^2 / ((n + 1)^2 b) (Cournot, textbook), since Nash reversion is itself an equilibrium."""
    for side, n in ((merged.payoff_sets.before, 3), (merged.payoff_sets.after, 2)):
        lo, hi = side.joint
        assert lo <= 20.25 + 1e-9 and hi >= 20.25 - 1e-9 and lo == pytest.approx(20.25, rel=1e-6)
        nash = 81.0 / (n + 1) ** 2
        assert np.all(side.sets.worst_low >= side.sets.minmax - 1e-6)
        assert np.all(side.sets.worst_high <= nash + 1e-6)
        s = side.symmetric
        # outer brackets inner at both ends of the symmetric slice, which holds the equal Nash and collusive profits
        assert s[0] <= s[1] + 1e-9 and s[1] <= s[2] and s[2] <= s[3] + 1e-9
        assert s[1] <= nash + 1e-6 and s[2] >= 20.25 / n - 1e-6


def test_the_comparison_round_trips_and_is_absent_when_not_asked(merged):
    doc = json.loads(json.dumps(merged.to_dict(), allow_nan=False))
    assert Assessment.from_dict(doc).to_dict() == merged.to_dict()
    plain = assess(market_from_dict(COURNOT3), Merger([1, 2]), simulate=False, run={"delta": 0.4}, deltas=())
    assert plain.payoff_sets is None and "payoff_sets" not in plain.to_dict()


def test_symmetric_slice_of_known_polygons():
    """The diagonal of the square [0, 2]^2 is the segment [0, 2]; of the triangle with vertices (0, 0), (3, 0),
    (0, 3) it is [0, 1.5] (x = y on the edge x + y = 3); a set off the diagonal has none (plane geometry)."""
    assert symmetric_slice([[0, 0], [2, 0], [2, 2], [0, 2]]) == pytest.approx((0.0, 2.0))
    assert symmetric_slice([[0, 0], [3, 0], [0, 3]]) == pytest.approx((0.0, 1.5))
    assert all(math.isnan(x) for x in symmetric_slice([[1, 0], [2, 0], [2, 0.5]]))


@pytest.mark.parametrize("table, key", [({"grid": [7, 7, 7]}, "assess.payoff_sets.grid"),
                                        ({"grid": 2}, "assess.payoff_sets.grid"),
                                        ({"directions": 2}, "assess.payoff_sets.directions"),
                                        ({"tolerance": 0.5}, "assess.payoff_sets.tolerance"),
                                        ({"size": 3}, "assess.payoff_sets.size")])
def test_bad_payoff_set_tables_name_the_key(table, key):
    with pytest.raises(InputError) as err:
        prepare_assessment(market_from_dict(COURNOT3), Merger([1, 2]), simulate=False, payoff_sets=table)
    assert err.value.key == key


def test_payoff_sets_are_refused_for_multi_product_firms():
    logit = {"model": "bertrand", "demand": "logit", "quality": [2.0, 2.0, 2.0], "mu": 0.5, "cost": [1.0] * 3}
    with pytest.raises(InputError) as err:
        prepare_assessment(market_from_dict(logit), Merger([1, 2]), simulate=False, payoff_sets={"grid": 7})
    assert err.value.key == "assess.payoff_sets" and "after the merger" in err.value.message


# --------------------------------------------------------------------------------------------------
# Growth
# --------------------------------------------------------------------------------------------------


def _growth_row(a):
    return next(f for f in a.factors if f["key"] == "growth")


@pytest.mark.parametrize("g", [0.05, 0.0, -0.05])
def test_growth_threshold_against_the_bertrand_closed_form(g):
    """Homogeneous Bertrand with n equal firms: C = M / n, D = M, N = 0, so grim trigger needs delta >= 1 - 1/n
    (Tirole, 1988, ch. 6); with every profit growing at rate g the condition holds on delta (1 + g), so
    delta*(g) = (1 - 1/n) / (1 + g) (Ivaldi et al., 2003, section III.6 on demand growth -- section number from
    memory). g = 0 gives the plain
    threshold; a decline (g < 0) raises it, and the row says collusion is harder. After the merger of two of the
    four firms the merged firm keeps both owners' customers at a common price (tie shares 1/2, 1/4, 1/4), so the
    smallest firm binds at 1 - 1/4, the same formula with its share."""
    m = market_from_dict({"model": "bertrand", "demand": "linear", "intercept": 10.0, "slope": 1.0,
                          "cost": [1.0] * 4})
    a = assess(m, Merger([1, 2]), simulate=False, run={"delta": 0.7}, deltas=(), growth=g)
    row = _growth_row(a)
    for label, n in (("before", 4), ("after", 4)):
        v = row["values"][label]
        assert v["threshold"] == pytest.approx(1 - 1 / n, rel=1e-12)
        assert v["threshold_with_growth"] == pytest.approx((1 - 1 / n) / (1 + g), rel=1e-9)
        if g == 0:
            assert v["threshold_with_growth"] == pytest.approx(v["threshold"], rel=1e-12)
        if g < 0:
            assert v["threshold_with_growth"] > v["threshold"] and "collusion is harder" in v["effect"]
    assert row["model_direction"] == ("not computed" if g == 0 else "facilitates")
    assert not row["structural"]


def test_a_decline_that_no_delta_survives_says_so():
    """Homogeneous Bertrand after the merger of two of three firms: the smaller firm (tie share 1/3) binds at
    1 - 1/3; a decline of 60 % per period needs delta >= (2/3) / 0.4 > 1, so collusion is impossible (same closed
    form)."""
    m = market_from_dict({"model": "bertrand", "demand": "linear", "intercept": 10.0, "slope": 1.0,
                          "cost": [1.0] * 3})
    a = assess(m, Merger([1, 2]), simulate=False, run={"delta": 0.7}, deltas=(), growth=-0.6)
    v = _growth_row(a)["values"]["after"]
    assert v["threshold_with_growth"] is None and "makes collusion impossible" in v["effect"]


@pytest.mark.parametrize("g", [-1.0, -1.5])
def test_growth_at_or_below_minus_one_is_one_line_exit_2(tmp_path, capsys, g):
    text = (ROOT / "experiments" / "merger-growth-contact.toml").read_text()
    f = tmp_path / "x.toml"
    f.write_text(text.replace("growth = -0.03 ", f"growth = {g} "))
    code = main(["assess", str(f)])
    _out, err = capsys.readouterr()
    assert code == 2 and "assess.growth" in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_methods_appendix_states_the_growth_formula_and_sources():
    from sim.evidence.assess_methods import methods_blocks

    a = assess(market_from_dict(COURNOT3), Merger([1, 2]), simulate=False, run={"delta": 0.6}, deltas=(),
               growth=-0.05)
    text = " ".join(b[1] for b in methods_blocks(a.to_dict()) if b[0] == "paragraph")
    assert "(D_i - C_i) / ((D_i - N_i)(1 + g))" in text and "(1 - 1/n) / (1 + g)" in text
    assert "Ivaldi, Jullien, Rey, Seabright and Tirole, 2003" in text and "Haltiwanger and Harrington, 1991" in text
    assert "A declining market makes collusion harder" in text


# --------------------------------------------------------------------------------------------------
# Multimarket contact
# --------------------------------------------------------------------------------------------------


def _contact(other: dict, firms: list):
    a = assess(market_from_dict(COURNOT3), Merger(["Firm A", "Firm B"], names=NAMES), simulate=False,
               run={"delta": 0.6}, deltas=(), growth=0.0,
               other_markets=[{"market": other, "firms": firms, "label": "other"}])
    return next(f for f in a.factors if f["key"] == "contact"), a


def test_pooling_with_an_identical_market_changes_nothing():
    """Bernheim and Whinston (1990, RAND 21(1)): pooling the incentive constraints of identical markets changes
    nothing -- each firm's summed gains and losses scale together. The same three-firm market (merged the same way
    after the merger) leaves every threshold at its own value, 4/7 before and 9/17 after (Friedman, 1971)."""
    row, _ = _contact(COURNOT3, NAMES)
    v = row["values"]
    assert v["before"]["alone"] == pytest.approx(_cournot_rule(3), rel=1e-9)
    assert v["after"]["alone"] == pytest.approx(_cournot_rule(2), rel=1e-9)
    for side in ("before", "after"):
        assert v[side]["pooled"] == pytest.approx(v[side]["alone"], rel=1e-9)
        for r in v[side]["merging"]:
            assert r["pooled"] == pytest.approx(v[side]["alone"], rel=1e-9)
    assert row["model_direction"] == "no effect" and row["agrees"] is None


def test_pooling_with_a_market_where_collusion_is_easier_lowers_the_threshold():
    """Firm A and Firm C also meet in a homogeneous Bertrand duopoly (threshold 1/2 < 9/17). After the merger the
    merged firm and Firm C meet in both markets; with grim trigger everywhere each firm's pooled constraint
    sum_m (D_m - C_m) <= delta / (1 - delta) sum_m (C_m - N_m) gives delta* = sum G / (sum G + sum L) (Bernheim
    and Whinston, 1990), with G = D - C and L = C - N: in the Cournot duopoly (a = 10, c = 1) C = 81/8,
    D = 6.75^2/4, N = 9; in the Bertrand duopoly G = L = 81/8. The pooled threshold lies between the two."""
    bertrand = {"model": "bertrand", "demand": "linear", "intercept": 10.0, "slope": 1.0, "cost": [1.0, 1.0]}
    row, _a = _contact(bertrand, ["Firm A", "Firm C"])
    v = row["values"]["after"]
    G = 6.75 ** 2 / 4 - 81 / 8 + 81 / 8
    L = 81 / 8 - 9 + 81 / 8
    assert v["pooled"] == pytest.approx(G / (G + L), rel=1e-9)
    assert 0.5 < v["pooled"] < v["alone"] == pytest.approx(_cournot_rule(2), rel=1e-9)
    assert v["merging"][0]["firm"] == "Firm A + Firm B" and v["merging"][0]["pooled"] == pytest.approx(G / (G + L))
    # before the merger Firm B meets no one elsewhere and binds at 4/7: no effect on the assessed market
    assert row["values"]["before"]["pooled"] == pytest.approx(_cournot_rule(3), rel=1e-9)
    assert row["model_direction"] == "mixed"


@pytest.mark.parametrize("entry, key", [({"firms": ["Firm A", "Firm C"]}, "assess.other_markets[1].market"),
                                        ({"market": COURNOT3, "firms": ["Firm A"]}, "assess.other_markets[1].firms"),
                                        ({"market": COURNOT3, "firms": NAMES, "growth": -1.0},
                                         "assess.other_markets[1].growth"),
                                        ({"market": COURNOT3, "firms": NAMES, "fine": 1},
                                         "assess.other_markets[1].fine"),
                                        ({"market": {**COURNOT3, "cost": [1.0, 1.0]}, "firms": ["Firm A", "Firm B"]},
                                         "assess.other_markets[1].firms")])
def test_bad_other_markets_name_the_key(entry, key):
    with pytest.raises(InputError) as err:
        prepare_assessment(market_from_dict(COURNOT3), Merger(["Firm A", "Firm B"], names=NAMES), simulate=False,
                           other_markets=[entry])
    assert err.value.key == key


def test_shipped_experiment_metrics_and_catalogue():
    """The shipped experiment reports every metric it names, each with a catalogue entry, and its numbers are
    those of the direct call."""
    from sim.evidence.catalogue import describe

    doc = tomllib.loads((ROOT / "experiments" / "merger-growth-contact.toml").read_text())
    p = KIND.prepare(doc)
    cell = KIND.run(p, CellContext())
    names = KIND.metric_names(p)
    assert set(cell.metrics) == set(names)
    for k in names:
        assert describe(k).entry is not None
    m = cell.metrics
    assert m["any_punishment.threshold.upper.after"] <= m["any_punishment.threshold.lower.before"]
    assert m["contact.pooled.after"] < m["contact.alone.after"]
    assert KIND.cost(p).key == "assess.payoff_sets.grid"
