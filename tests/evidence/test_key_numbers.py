"""The key numbers of a sweep's first page: a range where the cells differ, one value where they do not.

Wording checks of :func:`sim.evidence.front.headline` on hand-made cells: the numbers are the cells' own, so what
could fail is the sentence built around them (a metric that only one cell computes used to read "from x at A to x
at A").
"""

from __future__ import annotations

from types import SimpleNamespace

from sim.evidence.front import headline


def _cell(value, label, extra=None):
    metrics = {"profit_gain": value, **(extra or {})}
    return SimpleNamespace(status="ok", metrics=metrics, labels={"learning.observe": label})


PARAM = [SimpleNamespace(path="learning.observe")]


def test_a_metric_that_varies_is_given_as_a_range_from_the_lowest_to_the_highest_cell():
    rows = [_cell(0.7, "prices"), _cell(0.5, "own_profit")]
    _q, _a, numbers = headline("Q?", PARAM, rows, ["profit_gain"])
    (line,) = numbers
    assert "lowest 0.5" in line and "highest 0.7" in line
    assert line.index("own_profit") < line.index("prices")


def test_overlapping_intervals_of_the_lowest_and_highest_cells_are_said_to_overlap():
    """A range is a difference only when the two cells' intervals are apart (common practice, no source)."""
    apart = [_cell(0.7, "prices", {"profit_gain.low": 0.65, "profit_gain.high": 0.75}),
             _cell(0.5, "own_profit", {"profit_gain.low": 0.45, "profit_gain.high": 0.55})]
    (line,) = headline("Q?", PARAM, apart, ["profit_gain"])[2]
    assert "overlap" not in line and "(95 % interval 0.45 to 0.55)" in line
    close = [_cell(0.7, "prices", {"profit_gain.low": 0.55, "profit_gain.high": 0.85}),
             _cell(0.5, "own_profit", {"profit_gain.low": 0.35, "profit_gain.high": 0.65})]
    (line,) = headline("Q?", PARAM, close, ["profit_gain"])[2]
    assert line.endswith("their intervals overlap, so these two cells do not differ clearly")


def test_a_metric_of_one_cell_is_given_once_with_its_cell():
    rows = [_cell(0.7, "prices"), _cell(0.5, "own_profit", {"price_cut_share": 0.54})]
    _q, _a, numbers = headline("Q?", PARAM, rows, ["profit_gain", "price_cut_share"])
    line = next(n for n in numbers if "0.54" in n)
    assert "lowest" not in line and line.count("0.54") == 1 and line.endswith("own_profit")


def test_a_metric_equal_in_every_cell_is_given_once_for_all_of_them():
    rows = [_cell(0.6, "prices"), _cell(0.6, "own_profit")]
    _q, _a, numbers = headline("Q?", PARAM, rows, ["profit_gain"])
    assert len(numbers) == 1 and "lowest" not in numbers[0] and numbers[0].count("0.6") == 1
    assert numbers[0].endswith("in each of the 2 cells that have it")
