"""The tables of an assessment, read from its plain data (:class:`sim.antitrust.result.Assessment`).

:func:`assessment_tables` gives every table of the summary as ``(headers, rows)``; cells are numbers, strings or
None. Nothing is recomputed. The stored data hold no nan or inf (JSON null) and their dicts may come back with
sorted keys: tables follow fixed orders, never a dict's order.
"""

from __future__ import annotations

import math
import re

import numpy as np

from sim.antitrust.merger import difference
from sim.antitrust.options import SENSITIVITY_INPUTS
from sim.antitrust.result import DEFAULT_CURRENCY, DEFAULT_PERIOD
from sim.core.text import fmt_num, plain_values
from sim.evidence.assess_payoffs import payoff_table
from sim.evidence.pairs import PAIR_HEADERS, assessment_pairs, pair_rows
from sim.models.market import DEMAND_KEYS

__all__ = ["FACTOR_HEADERS", "SIDES", "as_float", "assessment_data", "assessment_tables", "csv_tables", "in_order",
           "market_text", "named_products", "num", "percent", "price_rows", "product_labels", "units", "yes_no"]

#: order of the sensitivity ranges (that of :func:`sim.antitrust.sensitivity.sensitivity`)
SENS_ORDER = (*SENSITIVITY_INPUTS, "delta", "noise")
SIDES = ("before", "after")
SCHEME_LABELS = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}
#: Columns of the factor table; the last one says in words what the row's direction cells mean (the
#: table's legend, row by row, so that the CSV file carries it too).
FACTOR_HEADERS = ["factor (the change considered)", "what the model varies", "values (before; after)",
                  "model: effect on collusion", "literature: effect on collusion", "source", "agree", "reading"]
#: Keys of a market's table that follow its demand's parameters, in this order.
_MARKET_LAST = ("cost", "n_firms", "capacity", "tick", "owner")


def num(x, digits: int = 4) -> str:
    """A number for text (``-`` for None or nan).

    Parameters
    ----------
    x : float or None
    digits : int

    Returns
    -------
    str
    """
    return fmt_num(x, digits)


def yes_no(x) -> str:
    """``yes``, ``no`` or ``-`` (None).

    Parameters
    ----------
    x : bool or None

    Returns
    -------
    str
    """
    if x is None:
        return "-"
    return "yes" if x else "no"


def as_float(x) -> float:
    """A stored number as a float (None, JSON's nan or inf, as nan).

    Parameters
    ----------
    x : float or None

    Returns
    -------
    float
    """
    return np.nan if x is None else float(x)


def assessment_data(a) -> dict:
    """The assessment as plain JSON data.

    Parameters
    ----------
    a : Assessment or dict
        A result, or its document (:meth:`~sim.antitrust.result.Assessment.to_dict`).

    Returns
    -------
    dict
    """
    return a if isinstance(a, dict) else a.to_dict()


def units(d: dict) -> tuple[str, str]:
    """The units of money in an assessment's tables.

    Parameters
    ----------
    d : dict
        The assessment's data.

    Returns
    -------
    money : str
        Prices and costs (``"EUR"``; default ``"currency units"``).
    flow : str
        Profits and consumer surplus (``"EUR per month"``; default ``"currency units per period"``).
    """
    cur = d.get("currency") or DEFAULT_CURRENCY
    return cur, f"{cur} per {d.get('period') or DEFAULT_PERIOD}"


def percent(x) -> str:
    """A relative change as a percentage with its sign (``+0.19%``; ``-`` when undefined).

    Parameters
    ----------
    x : float or None
        The change as a fraction.

    Returns
    -------
    str
    """
    v = as_float(x)
    return "-" if not math.isfinite(v) else f"{v:+.2%}"


def product_labels(d: dict) -> list[str]:
    """A label per product of the pre-merger market: its firm's name, with the product's number when the firm has
    several.

    Parameters
    ----------
    d : dict
        The assessment's data.

    Returns
    -------
    list of str
        One label per product.
    """
    names = d["merger"]["names_pre"]
    owner = d["before"]["stage"]["owner"]
    counts = {o: owner.count(o) for o in owner}
    return [names[o - 1] if counts[o] == 1 else f"{names[o - 1]}, product {k + 1}" for k, o in enumerate(owner)]


def named_products(d: dict, text: str) -> str:
    """``text`` with every "product k" of the pre-merger market named as in the tables (its firm's name).

    Parameters
    ----------
    d : dict
        The assessment's data.
    text : str

    Returns
    -------
    str
    """
    labels = product_labels(d)

    def name(m):
        k = int(m.group(1))
        return labels[k - 1] if 1 <= k <= len(labels) else m.group(0)

    return re.sub(r"\bproduct (\d+)\b", name, text)


def price_rows(d: dict) -> list:
    """The static Nash price changes of the merger, each named.

    Parameters
    ----------
    d : dict
        The assessment's data.

    Returns
    -------
    list of (str, dict)
        The product's label (``"market price"`` for a homogeneous good) and its row of
        ``merger["price_changes"]``.
    """
    labels = product_labels(d)
    return [("market price" if r["product"] == "market" else labels[int(r["product"]) - 1], r)
            for r in d["merger"]["price_changes"]]


def in_order(d: dict, order=SENS_ORDER) -> list:
    """Items of a dict keyed by sensitivity inputs, in the fixed order of the ranges.

    Parameters
    ----------
    d : dict
    order : sequence of str

    Returns
    -------
    list of (str, object)
    """
    return [(k, d[k]) for k in order if k in d]


def _ratio_cell(v, xs):
    """A largest-to-smallest ratio as stored: JSON holds no inf, so a null ratio of finite values whose
    smallest is not positive is inf again (see :func:`sim.antitrust.sides.asymmetry`)."""
    if v is None and xs and all(x is not None for x in xs) and min(xs) <= 0:
        return math.inf
    return v


def _plain(v):
    """A table cell as a plain Python value (numpy scalars would be written as ``np.float64(...)``)."""
    if isinstance(v, np.bool_):
        return bool(v)
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.floating):
        return float(v)
    return v


def param_text(v) -> str:
    """A demand parameter (a number or a list of numbers) in text.

    Parameters
    ----------
    v : float or list of float

    Returns
    -------
    str
    """
    return plain_values(v, 6)


def demand_order(demand: str, keys) -> list:
    """``keys`` in the order of a ``[market]`` table of that demand (the others after them, sorted).

    Parameters
    ----------
    demand : str
    keys : iterable of str

    Returns
    -------
    list of str
    """
    first = [k for k in DEMAND_KEYS.get(demand, ()) if k in keys]
    return first + sorted(k for k in keys if k not in first)


def market_text(d: dict, names=None) -> str:
    """A market's table (:meth:`sim.Market.to_dict`) in words: the demand's parameters, then costs and structure.

    Parameters
    ----------
    d : dict
    names : sequence of str, optional
        The market's firm names: each product's owner is named instead of numbered.

    Returns
    -------
    str
    """
    keys = demand_order(d["demand"], [k for k in d if k not in ("model", "demand", *_MARKET_LAST)])
    keys += [k for k in _MARKET_LAST if k in d]
    def text(k):
        if k == "owner" and names:
            return ", ".join(names[o - 1] for o in d[k])
        return param_text(d[k])

    params = "; ".join(f"{k} {text(k)}" for k in keys)
    return f"{d['model'].capitalize()} competition, {d['demand']} demand: {params}"


def _factor_values(f: dict, growth: float) -> str:
    v = f["values"]
    name = f["key"]
    if not v:
        return f["note"] or "-"
    if name == "firms":
        return f"{v['base_label']}: {num(v['base'])}; {v['varied_label']}: {num(v['varied'])}"
    parts = []
    for side in SIDES:
        x = v.get(side)
        if not x:
            continue
        if name == "symmetry":
            parts.append(f"{side}: actual {num(x['actual'])}, symmetric {num(x['symmetric'])}")
        elif name == "transparency":
            parts.append(f"{side}: {num(x['noise'])} at the experiment's noise, {num(x['scaled_noise'])} at noise "
                         f"x{x['scale']:g}")
        elif name == "frequency":
            parts.append(f"{side}: threshold {num(x['threshold'])}, longest interval "
                         f"{num(x.get('longest_interval'), 3)} periods")
        elif name == "growth":
            parts.append(_growth_values(side, x, growth))
        elif name == "contact":
            firms = ", ".join(f"{r['firm']} {num(r['pooled'])}" for r in x["merging"])
            parts.append(f"{side}: assessed market alone {num(x['alone'])}, with contact {num(x['pooled'])} "
                         f"(pooled: {firms})")
    return "; ".join(parts)


def _growth_values(side: str, x: dict, g: float) -> str:
    text = f"{side}: growth needed {num(x['growth_needed'])}"
    if g == 0:
        return text
    if x.get("effect"):
        text = f"{side}: {x['effect']}; growth needed {num(x['growth_needed'])}"
    at = x["sustainable_growing"] if g > 0 else x["sustainable_declining"]
    other = x["sustainable_declining"] if g > 0 else x["sustainable_growing"]
    return (text + f"; sustainable at the stated rate g = {g:+g} {yes_no(at)}, at g = {-g:+g} {yes_no(other)}")


def _threshold_tables(d: dict) -> dict:
    c = d["conclusion"]
    flow = units(d)[1]
    out = {"thresholds": (
        ["scheme", "before", "binding before", "after", "binding after", "effect of the merger",
         f"sustainable at {c['delta']:.4g} before", "after"],
        [[s["scheme"], s["before"], s["binding_before"], s["after"], s["binding_after"], s["direction"],
          yes_no(s["sustainable_before"]), yes_no(s["sustainable_after"])] for s in c["schemes"]])}
    for label in SIDES:
        side = d[label]
        th = side["thresholds"]
        schemes = [("grim trigger", th["grim"])] + [(f"Nash reversion, T={f['T']}", f) for f in th["finite"]] + [
            ("stick and carrot", th["stick_carrot"])]
        rows = [[name, *map(as_float, s["per_firm"])] for name, s in schemes]
        out[f"thresholds_per_firm_{label}"] = (["scheme", *side["names"]], rows)
        pr = side["stage"]["profits"]
        frows = [[nm, *(as_float(pr[k][i]) for k in ("collusive", "deviation", "nash", "minmax"))]
                 for i, nm in enumerate(side["names"])]
        out[f"stage_game_{label}"] = (["firm", *(f"{w} profit ({flow})" for w in ("collusive", "deviation", "Nash",
                                                                                  "minmax"))], frows)
    out["stick_and_carrot"] = _stick_and_carrot(d)
    return out


_CONSTRAINTS = {"collusion": "collusion: no gain from deviating from the agreement",
                "punishment": "punishment: no gain from deviating from the punishment"}


def _stick_and_carrot(d: dict) -> tuple:
    cur = units(d)[0]
    act = "quantity" if d["before"]["market"]["model"] == "cournot" else f"price ({cur})"
    rows = []
    for label in SIDES:
        sc = d[label]["thresholds"]["stick_carrot"]
        rows.append([label, sc["market"], sc.get("punishment_action"), sc["binding_name"],
                     _CONSTRAINTS.get(sc.get("binding_constraint"), "-")])
    return ["market", "threshold", f"punishment {act}, one period", "binding firm", "binding constraint"], rows


def _partial_key(p: dict) -> tuple:
    return p["scheme"], p.get("T"), p["delta"]


def _partial_table(d: dict) -> tuple:
    rows = []
    after_by = {_partial_key(p): p for p in d["after"]["partial_collusion"]}
    for p in d["before"]["partial_collusion"]:
        q = after_by.get(_partial_key(p))
        name = SCHEME_LABELS.get(p["scheme"], f"Nash reversion, T={p.get('T')}")
        rows.append([p["delta"], name, as_float(p["profit_gain"]), None if q is None else as_float(q["profit_gain"]),
                     None if q is None else difference(as_float(q["profit_gain"]), as_float(p["profit_gain"]))])
    return ["delta", "scheme", "profit gain before", "profit gain after", "change"], rows


def _structure_tables(d: dict) -> dict:
    cur = units(d)[0]
    arow, srow = [], []
    for label in SIDES:
        s = d[label]["asymmetry"]
        cap = s["capacities"] is not None
        arow.append([label, len(d[label]["names"]), as_float(s["hhi"]),
                     as_float(_ratio_cell(s["share_ratio"], s["shares"])),
                     as_float(_ratio_cell(s["cost_ratio"], s["costs"])), as_float(s["cost_cv"]),
                     as_float(_ratio_cell(s["capacity_ratio"], s["capacities"])) if cap else "-"])
        for i, nm in enumerate(d[label]["names"]):
            srow.append([label, nm, as_float(s["shares"][i]), as_float(s["costs"][i]),
                         as_float(s["capacities"][i]) if cap else "-", s["products"][i]])
    return {"asymmetry": (["market", "firms", "HHI", "largest / smallest share", "highest / lowest cost",
                           "cost coefficient of variation", "largest / smallest capacity"], arow),
            "firms": (["market", "firm", "share (static Nash)", f"marginal cost ({cur})", "capacity", "products"],
                      srow),
            "merger_prices": _merger_prices(d, "change", percent)}


def _merger_prices(d: dict, change_header: str, change) -> tuple:
    """The price of each product before and after the merger, its change in the cell ``change(fraction)`` gives."""
    cur = units(d)[0]
    return (["product", "owner after", f"price before ({cur})", f"price after ({cur})", change_header],
            [[lab, r["owner"] or "-", as_float(r["pre"]), as_float(r["post"]), change(r["change"])]
             for lab, r in price_rows(d)])


def csv_tables(a) -> dict:
    """The tables whose CSV file holds more than the summary shows: the price changes as numbers.

    Parameters
    ----------
    a : Assessment or dict

    Returns
    -------
    dict
        Table name -> ``(headers, rows)`` of its CSV file.
    """
    return {"merger_prices": _merger_prices(assessment_data(a), "change (%)", lambda x: 100.0 * as_float(x))}


#: the simulated metrics of the persistence table and their labels (``{money}``, ``{flow}``: the units)
SIM_ROWS = [("collusive_share", "share of collusive periods"), ("war_share", "share of price-war periods"),
            ("first_breakdown", "time to first breakdown (periods)"),
            ("broken_down", "share of replications that broke down"),
            ("spell_length", "mean collusive spell (periods)"), ("profit_gain", "profit gain"),
            ("price", "mean market price ({money})"), ("consumer_surplus", "mean consumer surplus ({flow})")]


def _persistence_table(d: dict) -> tuple:
    money, flow = units(d)
    rows = []
    for k, label in SIM_ROWS:
        label = label.format(money=money, flow=flow)
        eb, ea = d["before"]["simulation"][k], d["after"]["simulation"][k]
        rows.append([label, *(as_float(e[x]) for e in (eb, ea) for x in ("value", "low", "high"))])
    return ["metric", "before", "95% low", "95% high", "after", "95% low", "95% high"], rows


def _calibration_tables(d: dict) -> dict:
    cal = d["calibration"]
    cur = units(d)[0]
    per = d.get("period") or DEFAULT_PERIOD
    ob, eq, res = cal["observed"], cal["equilibrium"], cal["residuals"]
    labels = product_labels(d)
    rows = []
    for k in range(len(cal["costs"])):
        rows.append([labels[k], *map(as_float, (ob["prices"][k], ob["quantities"][k], ob["shares"][k], cal["costs"][k],
                                            cal["margins"][k], eq["prices"][k], eq["quantities"][k],
                                            res["prices"][k], res["quantities"][k]))])
    return {"calibration": (["product", f"observed price ({cur})", f"observed quantity (per {per})", "observed share",
                             f"implied cost ({cur})", "implied margin", f"model price ({cur})",
                             f"model quantity (per {per})", f"price residual ({cur})", "quantity residual"], rows),
            "calibration_parameters": (["parameter", "value"], [[k, param_text(cal["parameters"][k])] for k in
                                                                demand_order(cal["demand"], cal["parameters"])])}


def _sensitivity_table(name: str, s: dict, delta: float) -> tuple:
    if name == "delta":
        headers = ["delta", "conclusion", "profit gain before", "profit gain after"]
        rows = [[x, cat, as_float(gb), as_float(ga)] for x, cat, gb, ga in
                zip(s["values"], s["category"], s["profit_gain_before"], s["profit_gain_after"])]
    elif name == "noise":
        headers = ["noise scale", "collusive share before", "collusive share after", "after - before"]
        rows = [[k, as_float(b), as_float(a), as_float(df)] for k, b, a, df in
                zip(s["scales"], s["collusive_share_before"], s["collusive_share_after"], s["difference"])]
    else:
        headers = [name, "threshold before", "threshold after", "effect of the merger",
                   f"conclusion at delta {delta:.4g}", "status"]
        rows = [[x, b, a, dr, cat, st if st != "ok" else ""] for x, b, a, dr, cat, st in
                zip(s["values"], s["threshold_before"], s["threshold_after"], s["direction"],
                    s["category_at_delta"], s["status"])]
    if s.get("labels"):
        # the range's own labels beside its values
        headers = [headers[0], "label", *headers[1:]]
        rows = [[r[0], lab, *r[1:]] for r, lab in zip(rows, s["labels"])]
    return headers, rows


def assessment_tables(a) -> dict:
    """Every table of the summary.

    Parameters
    ----------
    a : Assessment or dict

    Returns
    -------
    dict
        Table name -> ``(headers, rows)``; cells are numbers, strings or None.
    """
    d = assessment_data(a)
    out = _threshold_tables(d)
    out["partial_collusion"] = _partial_table(d)
    out.update(_structure_tables(d))
    if "simulation" in d["before"]:
        out["persistence"] = _persistence_table(d)
    g = d["settings"]["growth"]
    out["factors"] = (FACTOR_HEADERS, [[f["factor"], f["varied"], _factor_values(f, g), f["model_direction"],
                                        f["literature_direction"], f["source"],
                                        "" if f["agrees"] is None else yes_no(f["agrees"]), f["reading"]]
                                       for f in d["factors"]])
    if d["calibration"] is not None:
        out.update(_calibration_tables(d))
    if d.get("payoff_sets") is not None:
        out["payoff_sets"] = payoff_table(d)
    pt, _mv = assessment_pairs(d)
    if pt is not None:
        out["pair_mergers"] = (PAIR_HEADERS, pair_rows(pt))
    for name, s in in_order(d["sensitivity"]):
        out[f"sensitivity_{name}"] = _sensitivity_table(name, s, d["conclusion"]["delta"])
    return {name: (headers, [[_plain(v) for v in r] for r in rows]) for name, (headers, rows) in out.items()}
