"""Saved learners continued after an event, shown: the part of the learn report and the figure that read how prices
moved after the event and how long the learners took to settle again (:func:`sim.learning.events.event_summary`)."""

from __future__ import annotations

import math

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot

__all__ = ["event_figure", "event_lines"]


def _num(x) -> float:
    return math.nan if x is None else float(x)


def _ci(d: dict) -> str:
    lo, hi = _num(d.get("low")), _num(d.get("high"))
    if math.isnan(lo) or math.isnan(hi):
        return "-"
    return f"[{fmt_num(lo)}, {fmt_num(hi)}]"


def _rows_shown(bins: list) -> list[int]:
    """The rows of the path the report prints: before the event, then roughly logarithmic steps to the end."""
    last = len(bins) - 1
    rows = sorted({0, *[r for r in (1, 2, 5, 10, 20, 50) if r < last], last})
    return rows


def event_lines(res) -> list[str]:
    """The report's lines on the event (none when the sessions did not continue after one).

    Parameters
    ----------
    res : sim.learning.analysis.LearnResult

    Returns
    -------
    list of str
    """
    ev = res.event
    if not ev:
        return []
    lvl = f"{100 * res.confidence:g} %"
    act = "price"  # the path after the event, its limits and changes are prices, under quantity setting too
    firms = [f"firm {i + 1}" for i in range(res.n_firms)]
    lines = ["", f"After the event ({ev['what']}): the saved sessions continued, the convergence counter reset",
             f"  {act}s played after the event, means over sessions ({lvl} confidence intervals); each row averages "
             f"the periods since the row above"]
    mean, low, high = (np.array(ev["prices"][k], dtype=float) for k in ("mean", "low", "high"))
    rows = []
    for r in _rows_shown(ev["bin_periods"]):
        label = "before" if r == 0 else f"to +{ev['bin_periods'][r]:,}"
        cells = []
        for i in range(res.n_firms):
            m = mean[r, i]
            cells.append("-" if math.isnan(m) else
                         f"{fmt_num(m)} [{fmt_num(low[r, i])}, {fmt_num(high[r, i])}]" if not math.isnan(low[r, i])
                         else fmt_num(m))
        rows.append([label, *cells])
    rows.append(["limit after", *[f"{fmt_num(d['mean'])} {_ci(d)}" for d in res.summary["limit_prices"]]])
    lines.append(table(["period", *firms], rows))
    st, sp = ev["settled"], ev["settle_periods"]
    lines.append(f"  settled again (no greedy strategy changed for {res.settings['convergence']:,} periods) in "
                 f"{st['count']} of {st['n']} sessions ({100 * st['share']:.1f} %, {lvl} CI "
                 f"{100 * st['low']:.1f} to {100 * st['high']:.1f} %)")
    if sp["n"]:
        lines.append(f"  periods from the event to the last change of a greedy strategy: mean {sp['mean']:,.0f} "
                     f"[{_num(sp['low']):,.0f}, {_num(sp['high']):,.0f}], median {sp['q50']:,.0f}, 5-95 % "
                     f"{sp['q05']:,.0f} to {sp['q95']:,.0f}")
    at = ev.get("before_method") == "limit at the event"
    if at:
        lines.append(f"  limit {act}s at the event (greedy play from each session's state at the event, what the "
                     "learners knew then, no learning after it): "
                     + "; ".join(f"{firms[i]} {fmt_num(d['mean'])} {_ci(d)}" for i, d in enumerate(ev["before"])))
    changes = [f"{firms[i]} {fmt_num(d['mean'])} {_ci(d)}" for i, d in enumerate(ev["change"]) if d["n"]]
    since = "limit at the event" if at else "last period before the event"
    if changes:
        lines.append(f"  change of the limit {act} from the {since} (settled sessions, session by session): "
                     + "; ".join(changes))
    return lines + _merger_lines(ev.get("merger"), firms, act, ev["change"], since)


def _verdict(learned: float, static: float, est: dict | None) -> str:
    """The learned change against the static one: more or less only when the learned change's interval excludes
    the static change, and "opposite" when it lies wholly on the other side of zero from it."""
    if math.isnan(learned):
        return "-"
    lo, hi = (_num(est.get("low")), _num(est.get("high"))) if est and est.get("n", 0) > 1 else (math.nan, math.nan)
    if math.isnan(lo) or math.isnan(hi):
        return ("more" if learned > static else "less") + " (one session, no interval)"
    if static > 0 > hi:
        return "opposite: a fall"
    if static < 0 < lo:
        return "opposite: a rise"
    if lo > static:
        return "more"
    if hi < static:
        return "less"
    return "no clear difference (interval contains it)"


def _merger_lines(mg: dict | None, firms: list[str], act: str, change=(), since: str = "limit at the event"
                  ) -> list[str]:
    """After a merger: the static merger effect beside the learned change of every firm's price (with the learned
    change's interval, ``change``, deciding more or less)."""
    if not mg:
        return []
    if not mg.get("available"):
        return ["  static merger effect: not available (the market model has no multi-product firm for a "
                "homogeneous good)"]
    rows = []
    above = mg.get("above_nash_after")  # not in a result stored before it was kept
    for i, name in enumerate(firms):
        static, learned = _num(mg["static_change"][i]), _num(mg["learned_change"][i])
        verdict = _verdict(learned, static, change[i] if i < len(change) else None)
        ch = change[i] if i < len(change) else None
        learned_text = f"{fmt_num(learned)} {_ci(ch)}" if ch and ch.get("n", 0) >= 2 else fmt_num(learned)
        rows.append([name, fmt_num(_num(mg["nash_prices_before"][i])), fmt_num(_num(mg["nash_prices"][i])),
                     fmt_num(static), learned_text, verdict]
                    + ([f"{fmt_num(above[i]['mean'])} {_ci(above[i])}"] if above else []))
    out = ["  the merger's static effect: static-Nash prices with the merged firm setting its products' prices "
           f"jointly (Deneckere and Davidson, 1985), against the learned change (the limit {act} after settling "
           f"minus the {since}, as above)" + ("; the last column is the learned limit price minus the Nash "
                                               "price after the merger, a level, where the changes start from "
                                               "different points" if above else ""),
           table(["firm", f"Nash {act} before", f"Nash {act} after", "static change", "learned change",
                  "learned vs static"] + (["limit minus Nash price after"] if above else []), rows)]
    pg = mg.get("profit_gain_after")
    if above and not pg:
        out.append("  profit gain measured against the market after the merger: not defined (the merger leaves one "
                   "firm: its static Nash is the joint-profit outcome)")
    if pg:
        out.append(f"  profit gain measured against the market after the merger (0: the static Nash with the merged "
                   f"firm setting its products' prices jointly, 1: joint profit, the same as before): "
                   f"{fmt_num(pg['mean'])} {_ci(pg)}. The report's other profit gains take the static Nash of the "
                   "market before the merger as their zero, so they count the merger's unilateral price effect as "
                   "a gain; this one does not.")
    return out


def event_figure(res):
    """The prices after the event, with their bands, and the benchmarks of the market after it.

    Parameters
    ----------
    res : sim.learning.analysis.LearnResult

    Returns
    -------
    Drawn or None
        ``prices_after_event``; None when the sessions did not continue after an event.
    """
    ev = res.event
    if not ev:
        return None
    plt = pyplot()
    act = "price"  # the path after the event, its limits and changes are prices, under quantity setting too
    x = np.array(ev["bin_periods"], dtype=float)
    mean, low, high = (np.array(ev["prices"][k], dtype=float) for k in ("mean", "low", "high"))
    # the path after the event on the left; the limit once settled again, usually far beyond the window, in a panel
    # of its own on the right (not on the path's time axis)
    fig, (ax, ax_lim) = plt.subplots(1, 2, figsize=(PAGE_WIDTH, 3.6), layout="constrained", sharey=True,
                                     gridspec_kw={"width_ratios": [5, 1.3]})
    for i in range(res.n_firms):
        ok = np.isfinite(mean[:, i])
        ax.plot(x[ok], mean[ok, i], color=color(i), lw=1.5, marker="o" if ok.sum() < 30 else None, ms=3,
                label=f"firm {i + 1}")
        band = ok & np.isfinite(low[:, i]) & np.isfinite(high[:, i])
        if band.any():
            ax.fill_between(x[band], low[band, i], high[band, i], color=color(i), alpha=0.2, lw=0)
    bm = res.summary["benchmarks"]
    which = "prices"
    mg = ev.get("merger") or {}
    # a merger leaves the market as it was: its benchmarks are those of the firms before the merger
    when = "before the merger" if mg else "after"
    for a in (ax, ax_lim):
        a.axhline(float(np.mean(bm[f"nash_{which}"])), color="grey", ls=":", lw=1,
                  label=f"static Nash {act} {when}" if a is ax else None)
        a.axhline(float(np.mean(bm[f"collusive_{which}"])), color="grey", ls="--", lw=1,
                  label=(f"joint-profit {act}" if mg else f"joint-profit {act} after") if a is ax else None)
    if mg.get("available"):
        levels = [float(v) for v in mg["nash_actions"]]
        for i in range(res.n_firms):
            # firms whose post-merger Nash prices coincide share the line in alternating dashes of their colours
            same = [j for j in range(res.n_firms) if abs(levels[j] - levels[i]) <= 1e-9 * max(1.0, abs(levels[i]))]
            k, c = same.index(i), len(same)
            style = (k * 4.0, (4.0, 4.0 * (c - 1))) if c > 1 else (0.0, (6.0, 2.0, 1.0, 2.0))
            for a in (ax, ax_lim):
                a.axhline(levels[i], color=color(i), ls=style, lw=1.2,
                          label=f"static Nash {act} after\nthe merger (firm's colour)" if (i == 0 and a is ax)
                          else None)
    lim = res.summary["limit_prices"] if (ev.get("settled") or {}).get("count") else []
    for i in range(res.n_firms):
        e = lim[i] if i < len(lim) else {}
        v, lo, hi = _num(e.get("mean")), _num(e.get("low")), _num(e.get("high"))
        if math.isfinite(v):
            err = [[v - lo if math.isfinite(lo) else 0.0], [hi - v if math.isfinite(hi) else 0.0]]
            ax_lim.errorbar([i], [v], yerr=err, fmt="D", color=color(i), mec="black", ms=5, capsize=3)
    ax_lim.set_xticks(range(res.n_firms), [f"firm {i + 1}" for i in range(res.n_firms)], fontsize=SMALL,
                      rotation=90 if res.n_firms > 3 else 0)
    ax_lim.set_xlim(-0.6, res.n_firms - 0.4)
    ax_lim.set_title("once settled again", fontsize=SMALL)
    sp = _num((ev.get("settle_periods") or {}).get("q50"))
    ax_lim.set_xlabel(f"median {sp:,.0f}\nperiods after\nthe event" if lim and math.isfinite(sp) else
                      "no session\nsettled again", fontsize=SMALL)
    ax_lim.tick_params(labelsize=SMALL)
    ax_lim.grid(axis="y", alpha=0.3)
    ax.axvline(0.0, color="black", lw=0.6)
    ax.set_xlabel("periods after the event (0: the last period before it)", fontsize=FONT)
    ax.set_ylabel(act, fontsize=FONT)
    ax.tick_params(labelsize=SMALL)
    ax.grid(alpha=0.3)
    fig.legend(fontsize=SMALL, loc="outside lower center", ncol=3, frameon=False)
    level = f"{100 * res.confidence:g} %"
    return Drawn("prices_after_event", fig,
                 f"Mean {act}s over sessions after the event ({ev['what']}); each point averages the periods since "
                 f"the previous one, the point at 0 is the last period before the event; bands: {level} confidence "
                 f"intervals across sessions; dotted and dashed: the static-Nash and joint-profit {act}s of the "
                 f"market {'before the merger' if mg else 'after the event'} (means over firms)"
                 + (f"; dash-dotted, in each firm's colour: its static-Nash {act} with the merged firm setting its "
                    f"products' {act}s jointly (dashed in alternating colours where firms share it)"
                    if mg.get("available") else "")
                 + f". Right panel, not on the time axis: each firm's mean limit {act} once the learners settled "
                   f"again, with its {level} interval across the settled sessions" + _settle_words(ev) + ".")


def _settle_words(ev: dict) -> str:
    """When the settled limit is reached, against the window the figure shows."""
    sp = ev.get("settle_periods") or {}
    m = _num(sp.get("q50"))
    if not (ev.get("settled") or {}).get("count"):
        return " (none settled again, so none is drawn)"
    if not math.isfinite(m):
        return ""
    beyond = ", beyond this window" if m > float(ev["periods"]) else ""
    return f" (a median of {m:,.0f} periods after the event{beyond})"
