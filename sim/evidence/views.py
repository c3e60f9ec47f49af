"""Results in a notebook: each analysis's result as an HTML table (``_repr_html_``) and as a pandas DataFrame
(``to_frame``), labelled from the catalogue.

The numbers are the result's flat metrics -- the columns a run folder stores for its cell (``results.csv``), from
the kind's own flattening (:mod:`sim.runner.analyses`) -- so a notebook, the CSV and the bundle show the same
numbers. Each becomes one row: its label and unit from :func:`sim.evidence.catalogue.describe` (firm names where
the result has them), its value, its interval where it has one, and its stored name ("key") last. The HTML table
opens with the analysis's headline answer (:mod:`sim.evidence.answers`) and ends with the caution; every text is
escaped.

Importing this module registers the views (:func:`sim.core.views.register_view`); the package root names it as the
views' provider, so any result shows itself without the user importing it.
"""

from __future__ import annotations

import html
import math

from sim.core.text import CAUTION, fmt_num
from sim.core.views import register_view
from sim.evidence.assess_tables import assessment_data, product_labels
from sim.evidence.catalogue import describe
from sim.evidence.catalogue_names import key_names
from sim.evidence.front import scheme_words
from sim.evidence.render import renderer_for
from sim.runner.analyses import assess, capacity, learn, simulate, thresholds, tournament

__all__ = ["COLUMNS", "frame_rows", "result_frame", "result_html", "result_names"]

#: the columns of ``to_frame()``, the stored name last
COLUMNS = ["label", "value", "unit", "low", "high", "key"]
_BOUNDS = (".low", ".high", ".se")

#: kind name -> (result type, flat metrics of a result)
_KINDS = {
    "thresholds": (thresholds.KIND.result_type, thresholds.threshold_metrics),
    "simulate": (simulate.KIND.result_type, simulate.simulate_metrics),
    "learn": (learn.KIND.result_type, learn.learn_metrics),
    "tournament": (tournament.KIND.result_type, tournament.tournament_metrics),
    "assess": (assess.KIND.result_type, assess.assessment_metrics),
    "capacity": (capacity.KIND.result_type, capacity.capacity_metrics),
}


_TITLES = {"thresholds": "Critical discount factors", "simulate": "Simulation", "learn": "Learning sessions",
           "tournament": "Tournament", "assess": "Merger assessment", "capacity": "Market with capacities"}


def _kind_of(result) -> str:
    for name, (cls, _) in _KINDS.items():
        if isinstance(result, cls):
            return name
    raise TypeError(f"{type(result).__name__} is not the result of an analysis")


def _context(result) -> tuple:
    """Currency, period and the firm names before and after a merger (None where the result has none)."""
    kind = _kind_of(result)
    if kind == "assess":
        d = result.to_dict()
        m = d["merger"]
        return d.get("currency"), d.get("period"), list(m["names_pre"]), list(m["names_post"])
    if kind == "capacity":
        after = result.merger.after.names if result.merger is not None else None
        return None, None, list(result.thresholds.names), after
    if kind == "tournament":
        return result.units.get("currency"), result.units.get("period"), None, None
    return None, None, None, None


def result_names(result) -> dict | None:
    """The names that label a result's numbers: its firms before and after a merger and its products (None for a
    result whose firms have no names).

    Parameters
    ----------
    result : Record
        The result of an analysis.

    Returns
    -------
    dict or None
        ``before``, ``after`` and ``products`` (see :func:`sim.evidence.catalogue.key_names`).
    """
    kind = _kind_of(result)
    _currency, _period, before, after = _context(result)
    if before is None:
        return None
    products = product_labels(assessment_data(result)) if kind == "assess" else None
    return {"before": before, "after": after, "products": products}


def _label(key: str, currency, period, names) -> tuple[str, str]:
    if key.startswith("analytic.critical_delta."):
        return f"analytic critical discount factor, {scheme_words(key.split('.', 2)[2])}", ""
    try:
        d = describe(key, currency, period, **key_names(key, names))
    except KeyError:
        return key.replace("_", " ").replace(".", ", "), ""
    return d.label, d.unit


def _float(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def frame_rows(result) -> list[list]:
    """One row per number of a result: label, value, unit, interval bounds (nan where none) and key.

    Parameters
    ----------
    result : Record
        The result of an analysis (thresholds, simulate, learn, tournament, assess or capacity).

    Returns
    -------
    list of list
        Rows in the order of :data:`COLUMNS`.
    """
    metrics = _KINDS[_kind_of(result)][1](result)
    currency, period, _before, _after = _context(result)
    names = result_names(result)
    rows = []
    for key, v in metrics.items():
        if key.endswith(_BOUNDS):
            continue
        label, unit = _label(key, currency, period, names)
        rows.append([label, _float(v), unit, _float(metrics.get(f"{key}.low", math.nan)),
                     _float(metrics.get(f"{key}.high", math.nan)), key])
    return rows


def result_frame(result):
    """A result's numbers as a pandas DataFrame (see :func:`frame_rows`).

    Parameters
    ----------
    result : Record

    Returns
    -------
    pandas.DataFrame
        Columns :data:`COLUMNS`, one row per number.
    """
    import pandas as pd  # optional at start-up: only a notebook asks for a frame

    return pd.DataFrame(frame_rows(result), columns=COLUMNS)


def _cell(text: str, num: bool = False) -> str:
    style = ' style="text-align:right"' if num else ' style="text-align:left"'
    return f"<td{style}>{html.escape(text)}</td>"


def result_html(result) -> str:
    """A result as an HTML fragment: its headline answer, a table of its numbers (label, value, interval, unit, key)
    and the caution; every text escaped.

    Parameters
    ----------
    result : Record

    Returns
    -------
    str
    """
    kind = _kind_of(result)
    r = renderer_for(kind)
    head = r.headline(result) if r is not None and r.headline is not None else ""
    body = []
    for label, v, unit, lo, hi, key in frame_rows(result):
        ci = f"{fmt_num(lo)} to {fmt_num(hi)}" if math.isfinite(lo) and math.isfinite(hi) else ""
        body.append("<tr>" + _cell(label) + _cell(fmt_num(v), True) + _cell(ci, True) + _cell(unit)
                    + f'<td class="key"><code>{html.escape(key)}</code></td></tr>')
    heads = "".join(f"<th>{h}</th>" for h in ("number", "value", "interval", "unit", "key"))
    return (f'<div class="supergame-result"><p><strong>{_TITLES[kind]}.</strong> {html.escape(head)}</p>'
            f"<table><thead><tr>{heads}</tr></thead><tbody>{''.join(body)}</tbody></table>"
            f"<p><em>{html.escape(CAUTION)}</em></p></div>")


for _name, (_cls, _) in _KINDS.items():
    register_view(_cls, html=result_html, frame=result_frame)
