"""The written account of an assessment in its evidence bundle, in reading order.

:func:`summary_blocks` gives the summary as blocks: ``("heading", text)``, ``("paragraph", text)``, ``("bullets",
[items])``, ``("table", name, caption)`` (a table of :func:`sim.evidence.assess_tables.assessment_tables`) and
``("figure", name)`` (one of :func:`sim.evidence.assess_figures.assessment_figures`).
"""

from __future__ import annotations

import numpy as np

from sim.antitrust.factors import FACTOR_LEGEND
from sim.antitrust.merger import difference
from sim.evidence.assess_methods import THRESHOLD_SHORT, methods_blocks
from sim.evidence.assess_payoffs import payoff_blocks
from sim.evidence.assess_tables import (
    SIDES,
    as_float,
    assessment_data,
    in_order,
    market_text,
    named_products,
    units,
)
from sim.evidence.pairs import assessment_pairs, pair_lines

__all__ = ["FACTORS_CAPTION", "summary_blocks"]

#: Caption of the factor table; its legend follows the table once, as a note.
FACTORS_CAPTION = "The usual factors: their effect on collusion in the model and in the literature"


def _units_text(d: dict) -> str:
    money, flow = units(d)
    if d.get("currency") or d.get("period"):
        return f"Units: prices and costs in {money}, profits and consumer surplus in {flow}"
    return (f"Units: prices and costs in {money}, profits and consumer surplus in {flow} (the experiment states no "
            "currency or period: set experiment.currency and experiment.period)")


def _setup(d: dict) -> list:
    c, m, st = d["conclusion"], d["merger"], d["settings"]
    items = [f"Pre-merger market: {market_text(m['pre_market'])}",
             f"Merger: {' and '.join(m['merging'])} become {m['merged_firm']}"
             + (f", efficiency {m['efficiency']:g}" if m["efficiency"] else "")
             + (f", stated post-merger cost {st['merger']['cost']}" if st["merger"]["cost"] is not None else ""),
             f"Post-merger market: {market_text(m['post_market'], m['names_post'])}",
             f"Collusive agreement: {st['agreement']}; headline scheme: {c['scheme']}; discount factor "
             f"{c['delta']:.4g}; demand growth per period for the factor table: {st['growth']:g}",
             _units_text(d)]
    if st["simulate"]:
        r = st["run"]
        mon = st["monitoring"]
        items.append(f"Simulation: {r['periods']} periods, {r['replications']} replications, seed {r['seed']}, "
                     f"{r['horizon']} horizon; monitoring '{mon['signal']}', {mon['noise']} demand shock sigma "
                     f"{mon['sigma']:g}, perception error {mon['perception_error']:g}, implementation error "
                     f"{mon['implementation_error']:g}; line-up before: "
                     + ", ".join(e["strategy"] for e in st["lineup"]) + "; after: "
                     + ", ".join(e["strategy"] for e in st["lineup_after"]))
    return [("heading", "Setup"), ("bullets", items)]


def _calibration(d: dict) -> list:
    cal = d["calibration"]
    B = [("heading", "Calibration"),
         ("paragraph", f"Conduct assumed: {cal['conduct']}. The price parameter is identified by "
                       f"{named_products(d, cal['identified_by'])}. The calibrated model's static Nash equilibrium "
                       + ("reproduces" if cal["reproduced"] else "does NOT reproduce")
                       + f" the observed prices and quantities: largest relative residual "
                         f"{as_float(cal['max_relative_residual']):.3g} (tolerance 1e-08). Market elasticity at "
                         f"the observed point: {as_float(cal['market_elasticity']):.6g}."),
         ("table", "calibration_parameters", "Calibrated demand parameters"),
         ("table", "calibration", "Observed data, implied costs and margins, and the model's static "
                                  "equilibrium with its residuals")]
    if cal["fit"] is not None:
        res = np.asarray(cal["fit"]["residuals"], dtype=float)
        B.append(("paragraph", f"Over-identified input ({cal['fit']['input']} of every product), fitted by least "
                               f"squares: largest absolute residual {np.abs(res).max():.3g}."))
    return B


def _merger(d: dict) -> list:
    m = d["merger"]
    flow = units(d)[1]
    cs_pre, cs_post = as_float(m["consumer_surplus_pre"]), as_float(m["consumer_surplus_post"])
    cs = difference(cs_post, cs_pre)
    cs_rel = cs / cs_pre if cs_pre else 0.0
    h0, h1, dh, naive = (as_float(m[k]) for k in ("hhi_pre", "hhi_post", "delta_hhi", "naive_delta_hhi"))
    B = [("heading", "The post-merger static equilibrium"),
         ("paragraph", f"HHI at the static equilibrium: {h0:.0f} before, {h1:.0f} after (change {dh:+.0f}; at "
                       f"pre-merger shares {naive:.0f}). Consumer surplus at the static equilibrium changes by "
                       f"{cs:+.6g} {flow} ({cs_rel:+.2%})."),
         ("table", "merger_prices", "Static Nash prices before and after the merger (change in percent)")]
    if m["notes"]:
        B.append(("bullets", list(m["notes"])))
    B.append(("heading", "Stage games and per-firm thresholds"))
    for label in SIDES:
        B.append(("table", f"stage_game_{label}", f"Stage game {label} the merger"))
        B.append(("table", f"thresholds_per_firm_{label}",
                  f"Critical discount factor of each firm {label} the merger ('-': not sustainable)"))
    return B


def _dynamics(d: dict, fig) -> list:
    B = []
    if d["before"]["partial_collusion"]:
        B.append(("heading", "Partial collusion"))
        B.append(("paragraph", "Below a threshold the firms can still sustain a less profitable outcome on the path "
                               "from static Nash to the agreement; its profit gain is (profit - Nash) / (collusive - "
                               "Nash)."))
        B.append(("table", "partial_collusion", "Profit gain of the most profitable sustainable outcome"))
        B += fig("partial_collusion")
    if "simulation" in d["before"]:
        B.append(("heading", "Simulated persistence of collusion"))
        B.append(("paragraph", "Firms follow the line-up's strategies under the experiment's monitoring noise; "
                               "intervals are 95% confidence intervals across replications. Simulated persistence "
                               "reflects the noise and the number of firms that can set off a punishment; whether "
                               "the strategies are an equilibrium at the discount factor is what the thresholds "
                               "say."))
        B.append(("table", "persistence", "Persistence metrics before and after the merger"))
        B += fig("persistence")
    return B


def _factors(d: dict) -> list:
    B = [("heading", "Asymmetry"),
         ("table", "asymmetry", "Asymmetry measures at the static equilibrium"),
         ("table", "firms", "Firms at the static equilibrium"),
         ("heading", "The usual factors"),
         ("paragraph", "Each factor (fewer firms, more symmetric firms, less monitoring noise, more frequent "
                       "interaction, growing demand) is varied in the model with the rest held fixed; the direction "
                       "the model computes is set beside the direction the literature states, with its source "
                       "(references under Methods)."),
         ("table", "factors", FACTORS_CAPTION),
         ("note", FACTOR_LEGEND)]
    notes = [f"{f['factor']}: {f['note']}" for f in d["factors"] if f["note"]]
    if notes:
        B.append(("bullets", notes))
    return B


def _sensitivity(d: dict, fig) -> list:
    if not d["sensitivity"]:
        return []
    B = [("heading", "Sensitivity")]
    for key, s in in_order(d["sensitivity"]):
        tname = f"sensitivity_{key}"
        if key == "delta":
            B.append(("table", tname, "Conclusion along the discount factor"))
        elif key == "noise":
            B.append(("table", tname, "Simulated persistence against the monitoring noise (scale 1: the "
                                      "experiment's noise)"))
        else:
            B.append(("table", tname, f"Thresholds ({d['conclusion']['scheme']}) against the calibration input "
                                      f"'{key.replace('_', ' ')}'"))
            if s.get("note"):
                B.append(("paragraph", s["note"] + "."))
        B += fig(tname)
    return B


def summary_blocks(a, figures=()) -> list:
    """The summary in reading order (see the module notes; also ``("note", text)``, a paragraph set apart, and
    ``("assumptions", [items])``, stated in the bundle's section of assumptions).

    Parameters
    ----------
    a : Assessment or dict
    figures : iterable of str
        The names of the figures drawn (a figure block is added only for these).

    Returns
    -------
    list of tuple
    """
    d = assessment_data(a)
    figures = set(figures)

    def fig(name):
        return [("figure", name)] if name in figures else []

    c = d["conclusion"]
    # the caution is the bundle's own, on its first page and at its close: not repeated here
    B = [("heading", "Conclusion under the stated assumptions"), ("paragraph", c["statement"])]
    if c.get("robustness"):
        B.append(("bullets", [f"sensitivity to {k.replace('_', ' ')}: {v}" for k, v in in_order(c["robustness"])]))
    B.append(("table", "thresholds", "Critical discount factors of each scheme ('-': not sustainable below one)"))
    B.append(("paragraph", "How each threshold is found:"))
    B.append(("bullets", list(THRESHOLD_SHORT)))
    B.append(("table", "stick_and_carrot", "Stick and carrot: the punishment of each market and the constraint "
                                           "that binds its binding firm"))
    weak = [label for label in SIDES if d[label]["thresholds"]["stick_carrot"].get("weaker_than_grim")]
    if weak:
        B.append(("note", f"{' and '.join(weak).capitalize()} the merger the best one-period stick is weaker than "
                          "Nash reversion forever (capacities or the price floor limit how harsh one period can be)."))
    B += fig("thresholds")
    B += _setup(d)
    if d["calibration"] is not None:
        B += _calibration(d)
    B += payoff_blocks(d, fig)
    pt, mv = assessment_pairs(d)
    if pt is not None:
        B += [("heading", "Every two-firm merger and the maverick"),
              ("table", "pair_mergers", "Grim-trigger critical discount factor of the market before the merger if "
                                        "each two of its firms merged instead"),
              ("bullets", pair_lines(pt, mv, what="grim trigger")), *fig("pair-mergers")]
    B += _merger(d) + _dynamics(d, fig) + _factors(d) + _sensitivity(d, fig) + methods_blocks(d)
    # stated in the bundle's one section of assumptions, with the kind's general ones
    B.append(("assumptions", [*(named_products(d, x) for x in d["assumptions"]),
                              "the punishment schemes, the collusive agreement and the monitoring structure are "
                              "modelling choices; other choices give other numbers"]))
    return B
