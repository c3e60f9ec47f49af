"""JSON helpers: numpy values and non-finite floats become plain JSON (``nan`` and ``inf`` -> null)."""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np


def jsonable(obj: Any) -> Any:
    """Convert ``obj`` into JSON-serialisable plain Python, mapping nan and inf to None.

    Parameters
    ----------
    obj : object
        A value to write as JSON: dicts, lists and tuples are walked into; numpy arrays, booleans,
        integers and floats become their Python equivalents; anything else is returned unchanged.

    Returns
    -------
    object
        The same value as plain dicts (with string keys), lists, bools, ints, floats and None.
    """
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, np.bool_ | bool):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        x = float(obj)
        return x if math.isfinite(x) else None
    return obj


def dumps(obj: Any, **kw: Any) -> str:
    """``json.dumps`` of :func:`jsonable` output, strict about non-finite numbers.

    Parameters
    ----------
    obj : object
        The value to write; numpy values and non-finite floats are converted by :func:`jsonable` first.
    **kw
        Passed on to :func:`json.dumps` (``indent``, ``sort_keys``, ...).

    Returns
    -------
    str
        The JSON text.
    """
    return json.dumps(jsonable(obj), allow_nan=False, **kw)
