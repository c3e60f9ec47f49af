"""The words of a learn result about its demand shock (``learning.demand_sigma > 0``, :mod:`sim.learning.shocks`)."""

from __future__ import annotations

import numpy as np

from sim.core.text import fmt_num
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.learning.analysis import LearnResult
from sim.learning.shock_response import ShockResponse

__all__ = ["error_play_lines", "observe_lines", "shock_lines", "shock_response_figure", "shock_response_lines"]

_SHAPES = {"lognormal": "exp(sigma Z - sigma^2/2)", "normal": "1 + sigma Z, floored at 0"}



def _steps(x: float) -> str:
    """A number of grid steps in words ("1 grid step", "0.5 grid steps")."""
    return f"{x:g} grid step" + ("" if x == 1 else "s")

def shock_lines(res: LearnResult) -> list[str]:
    """The demand shock of a run in words, and what it does and does not change (no lines without one).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
    """
    st = res.settings
    if not st.get("demand_sigma"):
        return []
    noise = st["demand_noise"]
    return [f"Demand shock: each period every firm's profit is scaled by one {noise} shock of mean one "
            f"({_SHAPES[noise]}, sigma {fmt_num(st['demand_sigma'])}), the same for every firm; the learners learn "
            "from these realised profits" + (" and see whether their own profit was low"
                                             if st.get("observe") == "own_profit" else
                                             " but condition on past prices only, so the limit outcomes (greedy "
                                             "play after learning) do not react to a draw") +
            "; the limit profits are expected profits (Calvano, Calzolari, Denicolo and Pastorello, 2021, after "
            "Green and Porter, 1984)"]


def observe_lines(res: LearnResult) -> list[str]:
    """What the learners see, when it is not the last periods' prices (no lines with the prices protocol).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
    """
    st = res.settings
    if st.get("observe") == "own_profit":
        return [f"What the learners see: their own last price and whether their profit fell more than "
                f"{100 * st['signal_band']:g} % below the profit at equal prices, not their rivals' prices (a "
                "rival's undercut and a bad draw look alike: Green and Porter, 1984)"]
    if st.get("observe") == "noisy_prices":
        return [f"What the learners see: their own last price exactly, and each rival's with a normal error of "
                f"{_steps(st['price_noise'])} rounded to the grid, every learner drawing its own errors "
                "(imperfect monitoring: Stigler, 1964; Green and Porter, 1984); the limit outcomes are greedy play "
                "without error, play with error after learning is reported apart"]
    return []


def error_play_lines(res: LearnResult) -> list[str]:
    """Play with error after learning from noisy prices, in words (no lines under another protocol).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of str
    """
    ep = res.error_play
    if not ep:
        return []
    lvl = f"{100 * res.confidence:g} %"
    pg, ch = ep["profit_gain"], ep["gain_change"]

    def ci(e):
        return f"{lvl} CI {fmt_num(e['low'])} to {fmt_num(e['high'])}" if e["n"] > 1 else "one session, no interval"

    prices = ", ".join(f"firm {i + 1} {fmt_num(e['value'])}" for i, e in enumerate(ep["prices"]))
    return ["", f"Play with error after learning: each session's learned strategies play on from its final state for "
                f"{ep['periods']:,} periods, every learner seeing its rivals' prices with the error of learning "
                f"({_steps(ep['noise'])}); no learning, no exploration, no demand shock "
                f"({pg['n']} sessions)",
            f"  profit gain with error: {fmt_num(pg['value'])} ({ci(pg)}); minus the limit without error, session by "
            f"session: {fmt_num(ch['value'])} ({ci(ch)})",
            f"  mean prices with error: {prices}"]


def shock_response_lines(resp: ShockResponse) -> list[str]:
    """The response to one adverse draw in words: the share of sessions with a price war and the deepest mean cut.

    Parameters
    ----------
    resp : sim.learning.shock_response.ShockResponse

    Returns
    -------
    list of str
    """
    pw = resp.price_war
    deepest = min(range(len(resp.change)), key=lambda r: resp.change[r].value)
    c = resp.change[deepest]
    return [f"After one adverse demand draw (shock {fmt_num(resp.theta)} in period 1; learning goes on, the same "
            f"random numbers with and without it): a price war in {fmt_num(100 * pw.value, 1)} % of {pw.n} sessions "
            f"({fmt_num(100 * pw.low, 1)} % to {fmt_num(100 * pw.high, 1)} %); the largest mean change of the price, "
            f"in period {deepest}, {fmt_num(c.value)} [{fmt_num(c.low)}, {fmt_num(c.high)}]"]


def shock_response_figure(resp: ShockResponse, confidence: float = 0.95) -> Drawn:
    """The mean change of the price after one adverse draw, period by period, with its band.

    Parameters
    ----------
    resp : sim.learning.shock_response.ShockResponse
    confidence : float
        The level of the band (that of the estimates in ``resp``), for the caption.

    Returns
    -------
    Drawn
        ``price_after_adverse_shock``.
    """
    plt = pyplot()
    x = np.arange(len(resp.change))
    mean = np.array([c.value for c in resp.change])
    low = np.array([c.low if np.isfinite(c.low) else c.value for c in resp.change])
    high = np.array([c.high if np.isfinite(c.high) else c.value for c in resp.change])
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.2), layout="constrained")
    ax.plot(x, mean, color=color(0), lw=1.5, marker="o", ms=3, label="mean change of the price")
    ax.fill_between(x, low, high, color=color(0), alpha=0.2, lw=0, label=f"{100 * confidence:g} % interval")
    ax.axhline(0.0, color="grey", lw=0.8)
    ax.axvline(1.0, color="black", lw=0.6, ls="--", label="the adverse draw")
    ax.set_xlabel("periods (0: the last period of learning; the draw hits period 1)", fontsize=FONT)
    ax.set_ylabel("price with the draw - without", fontsize=FONT)
    ax.xaxis.get_major_locator().set_params(integer=True)  # whole periods
    ax.tick_params(labelsize=SMALL)
    ax.grid(alpha=0.3)
    fig.legend(fontsize=SMALL, loc="outside right upper")
    return Drawn("price_after_adverse_shock", fig,
                 f"Mean over {resp.price_war.n} sessions of the mean price over firms with one adverse demand draw "
                 f"(shock {fmt_num(resp.theta)} in period 1) minus the mean price with the same random numbers and "
                 f"no forced draw, the sessions learning on; band: {100 * confidence:g} % confidence intervals across "
                 f"sessions. In {fmt_num(100 * resp.price_war.value, 1)} % of sessions the price with the draw falls "
                 "below the price without it in at least one period after the draw (a price war, as defined in the "
                 "glossary).")
