"""The factor rows of a merger in a capacity market: capacity symmetry, spare capacity, partial cartels and
concentration, each with its source.

Rows have the keys of the assessment's factor table (:func:`sim.antitrust.factors.factor_table`): ``key``,
``factor``, ``varied``, ``measure``, ``values``, ``model_direction``, ``structural``, ``literature_direction``,
``literature``, ``source``, ``agrees``, ``reading`` and ``note``. The measure of the capacity rows is the critical
discount factor under minmax punishments, the one Compte, Jenny and Rey (2002) characterise; under Nash reversion
with efficient rationing and shares proportional to capacities every firm has the same threshold, so that scheme
names no single binding firm.
"""

from __future__ import annotations

import math

from sim.antitrust.factors import STRUCTURAL

__all__ = ["CAPACITY_LITERATURE", "capacity_factor_rows"]

#: key -> (factor, the direction its source states, the reasoning in our words, the source)
CAPACITY_LITERATURE = {
    "capacity_symmetry": (
        "more symmetric capacities", "facilitates",
        "with inelastic demand and shares proportional to capacities, the threshold under the harshest punishment is "
        "the largest firm's share of total capacity when its rivals cannot serve the market: the larger the largest "
        "firm, the less its rivals can punish it, so making capacities more alike makes collusion easier",
        "Compte, Jenny and Rey (2002), European Economic Review 46(1), sections 3-4 (from memory)"),
    "spare_capacity": (
        "more spare capacity", "ambiguous",
        "spare capacity raises both the gain from undercutting (a firm can serve more) and the rivals' power to "
        "punish; with equal capacities the threshold is not monotone in capacity",
        "Brock and Scheinkman (1985), Review of Economic Studies 52(2); Compte, Jenny and Rey (2002) (from memory)"),
    "partial_cartels": (
        "a post-merger cartel of some of the firms", "facilitates",
        "a merger can make a subset of the firms able to coordinate against a fringe, even when coordination of every "
        "firm stays out of reach; the cartel worth asking about is the one the merger makes sustainable",
        "Kovacic, Marshall, Marx and Schulenberg (2009), Quantitative analysis of coordinated effects, Antitrust Law "
        "Journal 76(2); Bos and Harrington (2010), RAND Journal of Economics 41(4); stability in the sense of "
        "d'Aspremont, Jacquemin, Gabszewicz and Weymark (1983), Canadian Journal of Economics 16(1)"),
    "concentration": (
        "higher concentration (HHI)", "structural screen",
        "the merger guidelines read high and rising concentration as a first indicator of possible concerns; it is "
        "not a finding and creates no presumption under the EU guidelines",
        "EU horizontal merger guidelines (2004), paragraphs 19-21; US merger guidelines (2023), section 2.1"),
}


def _dir(x_change: float, th_change: float, tol: float = 1e-9) -> str:
    """Direction of 'more of x' when x moved by ``x_change`` and the threshold by ``th_change``."""
    if not (math.isfinite(x_change) and math.isfinite(th_change)):
        return "not computed"
    if abs(x_change) <= tol:
        return "not varied"
    if abs(th_change) <= tol:
        return "no effect"
    return "facilitates" if (x_change > 0) == (th_change < 0) else "hinders"


def _row(key: str, varied: str, measure: str, values: dict, direction: str, note: str = "",
         reading: str = "") -> dict:
    name, lit_dir, lit_text, source = CAPACITY_LITERATURE[key]
    structural = direction == STRUCTURAL
    comparable = direction in ("facilitates", "hinders") and lit_dir in ("facilitates", "hinders")
    agrees = (direction == lit_dir) if comparable else None
    if not reading:
        reading = (f"in the model, {name} {direction} collusion here" if direction in ("facilitates", "hinders")
                   else f"{name}: {direction}")
    return {"key": key, "factor": name, "varied": varied, "measure": measure, "values": values,
            "model_direction": direction, "structural": structural, "literature_direction": lit_dir,
            "literature": lit_text, "source": source, "agrees": agrees, "reading": reading, "note": note}


def capacity_factor_rows(before, after, screen, worry) -> list:
    """The four factor rows of a capacity merger (see the module notes).

    Parameters
    ----------
    before, after : CapacityThresholds
        The markets before and after the merger.
    screen : ConcentrationScreen
    worry : CartelWorry or None

    Returns
    -------
    list of dict
        Rows in the order capacity symmetry, spare capacity, partial cartels, concentration.
    """
    measure = "critical discount factor (minmax punishment)"
    h0, h1 = before.collusion.harshest_market, after.collusion.harshest_market
    th = {"before": _num(h0), "after": _num(h1)}
    s0, s1 = before.symmetry["largest_share"], after.symmetry["largest_share"]
    rows = [_row("capacity_symmetry", f"largest capacity share {s0:.4g} -> {s1:.4g} (equal split "
                                      f"{before.symmetry['equal_share']:.4g} -> {after.symmetry['equal_share']:.4g})",
                 measure, {**th, "largest_share_before": s0, "largest_share_after": s1},
                 _dir(s0 - s1, h1 - h0),
                 note=f"binding firm (minmax) {before.harshest_binding_name} -> {after.harshest_binding_name}")]
    sp0, sp1 = before.spare_capacity, after.spare_capacity
    rc0, rc1 = before.symmetry["rivals_cover"], after.symmetry["rivals_cover"]
    rows.append(_row("spare_capacity", f"spare capacity {sp0:.4g} -> {sp1:.4g}; rivals of the largest firm cover "
                                       f"{rc0:.4g} -> {rc1:.4g} of demand", measure,
                     {**th, "spare_before": sp0, "spare_after": sp1, "rivals_cover_before": rc0,
                      "rivals_cover_after": rc1}, _dir(sp1 - sp0, h1 - h0),
                     note="below 1, the largest firm's rivals cannot serve the market and cannot push it to zero"))
    rows.append(_cartel_row(worry))
    rows.append(_row("concentration", f"HHI {screen.hhi_pre:.0f} -> {screen.hhi_post:.0f} (change "
                                      f"{screen.change:.0f}) at pre-merger capacity shares",
                     "HHI zones", {"hhi_before": screen.hhi_pre, "hhi_after": screen.hhi_post,
                                   "change": screen.change, "eu_zone": screen.eu_zone,
                                   "us_concentration": screen.us_concentration}, STRUCTURAL,
                     note=f"{screen.eu_note}; {screen.us_note}",
                     reading=f"EU: {screen.eu_zone}; US: {screen.us_concentration}"
                             + ("; structural presumption" if screen.us_presumption else "")))
    return rows


def _cartel_row(worry) -> dict:
    measure = "critical discount factor of the cartel (Nash reversion)"
    if worry is None:
        return _row("partial_cartels", "not studied", measure, {}, "not computed",
                    note="give assess.delta to compare the partial cartels before and after the merger")
    w = worry.worry
    if w is None:
        was = [r for r in worry.rows if r["sustainable_before"]]
        reading = f"no cartel is sustainable at delta = {worry.delta:g} after the merger"
        if was:
            reading += "; before it, " + " and ".join(" + ".join(r["counterpart"]) for r in was) + " was"
        return _row("partial_cartels", f"every post-merger cartel at delta = {worry.delta:g}", measure,
                    {"delta": worry.delta}, "hinders" if was else "no effect", note=worry.explanation, reading=reading)
    t0 = math.nan if w["threshold_before"] is None else w["threshold_before"]
    t1 = math.nan if w["threshold_after"] is None else w["threshold_after"]
    direction = "facilitates" if (w["stable_after"] and not w["sustainable_before"]) or t1 < t0 else "hinders"
    return _row("partial_cartels", f"the cartel {' + '.join(w['members'])} (before: {' + '.join(w['counterpart'])})",
                measure, {"before": _num(t0), "after": _num(t1), "delta": worry.delta}, direction,
                note=worry.explanation, reading=f"the worry: {' + '.join(w['members'])}")


def _num(x: float):
    return None if not math.isfinite(x) else float(x)
