"""The headline of an assessment: the merger's effect on the threshold of the headline scheme, where the agreement
is sustainable at the experiment's discount factor, simulated persistence, warnings, and the assumptions stated."""

from __future__ import annotations

import math

import numpy as np

from sim.antitrust.compare import CATEGORY_TEXT, category, compare, finite_or_none, sustains
from sim.antitrust.merger import difference
from sim.antitrust.options import SCHEME_NAMES

__all__ = ["assumptions", "conclusion", "scheme_label"]

#: the two-sided 95% normal quantile
_Z95 = 1.959963984540054


def scheme_label(opts: dict) -> str:
    """The headline scheme in words.

    Parameters
    ----------
    opts : dict
        The validated options (``scheme``, ``length``).

    Returns
    -------
    str
    """
    if opts["scheme"] == "finite":
        return f"Nash reversion for {opts['length']} periods"
    return SCHEME_NAMES[opts["scheme"]]


def _fmt(x) -> str:
    return "not sustainable below one" if x is None or not math.isfinite(x) else f"{x:.4f}"


def _scheme_rows(before, after, delta: float) -> list:
    rows = [("grim", None)] + [("finite", f.T) for f in before.report.finite] + [("stick_carrot", None)]
    out = []
    for sch, T in rows:
        b, a = before.scheme(sch, T), after.scheme(sch, T)
        out.append({
            "scheme": SCHEME_NAMES[sch] + (f", T={T}" if T else ""), "before": finite_or_none(b.market),
            "after": finite_or_none(a.market), "binding_before": before.names[b.binding],
            "binding_after": after.names[a.binding], "direction": compare(b.market, a.market),
            "sustainable_before": sustains(b.market, delta), "sustainable_after": sustains(a.market, delta)})
    return out


def _persistence(before, after) -> dict:
    eb, ea = before.simulation.metrics["collusive_share"], after.simulation.metrics["collusive_share"]
    diff = difference(ea.value, eb.value)
    se = math.sqrt(eb.se ** 2 + ea.se ** 2) if math.isfinite(eb.se) and math.isfinite(ea.se) else math.nan
    sig = bool(math.isfinite(se) and abs(diff) > _Z95 * se) if se > 0 else bool(diff != 0)
    return {
        "collusive_share_before": eb.value, "collusive_share_after": ea.value, "difference": diff,
        "difference_se": se, "difference_low": diff - _Z95 * se if math.isfinite(se) else None,
        "difference_high": diff + _Z95 * se if math.isfinite(se) else None,
        "significant": sig,
        "direction": ("unchanged" if not sig else ("more persistent" if diff > 0 else "less persistent")),
    }


def _warnings(before, after, agreement: str) -> list:
    out = []
    for side in (before, after):
        st = side.report.stage
        gain = st.collusive.firm_profits - st.nash.firm_profits
        scale = max(1.0, float(np.abs(st.nash.firm_profits).max()))
        short = [side.names[i] for i in np.flatnonzero(gain <= 1e-12 * scale)]
        if short:
            its, it = ("its", "it") if len(short) == 1 else ("their", "them")
            out.append(f"{side.label} the merger the agreement ({agreement}) gives "
                       f"{' and '.join(short)} no more than {its} static Nash profit, so no punishment can hold "
                       f"{it} to the agreement" + (": an agreement that shares the gains, such as "
                                                   "'proportional', may be more relevant"
                                                   if agreement == "joint" else ""))
    return out


def conclusion(before, after, opts: dict, delta: float) -> dict:
    """The headline comparison at the discount factor ``delta``.

    Parameters
    ----------
    before, after : Side
        The two sides (:func:`sim.antitrust.sides.solve_side`), with their simulations if any.
    opts : dict
        The validated options.
    delta : float
        The discount factor of the conclusion (``run.delta``, times the continuation probability with a random
        horizon).

    Returns
    -------
    dict
        See :attr:`sim.antitrust.result.Assessment.conclusion`.
    """
    hb, ha = before.headline(opts), after.headline(opts)
    direction = compare(hb.market, ha.market)
    sb, sa = sustains(hb.market, delta), sustains(ha.market, delta)
    cat = category(sb, sa)
    out = {
        "scheme": scheme_label(opts), "threshold_before": finite_or_none(hb.market),
        "threshold_after": finite_or_none(ha.market),
        # within the comparison's tolerance the thresholds are the same, and the change is reported as 0
        "change": ((0.0 if direction == "unchanged" else finite_or_none(difference(ha.market, hb.market)))
                   if hb.sustainable and ha.sustainable else None),
        "direction": direction, "binding_before": before.names[hb.binding], "binding_after": after.names[ha.binding],
        "delta": delta, "sustainable_before": sb, "sustainable_after": sa, "category": cat,
        "schemes": _scheme_rows(before, after, delta),
    }
    if before.simulation is not None and after.simulation is not None:
        out["persistence"] = _persistence(before, after)
    verb = {"easier": "lowers", "harder": "raises", "unchanged": "does not change"}[direction]
    txt = (f"Under the stated assumptions the merger {verb} the critical discount factor of {out['scheme']} "
           f"(binding firm before: {out['binding_before']}; after: {out['binding_after']}): "
           f"{_fmt(hb.market)} before, {_fmt(ha.market)} after. At the discount factor {delta:.4g} collusion is "
           f"{CATEGORY_TEXT[cat]}.")
    if "persistence" in out:
        p = out["persistence"]
        txt += (f" In the simulations the share of collusive periods is {p['collusive_share_before']:.4f} before and "
                f"{p['collusive_share_after']:.4f} after (difference {p['difference']:+.4f}"
                + (f", 95% CI [{p['difference_low']:+.4f}, {p['difference_high']:+.4f}]" if p["difference_low"]
                   is not None else "") + ").")
    out["warnings"] = _warnings(before, after, opts["agreement"])
    if out["warnings"]:
        txt += " Note: " + "; ".join(out["warnings"]) + "."
    out["statement"] = txt
    return out


def _entry_text(entry: dict) -> str:
    params = ", ".join(f"{k} {v}" for k, v in entry.items() if k != "strategy")
    return entry["strategy"] + (f" ({params})" if params else "")


def _simulation_assumptions(mres, mon, entries, post_entries) -> list:
    p = mon.validated()
    strategies = sorted({e["strategy"] for e in entries})
    first = mres.merging[0]
    others = [mres.names_pre[i] for i in mres.merging[1:]]
    return [f"simulations: firms follow the strategies of the line-up ({', '.join(strategies)}) rather than "
            f"optimising; monitoring '{p['signal']}', demand shock {p['noise']} sigma {p['sigma']:g}, "
            f"perception error {p['perception_error']:g}, implementation error {p['implementation_error']:g}",
            f"after the merger the merged firm {mres.names_post[mres.merged]} plays the strategy of "
            f"{mres.names_pre[first]}, the lowest-numbered merging firm: "
            f"{_entry_text(post_entries[mres.merged])}; the strategies of {' and '.join(others)} are dropped"
            " and every other firm keeps its own"]


def assumptions(calibration, mres, opts: dict, runs: dict, mon, entries: list, post_entries: list) -> list:
    """The assumptions specific to one assessment, in words.

    Parameters
    ----------
    calibration : Calibration or None
    mres : MergerResult
    opts : dict
        The validated options.
    runs : dict
        The validated run settings.
    mon : Monitoring
    entries, post_entries : list of dict
        The line-up before and after the merger, one entry per firm.

    Returns
    -------
    list of str
    """
    pre = mres.pre.spec()
    out = []
    if calibration is not None:
        out.append(f"the pre-merger market is calibrated to the observed data assuming {calibration.conduct}; "
                   f"identified by {calibration.identified_by}")
        out.extend(a for a in calibration.assumptions if not a.startswith("conduct:"))
    else:
        out.append("the pre-merger market is taken as given (no calibration to observed data)")
    out.extend(mres.notes)
    agree = {"joint": "the joint-profit maximum", "symmetric": "the best symmetric outcome (a common quantity or "
                                                                "price)", "proportional": "quantities proportional "
                                                                                          "to the static-Nash ones"}
    out.append(f"the firms collude on {agree[opts['agreement']]} of each market; deviations are best one-shot "
               "deviations; punishments as named (Nash reversion forever or for T periods, or the optimal symmetric "
               "stick and carrot)")
    out.append("demand, costs and the number of firms are constant over time apart from the factor table's "
               "variations; firms share one discount factor")
    if runs["horizon"] == "random":
        out.append(f"the game continues after each period with probability {runs['continuation']:g}: the discount "
                   f"factor that matters is delta x continuation = {runs['delta'] * runs['continuation']:.4g}")
    if opts["simulate"]:
        out.extend(_simulation_assumptions(mres, mon, entries, post_entries))
    if pre.multi_product:
        out.append("some pre-merger firms already own several products")
    return out
