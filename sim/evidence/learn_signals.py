"""The words and the figure of a learn result under the profit signal (``learning.observe = "own_profit"``,
:mod:`sim.learning.signals`): what the learners observe, and the learned price wars after one adverse draw."""

from __future__ import annotations

from sim.core.stats import Estimate
from sim.core.text import fmt_num
from sim.evidence.learn_shocks import shock_response_figure
from sim.evidence.render import Drawn
from sim.learning.analysis import LearnResult
from sim.learning.shock_response import ShockResponse

__all__ = ["signal_figure", "signal_lines"]


def _est(d: dict) -> Estimate:
    nan = float("nan")
    return Estimate(*(nan if d.get(k) is None else float(d[k]) for k in ("value", "se", "low", "high")),
                    int(d["n"]), d.get("method", ""), d.get("note", ""))


def _pct(e: dict) -> str:
    """A share with its interval in percent; "-" where nothing was measured (no session: the value is None)."""
    if not e.get("n") or e.get("value") is None:
        return "- (no session measured)"
    low, high = e.get("low"), e.get("high")
    if low is None or high is None:
        return f"{fmt_num(100 * e['value'], 1)} %"
    return f"{fmt_num(100 * e['value'], 1)} % ({fmt_num(100 * low, 1)} % to {fmt_num(100 * high, 1)} %)"


def signal_lines(res: LearnResult) -> list[str]:
    """The profit signal in words and, with a demand shock, the learned response to one adverse draw (under the
    profit signal or with learners that see prices).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
        Empty under the prices protocol without a demand shock.
    """
    st = res.settings
    sr = res.shock_response
    lines = []
    if st.get("observe") == "own_profit":
        lines = ["", f"What the learners observe: their own last price and whether their own profit last period fell "
                 f"more than {100 * st['signal_band']:g} % below the profit at their price had every rival charged it "
                 "(a rival's undercut and a bad demand draw look alike: Green and Porter, 1984; Calvano, Calzolari, "
                 "Denicolo and Pastorello, 2021). Limit outcomes and the impulse response: greedy play without a "
                 "shock, a rival whose profit the deviation makes low seeing the same signal as after a bad draw."]
    if not sr:
        return lines
    if not lines:
        lines = [""]
    lvl = f"{100 * res.confidence:g} %"
    dep, dur = sr["depth"], sr["duration"]
    after = f", after {fmt_num(dur['value'], 3)} periods on average" if dur["n"] else ""
    depth = f", a mean change of {fmt_num(dep['value'])} in those sessions" if dep["n"] else ""
    cut = sr["cut"]
    back = (f"; it is back on the path without the draw in the last 4 of {sr['periods']} periods in "
            f"{_pct(sr['temporary'])}{after}" if not (cut.get("n") and cut.get("value") == 0) else
            "; no session cut its price, so there is no price war to end")
    lines.append(f"Learned price wars: after one adverse demand draw (shock {fmt_num(sr['theta'])} in period 1, "
                 f"learning going on, the same random numbers with and without it), the mean price falls in period 2 "
                 f"in {_pct(cut)} of {cut['n']} sessions ({lvl} CI){depth}{back}")
    g = sr.get("greedy")
    if g:
        lines.append(f"The learned strategies alone (greedy play from the same final states, no learning, every "
                     f"learner's signal forced low after period 1): a cut in period 2 in {_pct(g['cut'])} of "
                     f"sessions, back on the path without it in the last 4 periods in {_pct(g['temporary'])}")
    lines.append(f"Mean change of the price, periods 1 to {sr['periods']}: "
                 + ", ".join("-" if c.get("value") is None else fmt_num(c["value"]) for c in sr["change"][1:]))
    return lines


def signal_figure(res: LearnResult) -> Drawn | None:
    """The mean change of the price after the adverse draw, period by period, under the profit signal.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    Drawn or None
        ``price_after_adverse_shock`` (:func:`sim.evidence.learn_shocks.shock_response_figure`); None without a
        response.
    """
    sr = res.shock_response
    if not sr:
        return None
    resp = ShockResponse(float(sr["theta"]), None, None, [_est(c) for c in sr["change"]], _est(sr["price_war"]))
    return shock_response_figure(resp, res.confidence)
