"""Result objects as plain data (sim.core.records): every value survives the trip through JSON."""

import json
import math
from dataclasses import dataclass, field

import numpy as np

from sim.core.records import Record, from_plain, to_plain


@dataclass(frozen=True)
class Inner(Record):
    label: str
    values: np.ndarray
    level: float


@dataclass(frozen=True)
class Outer(Record):
    inner: Inner
    many: list[Inner]
    table: dict
    maybe: Inner | None = None
    counts: tuple[int, ...] = ()
    extra: list = field(default_factory=list)


def _sample():
    a = Inner("a", np.array([[1.0, np.nan], [np.inf, -np.inf]]), math.nan)
    b = Inner("b", np.array([0.1, 2.5e-300]), math.inf)
    return Outer(a, [b, a], {"x": None, "y": [1, 2.5]}, None, (1, 2, 3), [True, "s"])


def test_round_trip_through_json_keeps_every_value():
    r = _sample()
    doc = json.loads(json.dumps(r.to_dict(), allow_nan=False))  # JSON proper: no nan, no infinity
    back = Outer.from_dict(doc)
    assert back.to_dict() == r.to_dict()
    assert np.isnan(back.inner.values[0, 1]) and back.inner.values[1, 0] == np.inf
    assert back.inner.values[1, 1] == -np.inf and math.isnan(back.inner.level)
    assert back.many[0].level == math.inf and back.many[0].values[1] == 2.5e-300
    assert isinstance(back.counts, tuple) and back.counts == (1, 2, 3) and back.maybe is None


def test_plain_values_are_json_types():
    assert to_plain(np.float64(math.nan)) is None
    assert to_plain(np.int64(3)) == 3 and type(to_plain(np.int64(3))) is int
    assert to_plain(np.bool_(True)) is True
    assert from_plain(float, None) != from_plain(float, None)  # nan
    assert from_plain(float, "-inf") == -math.inf


def test_thresholds_result_round_trips(tmp_path):
    import sim
    from sim.theory.analysis import ThresholdsResult, ThresholdsSpec, thresholds_analysis

    market = sim.Market(sim.LinearDemand(100, 1), cost=[10, 10, 14], model="cournot")
    res = thresholds_analysis(ThresholdsSpec(market, "proportional", None, (1, 3), (0.5,)))
    doc = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert ThresholdsResult.from_dict(doc).to_dict() == res.to_dict()
