"""The parts of a run's evidence bundle that frame its detail: the first page (what was asked, the answer with its
key numbers and intervals, the caution), the experiment file's own account of itself, the column labels of its
tables, the methods appendix and the glossary.

Everything is read from the stored cells and labelled from the catalogue (:mod:`sim.evidence.catalogue`); nothing
is recomputed. The answer of a run without its own renderer's account is built from the kind's headline metrics:
their value and interval in a single cell, or their range over the cells of a sweep (with the cells where the
extremes sit), whether a one-shot deviation pays, and the analytic critical discount factors of the schemes played.
"""

from __future__ import annotations

import json
import math
import re

from sim.core.provenance import package_versions, platform_info
from sim.core.text import fmt_num
from sim.evidence.catalogue import describe, describe_parameter, glossary
from sim.evidence.catalogue_names import key_names

__all__ = [
    "describe_experiment",
    "headline",
    "methods_rows",
    "metric_column",
    "parameter_column",
    "scheme_words",
    "software_lines",
    "terms_rows",
    "where",
]

#: units that a bracketed range or a yes/no already says (not repeated after a number)
_QUIET_UNITS = ("0 to 1", "yes (1) / no (0)", "")


def scheme_words(name: str) -> str:
    """A punishment scheme's stored name in words (``grim`` -> grim trigger, ``finite_T3`` -> Nash reversion for 3
    periods).

    Parameters
    ----------
    name : str

    Returns
    -------
    str
    """
    m = re.fullmatch(r"finite_?T?(\d+)", name)
    if m:
        n = int(m.group(1))
        return f"Nash reversion for {n} period{'s' if n != 1 else ''}"
    return {"grim": "grim trigger", "stick_carrot": "stick and carrot"}.get(name, name.replace("_", " "))


def metric_column(key: str, units=(None, None)) -> str:
    """A table column's label for a stored metric name: the catalogue's label with its unit.

    Parameters
    ----------
    key : str
    units : tuple of (str or None, str or None)
        Currency and period.

    Returns
    -------
    str
    """
    if key.startswith("analytic.critical_delta."):
        return f"analytic critical discount factor, {scheme_words(key.split('.', 2)[2])}"
    try:
        return describe(key, *units).axis
    except KeyError:
        return key


def parameter_column(path: str, units=(None, None)) -> str:
    """A table column's label for a swept parameter's path.

    Parameters
    ----------
    path : str
    units : tuple of (str or None, str or None)

    Returns
    -------
    str
    """
    try:
        return describe_parameter(path, *units).axis
    except KeyError:
        return path


def _num(v: float) -> str:
    """Four significant digits, thousands separated (the first page's one number format)."""
    if not math.isfinite(v):
        return fmt_num(v)
    if abs(v) >= 1e4:
        return f"{v:,.0f}"
    return f"{v:.4g}"


def _value(row, m: str, units) -> str:
    """``value unit (95 % interval low to high)`` of a metric in a cell."""
    v = row.metrics.get(m, math.nan)
    text = _num(v) if math.isfinite(v) else "not available"
    try:
        unit = describe(m, *units).unit
    except KeyError:
        unit = ""
    text += f" {unit}" if unit not in _QUIET_UNITS else ""
    lo, hi = row.metrics.get(f"{m}.low", math.nan), row.metrics.get(f"{m}.high", math.nan)
    if math.isfinite(lo) and math.isfinite(hi):
        text += f" (95 % interval {_num(lo)} to {_num(hi)})"
    return text


def _overlap(lo_row, hi_row, m: str) -> str:
    """Words for two cells' intervals of metric ``m`` that overlap (nothing when they do not, or are missing)."""
    a, b = lo_row.metrics.get(f"{m}.high", math.nan), hi_row.metrics.get(f"{m}.low", math.nan)
    if math.isfinite(a) and math.isfinite(b) and a >= b:
        return "; their intervals overlap, so these two cells do not differ clearly"
    return ""


def where(row, parameters, units=(None, None)) -> str:
    """The swept values of a cell in words (a strategy by its label alone).

    Parameters
    ----------
    row : sim.runner.store.CellRow
        A stored cell (its ``labels`` give the swept values).
    parameters : sequence of Parameter
        The experiment's swept parameters.
    units : tuple of (str or None, str or None)
        Currency and period, for the parameters' labels.

    Returns
    -------
    str
        ``"label = value, ..."``, named from the catalogue (the key path when it has no entry).
    """
    parts = []
    for p in parameters:
        if p.path.startswith("strategies"):
            parts.append(str(row.labels[p.path]))
            continue
        try:
            name = describe_parameter(p.path, *units).label
        except KeyError:
            name = p.path
        parts.append(f"{name} = {row.labels[p.path]}")
    return ", ".join(parts)


def _label(m: str, units) -> str:
    try:
        return describe(m, *units).label
    except KeyError:
        return m


def _critical(ok) -> str | None:
    """The analytic critical discount factors of the schemes played (those of the first cell playing each)."""
    keys = sorted({m for r in ok for m in r.metrics if m.startswith("analytic.critical_delta.")})
    found = [(next(r.metrics[k] for r in ok if k in r.metrics), scheme_words(k.split(".", 2)[2])) for k in keys]
    parts = []
    for v, scheme in sorted(found, key=lambda t: (not math.isfinite(t[0]), t[0])):
        parts.append(f"{v:.3f} under {scheme}" if math.isfinite(v) else f"above one under {scheme}")
    if not parts:
        return None
    return ("The analytic critical discount factor (perfect monitoring, infinite horizon) is "
            + ", ".join(parts[:-1]) + (" and " if len(parts) > 1 else "") + parts[-1] + ".")


def headline(question: str, parameters, rows, heads, units=(None, None)) -> tuple:
    """The first page of a run's bundle: the question, the answer in one or two sentences, the key numbers.

    Parameters
    ----------
    question : str
        What the experiment asks.
    parameters : sequence of Parameter
        The swept parameters (empty for a single cell).
    rows : sequence of CellRow
        The stored cells.
    heads : sequence of str
        The headline metrics, most important first.
    units : tuple of (str or None, str or None)

    Returns
    -------
    tuple of (str, list of str, list of str)
        Question, answer sentences, key numbers.
    """
    ok = [r for r in rows if r.status == "ok"]
    heads = [m for m in heads if any(m in r.metrics for r in ok)]
    crit = _critical(ok)
    if not ok:
        return question, ["No cell finished, so the run gives no answer; see the failed cells below."], []
    unsettled = _unconverged(ok, parameters)
    if not parameters:
        r = ok[0]
        numbers = [f"{_label(m, units)}: {_value(r, m, units)}" for m in heads[:6]]
        first = (f"Under the settings of the experiment file, the {_label(heads[0], units)} is "
                 f"{_value(r, heads[0], units)}." if heads else "The run finished; its numbers follow.")
        return question, [first, *([crit] if crit else []), *unsettled], numbers
    answer, numbers = [], []
    if "deviation.pays" in heads:
        pays = [r for r in ok if r.metrics.get("deviation.pays", 0.0) == 1.0]
        sure = [r for r in pays if r.metrics.get("deviation.gain.low", math.nan) > 0]
        answer.append(f"A one-shot deviation pays (the mean gain is positive) in {len(pays)} of {len(ok)} cells, "
                      f"{len(sure)} of them with the whole 95 % interval above zero; where it pays, the line-up is "
                      "not an equilibrium at those settings.")
    for m in heads:
        if m == "deviation.pays":
            continue
        have = [r for r in ok if math.isfinite(r.metrics.get(m, math.nan))]
        if not have:
            continue
        lo = min(have, key=lambda r: r.metrics[m])
        hi = max(have, key=lambda r: r.metrics[m])
        if lo is hi:
            # one cell has this metric, or every cell has the same value: no range to state
            place = (f"at {where(lo, parameters, units)}" if len(have) == 1
                     else f"in each of the {len(have)} cells that have it")
            numbers.append(f"{_label(m, units)}: {_value(lo, m, units)} {place}")
            continue
        numbers.append(f"{_label(m, units)}: lowest {_value(lo, m, units)} at {where(lo, parameters, units)}, "
                       f"highest {_value(hi, m, units)} at {where(hi, parameters, units)}{_overlap(lo, hi, m)}")
    if not answer and numbers:
        answer.append(f"Across the {len(ok)} cells of the sweep, the {numbers[0]}.")
    if crit:
        answer.append(crit)
    return question, (answer[:2] or ["The run finished; its numbers follow."]) + unsettled, numbers


def _unconverged(ok, parameters) -> list[str]:
    """A warning when learning sessions did not converge in some cells (a ``converged`` share of 0): their numbers
    are those of learners stopped at the cap, still learning."""
    none = [r for r in ok if r.metrics.get("converged", math.nan) == 0.0]
    if not none:
        return []
    if not parameters:
        return ["No session converged: the numbers are those of greedy play when the sessions reached their cap, "
                "while the learners were still learning, not of a converged outcome."]
    which = f"cell{'s' if len(none) > 1 else ''} {', '.join(str(r.number) for r in none)}"
    return [f"In {len(none)} of {len(ok)} cells ({which}) no session converged: "
            "their numbers are those of greedy play when the sessions reached their cap, while the learners were "
            "still learning, not of a converged outcome."]


def terms_rows(metrics, parameters, units=(None, None), names: dict | None = None) -> list:
    """Rows of the glossary: key, label, unit, definition, method and source, interval -- of every metric and swept
    parameter that appears in the bundle.

    Parameters
    ----------
    metrics : iterable of str
        Stored metric names (bounds and standard errors fold into their metric).
    parameters : iterable of str
        Swept parameters' paths.
    units : tuple of (str or None, str or None)
    names : dict, optional
        Firm and product names (:func:`sim.evidence.catalogue.key_names`); default: by number.

    Returns
    -------
    list of list of str
    """
    rows = []
    for path in parameters:
        try:
            d = describe_parameter(path, *units)
        except KeyError:
            rows.append([path, path, "-", "no entry in the catalogue", "-", "-"])
            continue
        rows.append([path, d.label, d.unit or "-", d.entry.definition, d.entry.method, d.entry.interval])
    for k in metrics:
        try:
            rows += glossary([k], *units, names_of=(lambda key: key_names(key, names)) if names else None)
        except KeyError:
            rows.append([k, k, "-", "no entry in the catalogue", "-", "-"])
    seen, out = set(), []
    for r in rows:
        if r[0] not in seen:
            seen.add(r[0])
            out.append(r)
    return out


def methods_rows(terms) -> list:
    """The methods behind the numbers, each with its published source and the numbers computed with it.

    Parameters
    ----------
    terms : sequence of list of str
        Rows of :func:`terms_rows`.

    Returns
    -------
    list of list of str
        ``[method and source, interval, numbers computed with it]``.
    """
    groups: dict = {}
    for _key, label, _unit, _definition, method, interval in terms:
        if method in ("given", "-"):
            continue
        label = label.removeprefix("analytic prediction of the ")
        have = groups.setdefault((method, interval), [])
        if label not in have:
            have.append(label)
    return [[method, interval, "; ".join(labels)] for (method, interval), labels in groups.items()]


def software_lines(folder) -> list:
    """The software that computed a run's numbers (from the run folder's manifest; else this installation).

    Parameters
    ----------
    folder : Path
        The run folder.

    Returns
    -------
    list of str
    """
    try:
        man = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
        packages, plat = man.get("packages") or package_versions(), man.get("platform") or platform_info()
    except (OSError, ValueError):
        packages, plat = package_versions(), platform_info()
    listed = ", ".join(f"{k} {v}" for k, v in packages.items() if v)
    return [f"Packages: {listed}.",
            f"Platform: {plat.get('platform', '-')} ({plat.get('cpus', '-')} CPUs)."]


#: the first line of a numbered or bulleted item in an experiment file's leading comment (" 1. ...", " - ...")
_LIST_ITEM = re.compile(r"^ {0,3}(\d+\.|-|\*) ")


def describe_experiment(b, text: str) -> None:
    """An experiment file's own account of itself (its leading comment) in a bundle: paragraphs at blank lines, their
    lines joined; lines indented by four spaces or more (the commands that run it) kept as written, as code, unless
    they go on with a numbered or bulleted item.

    Parameters
    ----------
    b : sim.evidence.bundle.Bundle
    text : str
    """
    for para in text.split("\n\n"):
        words: list = []
        code: list = []
        in_list = False  # an indented line that goes on with a list item (" 1. ...") is text, not code
        for line in para.splitlines() + [""]:
            if _LIST_ITEM.match(line):
                in_list = True
            elif not line.startswith("    "):
                in_list = False
            if line.startswith("    ") and line.strip() and not in_list:
                if words:
                    b.paragraph(" ".join(" ".join(words).split()))
                    words = []
                code.append(line)
                continue
            if code:
                indent = min(len(c) - len(c.lstrip()) for c in code)
                b.code("\n".join(c[indent:].rstrip() for c in code))
                code = []
            words.append(line)
        if " ".join(words).strip():
            b.paragraph(" ".join(" ".join(words).split()))
