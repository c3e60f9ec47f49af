"""How the optional parts of a thresholds result are shown: enforcement, demand states and multimarket contact
(console lines, the ``--json`` entries and the figures; see :mod:`sim.evidence.thresholds`)."""

from __future__ import annotations

import math

import numpy as np

from sim.core.text import fmt_num, table
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.render import Drawn, pyplot
from sim.theory.analysis import ThresholdsResult

__all__ = ["part_figures", "part_json", "part_lines"]

_BASIS = {"fixed": "an amount per firm", "profit": "a rate on the firm's collusive profit of the period",
          "gain": "a rate on the firm's gain over static Nash in the period"}
_STATE_KINDS = {"iid": "independent draws", "markov": "a Markov chain", "cycle": "a deterministic cycle"}


def _pct(x: float) -> str:
    return f"{100 * x:g} %"


def _regime(enf) -> str:
    det = enf.detection
    det_text = (f"detection probability {fmt_num(det)} per colluding period" if isinstance(det, float)
                else "detection probability rising with the agreed price (table)")
    out = f"{det_text}; fine {fmt_num(enf.fine)} ({_BASIS[enf.fine_basis]})"
    if enf.proof < 1.0:
        out += f"; an investigation convicts with probability {fmt_num(enf.proof)} without a report"
    if enf.leniency is not None:
        out += f"; leniency: a reporting firm pays {_pct(enf.leniency)} of the fine"
    after = "forever" if enf.after_detection is None else f"for {enf.after_detection} periods, then collude again"
    out += f"; after a conviction the firms compete {after}"
    if enf.deviator_exposed:
        out += "; a deviator is exposed to the investigation of its deviation period"
    return out


def _enforcement_lines(sec) -> list[str]:
    a = sec.overall
    n = len(a.per_firm)
    lines = ["", "Collusion under enforcement (Motta and Polo, 2003): " + _regime(a.enforcement),
             table(["", "grim trigger", "under enforcement", "expected fine per colluding period"],
                   [[f"firm {i + 1}", a.grim[i], a.per_firm[i], a.expected_fine[i]] for i in range(n)])]
    spell = "never ends" if math.isinf(a.expected_spell) else f"{fmt_num(a.expected_spell)} periods"
    lines.append(f"  critical discount factor under enforcement: {fmt_num(a.market)} (binding: firm {a.binding + 1}); "
                 f"the firms report when investigated: {fmt_num(a.firms_report)}; expected life of the cartel: "
                 f"{spell}; long-run share of periods in collusion: {fmt_num(a.collusion_share)}")
    if sec.at_delta:
        rows = []
        for b, p in zip(sec.at_delta, sec.partial, strict=True):
            rows.append([fmt_num(b.delta), fmt_num(b.sustainable), b.market_deterrence_fine,
                         ", ".join(fmt_num(x) for x in b.discounted_fines), p.profit_gain, p.price])
        lines += ["Deterrence at the given discount factors (deterrence fine: the smallest fine at which collusion "
                  "cannot be sustained, at the given detection rate)",
                  table(["delta", "sustainable", "deterrence fine", "discounted expected fines per firm",
                         "best sustainable profit gain", "its average price"], rows, "llrlrr")]
    if sec.frontier is not None:
        lines += _frontier_lines(sec.frontier)
    return lines


def _frontier_lines(fr) -> list[str]:
    hdr = ["detection rate", *[f"fine {fmt_num(f)}" for f in fr.fines], "deterrence fine"]
    rows = [[fmt_num(r), *fr.thresholds[k], fr.boundary[k]] for k, r in enumerate(fr.detection)]
    return [f"Deterrence frontier at delta {fmt_num(fr.delta)}: the critical discount factor at each detection rate "
            f"and fine (collusion sustainable where it is at most {fmt_num(fr.delta)}; '-': not below one)",
            table(hdr, rows)]


def _states_lines(sec) -> list[str]:
    st, th = sec.states, sec.thresholds
    growth = f"; demand grows by {_pct(st.growth)} per period" if st.growth else ""
    lines = ["", f"Demand states ({_STATE_KINDS[st.kind]}){growth}: {sec.parameter} moves with the state "
                 "(Rotemberg and Saloner, 1986; Haltiwanger and Harrington, 1991)"]
    first = sec.paths[0] if sec.paths else None
    rows = []
    for s, lab in enumerate(st.labels):
        rows.append([lab, sec.values[s], st.probabilities[s], th.per_state[s],
                     first.agreed_prices[s] if first else None, first.nash_prices[s] if first else None])
    lines.append(table(["state", sec.parameter, "long-run frequency", "threshold of full collusion", "agreed price",
                        "Nash price"], rows))
    lines.append(f"  full collusion in every state needs a discount factor of at least {fmt_num(th.market)} "
                 f"(binding: state {st.labels[th.binding_state]}, firm {th.binding_firm + 1})")
    for p in sec.paths:
        rows = [[lab, p.weights[s], p.prices[s], p.agreed_prices[s], p.nash_prices[s]]
                for s, lab in enumerate(p.labels)]
        full = "full collusion in every state" if p.full_collusion else "collusion capped in some states"
        lines += [f"Best state-contingent path at delta {fmt_num(p.delta)} ({full}; prices {p.price_cyclicality}, "
                  f"the degree of collusion {p.collusion_cyclicality}):",
                  table(["state", "path weight", "price", "agreed price", "Nash price"], rows)]
    return lines


def _contact_lines(sec) -> list[str]:
    g, p = sec.game, sec.pooled
    lines = ["", "Multimarket contact (Bernheim and Whinston, 1990): a deviation in any market is punished in every "
                 "market the firms share"]
    rows = [[cm.label, ", ".join(cm.firms), p.market_thresholds[m]] for m, cm in enumerate(g.markets)]
    lines.append(table(["market", "firms", "threshold on its own"], rows, "llr"))
    rows = [[f, p.pooled[i], *[p.standalone[i, m] for m in range(g.n_markets)]] for i, f in enumerate(g.firms)]
    lines.append(table(["firm", "pooled threshold", *[f"alone in {cm.label}" for cm in g.markets]], rows))
    lines.append(f"  lowest common discount factor with pooled constraints: {fmt_num(p.common)} (binding: "
                 f"{g.firms[p.binding_firm]}); every market on its own: {fmt_num(p.highest_standalone)}")
    for sl, al in zip(sec.slack, sec.allocations, strict=True):
        rows = []
        for m, cm in enumerate(g.markets):
            lends = [g.markets[k].label for k in np.flatnonzero(sl.lends[m])]
            rows.append([cm.label, fmt_num(bool(sl.alone[m])), ", ".join(lends) or "-", al.standalone_weights[m],
                         al.weights[m]])
        lines += [f"At delta {fmt_num(sl.delta)}: collusion everywhere with pooling: {fmt_num(sl.together)}; "
                  f"discounted value of collusion {fmt_num(al.value)} pooled against {fmt_num(al.standalone_value)} "
                  "market by market",
                  table(["market", "sustainable alone", "lends slack to", "weight alone", "weight pooled"], rows,
                        "lllrr")]
    return lines


def part_lines(res: ThresholdsResult) -> list[str]:
    """Console lines of the optional parts (empty without them).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    list of str
    """
    lines: list[str] = []
    if res.enforcement is not None:
        lines += _enforcement_lines(res.enforcement)
    if res.demand_states is not None:
        lines += _states_lines(res.demand_states)
    if res.contact is not None:
        lines += _contact_lines(res.contact)
    return lines


def part_json(res: ThresholdsResult) -> dict:
    """The ``--json`` entries of the optional parts (only those present).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    dict
    """
    return {k: getattr(res, k).to_dict() for k in ("enforcement", "demand_states", "contact")
            if getattr(res, k) is not None}


def _frontier_figure(fr):
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.6), layout="constrained")
    thr = np.where(np.isfinite(fr.thresholds), fr.thresholds, np.nan)
    x, y = np.arange(fr.fines.size), np.arange(fr.detection.size)
    lo = float(np.nanmin(thr)) if np.isfinite(thr).any() else 0.0
    lo = min(lo, 0.99)
    mid = 0.5 * (lo + 1.0)
    im = ax.pcolormesh(np.append(x, x[-1] + 1) - 0.5, np.append(y, y[-1] + 1) - 0.5, thr, cmap="viridis",
                       vmin=lo, vmax=1.0, shading="flat")
    for r in range(fr.detection.size):
        for j in range(fr.fines.size):
            mark = "" if fr.sustainable[r, j] else "x"
            ax.text(j, r, f"{fmt_num(thr[r, j], 2)}{mark}", ha="center", va="center", fontsize=SMALL - 1,
                    color="white" if (np.isnan(thr[r, j]) or thr[r, j] < mid) else "black")
    b = np.interp(fr.boundary, fr.fines, x, left=np.nan, right=np.nan)
    ax.plot(b, y, color=color(1), lw=2.0, marker="o", ms=3, label=f"deterrence fine at delta {fr.delta:g}")
    ax.set_xticks(x, [f"{f:g}" for f in fr.fines], fontsize=SMALL)
    ax.set_yticks(y, [f"{r:g}" for r in fr.detection], fontsize=SMALL)
    ax.set_xlabel("fine per firm and conviction", fontsize=FONT)
    ax.set_ylabel("detection probability per period", fontsize=FONT)
    cb = fig.colorbar(im, ax=ax)
    cb.set_label("critical discount factor", fontsize=FONT)
    fig.legend(loc="outside lower center", frameon=False, fontsize=SMALL)
    return Drawn("deterrence-frontier", fig, f"Critical discount factor at each detection rate and fine; x: collusion "
                                             f"not sustainable at delta {fmt_num(fr.delta)}; blank: not sustainable "
                                             "at any discount factor below one; line: the deterrence fine at each "
                                             "detection rate (the sustainability boundary).")


def _enforcement_figure(a):
    plt = pyplot()
    n = len(a.per_firm)
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 1.4 + 0.5 * n), layout="constrained")
    y = np.arange(n)
    ax.barh(y - 0.2, a.grim, height=0.4, color=color(0), label="grim trigger, no enforcement")
    ax.barh(y + 0.2, a.per_firm, height=0.4, color=color(1), label="under enforcement")
    ax.set_yticks(y, [f"firm {i + 1}" for i in range(n)], fontsize=SMALL)
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel("critical discount factor", fontsize=FONT)
    fig.legend(loc="outside lower center", ncol=2, frameon=False, fontsize=SMALL)
    return Drawn("enforcement-thresholds", fig, "Critical discount factor of each firm without enforcement and under "
                                                "the stated detection rate and fine; a missing bar: not sustainable "
                                                "below one.")


def _states_figure(sec):
    plt = pyplot()
    st = sec.states
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 3.4), layout="constrained")
    x = np.arange(st.n_states)
    first = sec.paths[0]
    ax.plot(x, first.agreed_prices, color="black", ls="--", lw=1.2, marker="s", ms=3, label="agreement")
    ax.plot(x, first.nash_prices, color="black", ls=":", lw=1.2, marker="s", ms=3, label="static Nash")
    for k, p in enumerate(sec.paths):
        ax.plot(x, p.prices, color=color(k), lw=1.8, marker="o", ms=4, label=f"best path, delta {p.delta:g}")
    ax.set_xticks(x, list(st.labels), fontsize=SMALL)
    ax.set_xlabel("demand state" + (" (in the order of the cycle)" if st.kind == "cycle" else ""), fontsize=FONT)
    ax.set_ylabel("average price", fontsize=FONT)
    ax.grid(alpha=0.3)
    fig.legend(loc="outside lower center", ncol=min(3, 2 + len(sec.paths)), frameon=False, fontsize=SMALL)
    return Drawn("state-prices", fig, "Average price in each demand state: the agreement (dashed), static Nash "
                                      "(dotted) and the most collusive state-contingent path sustainable at each "
                                      "discount factor (solid).")


def _contact_figure(sec):
    plt = pyplot()
    g, p = sec.game, sec.pooled
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, 1.6 + 0.45 * g.n_firms * (g.n_markets + 1) / 2), layout="constrained")
    y = np.arange(g.n_firms)
    h = 0.8 / (g.n_markets + 1)
    for m, cm in enumerate(g.markets):
        ax.barh(y + (m - g.n_markets / 2) * h, p.standalone[:, m], height=h, color=color(m), label=f"{cm.label} alone")
    ax.barh(y + g.n_markets / 2 * h, p.pooled, height=h, color="black", label="pooled over the firm's markets")
    ax.set_yticks(y, list(g.firms), fontsize=SMALL)
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel("critical discount factor", fontsize=FONT)
    fig.legend(loc="outside lower center", ncol=min(3, g.n_markets + 1), frameon=False, fontsize=SMALL)
    return Drawn("contact-thresholds", fig, "Each firm's critical discount factor in each market on its own and with "
                                            "its incentive constraints pooled over its markets (Bernheim and "
                                            "Whinston, 1990); a missing bar: the firm is absent or cannot be held "
                                            "below one.")


def part_figures(res: ThresholdsResult) -> list[Drawn]:
    """The figures of the optional parts (none without them).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    list of Drawn
    """
    out = []
    if res.enforcement is not None:
        fr = res.enforcement.frontier
        out.append(_frontier_figure(fr) if fr is not None else _enforcement_figure(res.enforcement.overall))
    if res.demand_states is not None and res.demand_states.paths:
        out.append(_states_figure(res.demand_states))
    if res.contact is not None:
        out.append(_contact_figure(res.contact))
    return out
