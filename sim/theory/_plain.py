"""Plain-data helpers shared by the result objects of the theory layer (JSON: lists, floats, None)."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["array_from_plain", "number", "plain", "plain_number"]


def plain(a) -> list:
    """A float array as nested lists with ``None`` for non-finite entries.

    Parameters
    ----------
    a : array_like

    Returns
    -------
    list
    """
    x = np.asarray(a, dtype=float)
    if x.ndim == 0:
        return plain_number(float(x))
    return [plain(row) if x.ndim > 1 else plain_number(float(row)) for row in x]


def plain_number(x) -> float | None:
    """``float(x)``, or None when it is not finite (or None)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def number(x, missing: float = float("nan")) -> float:
    """Inverse of :func:`plain_number`: None becomes ``missing``."""
    return missing if x is None else float(x)


def array_from_plain(x, width: int | None = None, dtype=float) -> np.ndarray:
    """Inverse of :func:`plain`: nested lists (None for nan) to an array; an empty list becomes an
    array of shape (0, width) when ``width`` is given.

    Parameters
    ----------
    x : list
    width : int, optional
    dtype : numpy dtype

    Returns
    -------
    ndarray
    """

    def conv(v):
        if isinstance(v, list):
            return [conv(e) for e in v]
        return np.nan if v is None else v

    a = np.array(conv(list(x or [])), dtype=dtype)
    if width is not None and a.size == 0:
        a = a.reshape(0, width)
    return a
