"""JSON helpers: numpy values and non-finite floats become plain JSON (``nan`` and ``inf`` -> null)."""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np


def jsonable(obj: Any) -> Any:
    """Convert ``obj`` into JSON-serialisable plain Python, mapping nan and inf to None."""
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
    """``json.dumps`` of :func:`jsonable` output, strict about non-finite numbers."""
    return json.dumps(jsonable(obj), allow_nan=False, **kw)
