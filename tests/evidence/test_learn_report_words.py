"""Words of the learn report that state a direction: they follow the interval, not the sign of the point estimate
(a direction is claimed only when the whole 95 % interval lies on one side of 0; common practice, no source)."""

from __future__ import annotations

import math

from sim.evidence.learn import _rival_change_line


def _cut(mean, low, high, n=10):
    # the summary stores the rivals' cut (before minus after); the line states the change (after minus before)
    return {"mean": mean, "low": low, "high": high, "n": n}


def test_a_cut_a_rise_and_no_clear_change():
    assert _rival_change_line(_cut(0.2, 0.1, 0.3), "price", "rival's") == (
        "  rival's price in the period after the deviation minus before it: -0.2000 [-0.3000, -0.1000] (a cut: "
        "the whole interval lies below 0)")
    assert "(a rise: the whole interval lies above 0)" in _rival_change_line(_cut(-0.2, -0.3, -0.1), "price", "rival's")
    line = _rival_change_line(_cut(-0.0226, -0.08, 0.04), "quantity", "rivals' mean")
    assert line.startswith("  rivals' mean quantity") and "0.0226 [-0.0400, 0.0800]" in line
    assert "(no clear change: the interval contains 0)" in line


def test_one_session_has_no_interval():
    line = _rival_change_line(_cut(0.1, math.nan, math.nan, n=1), "price", "rival's")
    assert line.endswith("-0.1000 - (one session: no interval)")


def test_the_learned_merger_effect_is_more_or_less_only_outside_its_interval():
    from sim.evidence.learn_event import _verdict

    # the static change 0.171 inside the learned change's interval [-0.187, 0.293]: no direction claimed
    assert _verdict(0.0532, 0.171, {"low": -0.1867, "high": 0.2932, "n": 4}).startswith("no clear difference")
    assert _verdict(0.30, 0.171, {"low": 0.2, "high": 0.4, "n": 4}) == "more"
    assert _verdict(0.05, 0.171, {"low": 0.0, "high": 0.1, "n": 4}) == "less"
    assert _verdict(0.05, 0.171, {"low": math.nan, "high": math.nan, "n": 1}) == "less (one session, no interval)"
    assert _verdict(math.nan, 0.171, None) == "-"
    # a learned fall where the static effect is a rise is not just "less": the sign is reversed
    assert _verdict(-0.0443, 0.0602, {"low": -0.0816, "high": -0.0070, "n": 40}) == "opposite: a fall"
    assert _verdict(0.05, -0.02, {"low": 0.01, "high": 0.09, "n": 40}) == "opposite: a rise"


def test_a_share_nothing_measured_is_said_so_not_computed():
    """A learned price-war share over no session (every value None in the stored record) reads as not measured."""
    from sim.evidence.learn_signals import _pct

    assert _pct({"value": None, "low": None, "high": None, "n": 0}) == "- (no session measured)"
    assert _pct({"value": 0.25, "low": None, "high": None, "n": 1}) == "25.0 %"
    assert _pct({"value": 0.25, "low": 0.1, "high": 0.5, "n": 8}) == "25.0 % (10.0 % to 50.0 %)"


def test_words_that_read_as_a_user_would_read_them():
    """A price cut is stated as a change (no "falls by -0.12"); no session that cut leaves no war to end; a number of
    grid steps is singular at one; a discounted sum is not a flow per period."""
    from types import SimpleNamespace

    from sim.evidence.catalogue import describe
    from sim.evidence.learn_shocks import _steps
    from sim.evidence.learn_signals import signal_lines

    def est(value, n=40):
        return {"value": value, "low": 0.0, "high": 0.1, "n": n}

    sr = {"theta": 0.74, "periods": 20, "cut": est(0.0), "temporary": est(0.0), "depth": {"value": None, "n": 0},
          "duration": {"value": None, "n": 0}, "change": [est(0.0)] * 21}
    res = SimpleNamespace(settings={"observe": "prices"}, shock_response=sr, confidence=0.95)
    text = "\n".join(signal_lines(res))
    assert "no session cut its price, so there is no price war to end" in text and "back on the path" not in text
    sr.update(cut=est(0.5), depth={"value": -0.1205, "n": 20}, duration={"value": 3.0, "n": 10})
    text = "\n".join(signal_lines(res))
    assert "a mean change of -0.1205 in those sessions" in text and "by -" not in text
    assert "back on the path without the draw" in text
    assert _steps(1.0) == "1 grid step" and _steps(0.5) == "0.5 grid steps"
    assert describe("deviation_gain").unit == "currency units (discounted sum of profits per period)"
