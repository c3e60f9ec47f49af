"""The assessment's renderer reads the result's plain data: the result and its stored JSON document give the same
tables, summary, terminal text and figures; rounding residue shows as zero; a range's labels sit beside its values;
a largest-to-smallest ratio over a zero cost shows as inf again."""

import json
import math

import pytest

from sim import LinearDemand, Market
from sim.antitrust.assess import assess
from sim.antitrust.calibration import MarketData
from sim.antitrust.merger import Merger
from sim.antitrust.result import Assessment
from sim.evidence.assess import RENDERER
from sim.evidence.assess_summary import summary_blocks
from sim.evidence.assess_tables import assessment_tables
from sim.evidence.render import figure_bytes, pyplot

LOGIT = {"prices": [4.2, 3.9, 4.6], "shares": [0.25, 0.2, 0.15], "size": 1000.0, "margin": 0.4}


def _stored(a: Assessment) -> Assessment:
    """The result as a run folder gives it back: through strict JSON with sorted keys."""
    return Assessment.from_dict(json.loads(json.dumps(a.to_dict(), allow_nan=False, sort_keys=True)))


def test_rounding_residue_in_reported_changes_is_zero():
    """At delta = 0.9 both markets of the shipped scenario sustain the full agreement under grim
    trigger (thresholds about 0.61 and 0.68), so the profit gains are one up to rounding
    (0.9999999999999984 after) and the reported change is exactly 0, not -1.554e-15."""
    d = MarketData("logit", prices=[4.2, 3.9, 4.6, 3.7], shares=[0.22, 0.18, 0.12, 0.10], size=5e4, margin=0.35)
    a = assess(d, Merger([2, 4]), simulate=False, deltas=(0.9,), partial=["grim"])
    (row,) = assessment_tables(a)["partial_collusion"][1]
    assert row[2] == pytest.approx(1.0, abs=1e-12) and row[3] == pytest.approx(1.0, abs=1e-12)
    assert row[4] == 0.0
    assert all(type(x) in (str, int, float, bool) or x is None for r in assessment_tables(a)["calibration"][1]
               for x in r)


def test_a_ranges_labels_sit_beside_its_values():
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    b = assess(m, Merger([1, 2]), simulate=False, deltas=(),
               sensitivity={"delta": {"values": [0.9, 0.5], "labels": ["patient", "impatient"]}})
    headers, rows = assessment_tables(b)["sensitivity_delta"]
    assert headers[1] == "label" and [r[1] for r in rows] == ["impatient", "patient"]


def test_the_stored_result_renders_as_the_computed_one():
    """Tables, summary, terminal text and figure bytes of the stored result (keys sorted, nan and inf as null) are
    those of the result as computed; the sensitivity sections keep their fixed order whatever the order of the
    keys."""
    d = MarketData("logit", **LOGIT)
    a = assess(d, Merger([2, 3]), simulate=False, deltas=(0.9,), sensitivity={"size": [800.0, 2000.0],
                                                                               "delta": [0.5, 0.9]})
    stored = _stored(a)
    assert list(stored.sensitivity) == ["delta", "size"]
    assert assessment_tables(stored) == assessment_tables(a)
    blocks = summary_blocks(stored)
    assert blocks == summary_blocks(a)
    shown = [b[1] for b in blocks if b[0] == "table"]
    assert shown.index("sensitivity_size") < shown.index("sensitivity_delta")
    assert RENDERER.console(stored) == RENDERER.console(a)
    assert RENDERER.as_json(stored) == RENDERER.as_json(a)
    plt = pyplot()
    fresh, again = RENDERER.figures(a), RENDERER.figures(stored)
    assert [f.name for f in fresh] == [f.name for f in again] == ["thresholds", "partial_collusion",
                                                                  "sensitivity_size", "sensitivity_delta"]
    for f, g in zip(fresh, again):
        assert figure_bytes(f.figure, "png") == figure_bytes(g.figure, "png"), f.name
        plt.close(f.figure)
        plt.close(g.figure)


def test_a_ratio_over_a_zero_cost_shows_as_inf():
    z = assess(Market(LinearDemand(100, 1), cost=[0.0, 10.0, 10.0]), Merger([2, 3]), simulate=False, deltas=())
    assert z.before.asymmetry["cost_ratio"] is None
    before, after = assessment_tables(_stored(z))["asymmetry"][1]
    assert before[4] == math.inf and after[4] == math.inf


def test_money_carries_the_experiments_currency_and_period():
    """experiment.currency and experiment.period reach every table and sentence where money appears; without
    them the unit is the neutral 'currency units per period'."""
    from sim.evidence.assess_methods import methods_blocks
    from sim.runner.analyses.assess import KIND
    from sim.runner.kinds import CellContext

    doc = {"experiment": {"name": "units", "kind": "assess", "currency": "EUR", "period": "month"},
           "data": {"demand": "logit", **LOGIT}, "merger": {"firms": [2, 3]},
           "monitoring": {"perception_error": 0.01}, "run": {"periods": 30, "replications": 20, "seed": 1},
           "assess": {"deltas": [], "growth": -0.03}}
    a = KIND.run(KIND.prepare(doc), CellContext()).result
    assert (a.currency, a.period, a.money(), a.money(False)) == ("EUR", "month", "EUR per month", "EUR")
    T = assessment_tables(a)
    assert T["stage_game_before"][0][1] == "collusive profit (EUR per month)"
    assert T["merger_prices"][0][2:4] == ["price before (EUR)", "price after (EUR)"]
    assert T["calibration"][0][1:3] == ["observed price (EUR)", "observed quantity (per month)"]
    text = RENDERER.console(a)
    assert "mean consumer surplus (EUR per month)" in text and "mean market price (EUR)" in text
    blocks = summary_blocks(a)
    assert any(b[0] == "paragraph" and "EUR per month (" in b[1] for b in blocks)  # the consumer surplus change
    assert any(b[0] == "bullets" and "Units: prices and costs in EUR, profits and consumer surplus in EUR per month"
               in b[1] for b in blocks)
    growth = next(r for r in T["factors"][1] if r[0] == "growing demand")
    assert "at the stated rate g = -0.03" in growth[2] and "declining by 0.03 per period, as stated" in growth[1]
    assert any("a decline of 0.03 per period (g = -0.03)" in b[1] for b in methods_blocks(a.to_dict())
               if b[0] == "paragraph")
    plain = Assessment.from_dict({**a.to_dict(), "currency": None, "period": None})
    assert assessment_tables(plain)["stage_game_before"][0][1] == "collusive profit (currency units per period)"
