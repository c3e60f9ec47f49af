"""Values of experiment files: parameter paths, readable labels of values, canonical JSON, and the one syntax of
value ranges (lists, ``{start, stop, num}``, log ranges, steps, values with labels) shared by sweeps and every
table that takes ranges."""

from __future__ import annotations

import json
import math
import numbers
import re
from typing import Any

from sim.core.errors import InputError
from sim.core.jsonutil import jsonable
from sim.core.tables import refuse_unknown

#: the most values one range may make
MAX_VALUES = 1_000_000
_RANGE_KEYS = ("start", "stop", "num", "step", "log", "values", "labels")


def canonical_path(text: str, key: str = "sweep") -> str:
    """``strategies[1].length`` or ``strategies.1.length`` -> ``strategies.1.length``.

    Parameters
    ----------
    text : str
        A parameter path as written in an experiment file or on the command line.
    key : str
        Key path of ``text`` in error messages.

    Returns
    -------
    str
        The path with list positions written as dotted segments.

    Raises
    ------
    InputError
        ``key`` when ``text`` is not a non-empty string or has an empty segment (``run..delta``).
    """
    if not isinstance(text, str) or not text.strip():
        raise InputError(key, f"a parameter path must be a non-empty string like 'run.delta', got {text!r}")
    t = re.sub(r"\[(\d+)\]", r".\1", text.strip())
    segs = t.split(".")
    if any(s == "" for s in segs):
        raise InputError(key, f"malformed parameter path {text!r} (expected keys separated by dots, e.g. "
                              f"'strategies.1.length')")
    return ".".join(segs)


def is_real(v: Any) -> bool:
    """Whether ``v`` is a real number (booleans excluded).

    Parameters
    ----------
    v : object

    Returns
    -------
    bool
    """
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _fmt_number(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, numbers.Integral):
        return str(int(v))
    x = float(v)
    return repr(x) if math.isfinite(x) else str(x)


def value_label(value: Any) -> str:
    """A short readable label of a swept value (numbers as written, tables as ``name(key=value)``).

    Parameters
    ----------
    value : object
        A value of an experiment file: a string, number, boolean, table (a strategy table is written as
        its name with its parameters, its seats left out) or list.

    Returns
    -------
    str
    """
    if isinstance(value, str):
        return value
    if is_real(value) or isinstance(value, bool):
        return _fmt_number(value)
    if isinstance(value, dict):
        if "strategy" in value:
            params = ", ".join(f"{k}={value_label(v)}" for k, v in value.items() if k not in ("strategy", "seats"))
            return f"{value['strategy']}({params})" if params else str(value["strategy"])
        return "{" + ", ".join(f"{k}={value_label(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(value_label(v) for v in value) + "]"
    return str(value)


def canonical_json(value: Any) -> str:
    """Deterministic JSON of plain data (sorted keys, shortest float repr, nan as null).

    Parameters
    ----------
    value : object
        Plain data (numpy values are converted by :func:`sim.core.jsonutil.jsonable`).

    Returns
    -------
    str
        Compact JSON with no spaces, the same text for equal data.
    """
    return json.dumps(jsonable(value), sort_keys=True, separators=(",", ":"), allow_nan=False)


def _clean(x: float) -> float:
    """Round a computed grid point to 12 significant digits (0.7000000000000001 -> 0.7)."""
    if x == 0 or not math.isfinite(x):
        return x
    return float(f"{x:.12g}")



def parse_values(spec: Any, key: str, max_values: int = MAX_VALUES) -> tuple[list, list[str], bool]:
    """The values of one swept parameter (or of any range of values an experiment file gives).

    This is the one range syntax of experiment files, shared by ``[sweep]`` and the readers of other
    tables that take ranges (for example the assessment's sensitivity ranges).

    Parameters
    ----------
    spec : list or dict
        A non-empty list of values; or a range table: ``{ start, stop, num }`` (evenly spaced, both
        ends included), ``{ start, stop, step }``, ``{ start, stop, num, log = true }`` (evenly
        spaced logarithms), or ``{ values = [...], labels = [...] }`` (labels shown in tables and
        figures).
    key : str
        Key path of ``spec`` in error messages, e.g. ``"sweep.run.delta"``.
    max_values : int
        The most values a range may make.

    Returns
    -------
    values : list
        Plain TOML data (integers stay integers when both ends and the step are integers).
    labels : list of str
        One distinct label per value (:func:`value_label` unless given).
    log : bool
        Whether the values come from a logarithmic range.

    Raises
    ------
    InputError
        Naming ``key`` (or ``key.start``, ``key.num``, ...), what is allowed and what was given; the
        same value listed twice is refused.
    """
    if isinstance(spec, list):
        if not spec:
            raise InputError(key, "must be a non-empty list of values")
        vals, labels, log = list(spec), None, False
    elif isinstance(spec, dict):
        vals, labels, log = _range_values(key, spec, max_values)
    else:
        raise InputError(key, f"must be a list of values or a range table {{ start, stop, num }}, got {spec!r}")
    if labels is None:
        labels = [value_label(v) for v in vals]
        if len(set(labels)) != len(labels):
            dup = next(lab for lab in labels if labels.count(lab) > 1)
            raise InputError(key, f"lists the value {dup} twice")
    return vals, list(labels), log


def _range_values(key: str, spec: dict, max_values: int = MAX_VALUES) -> tuple[list, list | None, bool]:
    refuse_unknown(spec, key, _RANGE_KEYS)
    if "values" in spec:
        extra = set(spec) - {"values", "labels"}
        if extra:
            raise InputError(f"{key}.{sorted(extra)[0]}", "a table with 'values' takes only 'labels' besides")
        vals = spec["values"]
        if not isinstance(vals, list) or not vals:
            raise InputError(f"{key}.values", f"must be a non-empty list, got {vals!r}")
        labels = spec.get("labels")
        if labels is not None:
            if not isinstance(labels, list) or len(labels) != len(vals) or not all(isinstance(s, str) for s in labels):
                raise InputError(f"{key}.labels", f"must be a list of {len(vals)} strings (one per value), got "
                                                  f"{labels!r}")
            if len(set(labels)) != len(labels):
                raise InputError(f"{key}.labels", "must be distinct")
        return list(vals), labels, False
    if "labels" in spec:
        raise InputError(f"{key}.labels", "labels go with 'values'")
    for k in ("start", "stop"):
        if k not in spec:
            raise InputError(f"{key}.{k}", "missing (a range needs start, stop and num or step)")
        if not is_real(spec[k]) or not math.isfinite(float(spec[k])):
            raise InputError(f"{key}.{k}", f"must be a finite number, got {spec[k]!r}")
    start, stop = spec["start"], spec["stop"]
    log = spec.get("log", False)
    if not isinstance(log, bool):
        raise InputError(f"{key}.log", f"must be true or false, got {log!r}")
    if ("num" in spec) == ("step" in spec):
        raise InputError(key, "a range needs exactly one of num (number of points) and step")
    ints = isinstance(start, numbers.Integral) and isinstance(stop, numbers.Integral)
    if "num" in spec:
        num = spec["num"]
        if isinstance(num, bool) or not isinstance(num, numbers.Integral) or not 1 <= num <= max_values:
            raise InputError(f"{key}.num", f"must be an integer in [1, {max_values}], got {num!r}")
        num = int(num)
        if num == 1 and start != stop:
            raise InputError(f"{key}.num", f"must be at least 2 for a range from {start!r} to {stop!r}, got 1")
        if log:
            if not (start > 0 and stop > 0):
                raise InputError(f"{key}.start", f"a log range needs start and stop > 0, got start {start!r}, stop "
                                                 f"{stop!r}")
            a, b = math.log(float(start)), math.log(float(stop))
            vals = [_clean(math.exp(a + (b - a) * k / (num - 1))) if num > 1 else float(start) for k in range(num)]
            vals[0], vals[-1] = float(start), float(stop)
        else:
            vals = [_clean(float(start) + (float(stop) - float(start)) * k / (num - 1)) if num > 1 else float(start)
                    for k in range(num)]
        if ints and all(float(v).is_integer() for v in vals):
            vals = [int(v) for v in vals]
        return vals, None, log
    if log:
        raise InputError(f"{key}.log", "a log range takes num, not step")
    step = spec["step"]
    if not is_real(step) or not math.isfinite(float(step)) or step == 0:
        raise InputError(f"{key}.step", f"must be a non-zero finite number, got {step!r}")
    if (stop - start) * step < 0:
        raise InputError(f"{key}.step", f"goes the wrong way from {start!r} to {stop!r}, got {step!r}")
    n = math.floor((float(stop) - float(start)) / float(step) + 1e-9) + 1
    if n > max_values:
        raise InputError(f"{key}.step", f"makes {n} values, more than {max_values}")
    if ints and isinstance(step, numbers.Integral):
        return [int(start) + k * int(step) for k in range(n)], None, False
    return [_clean(float(start) + k * float(step)) for k in range(n)], None, False


def is_range_spec(v: dict) -> bool:
    """Whether a table is a range table (start/stop/num/step/log) or a values table -- not a nested path such as
    ``[sweep.strategies.1] start = [0, 5]`` (a strategy parameter named ``start``).

    Parameters
    ----------
    v : dict
        A table found under ``[sweep]`` (or another table that takes ranges).

    Returns
    -------
    bool
        True when ``v`` has a list under ``values``, or has ``start`` or ``stop`` and neither is a list or table.
    """
    if "values" in v and isinstance(v["values"], list):
        return True
    ends = [v[k] for k in ("start", "stop") if k in v]
    return bool(ends) and all(not isinstance(x, list | dict) for x in ends)
