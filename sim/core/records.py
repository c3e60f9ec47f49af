"""Result objects as plain data: a dataclass and its JSON document, both ways.

Every analysis returns a result object that is plain data -- numbers, strings, lists, arrays, nested results --
so that the same object can be printed by a command, stored with a cell of a run, read back from the run folder
and drawn in a bundle. :class:`Record` gives a frozen or plain dataclass ``to_dict()`` and ``from_dict()`` built
from its field annotations:

* ``numpy.ndarray`` fields become (nested) lists of floats; JSON has no ``nan`` or infinity, so ``nan`` is
  stored as ``None`` and an infinite value as the string ``"inf"`` or ``"-inf"``, both restored on the way back;
* nested records, lists and tuples of records, and dicts of plain data are followed;
* a field annotated ``float`` accepts ``None`` in the document and holds ``nan``.

The document of a record is what the run store keeps for each cell; ``from_dict(json.loads(json.dumps(
r.to_dict()))).to_dict() == r.to_dict()`` holds for every result class (a test checks each).
"""

from __future__ import annotations

import dataclasses
import math
import types
import typing
from typing import Any

import numpy as np

from sim.core.views import view_of

__all__ = ["Record", "from_plain", "to_plain"]


def to_plain(value: Any) -> Any:
    """``value`` as JSON data (see the module notes).

    Parameters
    ----------
    value : any
        A record (or any object with ``to_dict`` whose class has ``from_dict``), array, number, string, None, or
        a list, tuple or dict of these.

    Returns
    -------
    object
        Plain JSON data: dict, list, str, int, float (finite), bool or None.
    """
    if isinstance(value, Record) or (hasattr(value, "to_dict") and hasattr(type(value), "from_dict")):
        return value.to_dict()
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, np.ndarray):
        return to_plain(value.tolist())
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        x = float(value)
        if math.isnan(x):
            return None
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        return x
    if isinstance(value, dict):
        return {str(k): to_plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_plain(v) for v in value]
    if value is None or isinstance(value, str):
        return value
    raise TypeError(f"cannot store {type(value).__name__} in a result document: {value!r}")


def _number(x: Any) -> Any:
    if x is None:
        return math.nan
    if x == "inf":
        return math.inf
    if x == "-inf":
        return -math.inf
    return x


def _array(data: Any, dtype) -> np.ndarray:
    def fix(v):
        if isinstance(v, list):
            return [fix(u) for u in v]
        return _number(v)

    return np.asarray(fix(data), dtype=dtype)


def from_plain(tp: Any, data: Any) -> Any:
    """The value of type ``tp`` that :func:`to_plain` turned into ``data``.

    Parameters
    ----------
    tp : type or typing annotation
        The declared type (a Record subclass, ``numpy.ndarray``, ``float``, ``list[X]``, ``tuple[X, ...]``,
        ``dict[str, X]``, ``X | None``, ...).
    data : object
        Plain JSON data.

    Returns
    -------
    object
    """
    if data is None and tp is not float:
        return None
    origin = typing.get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        return from_plain(args[0], data) if len(args) == 1 else data
    if isinstance(tp, type) and (issubclass(tp, Record) or hasattr(tp, "from_dict")):
        return tp.from_dict(data)
    if tp is np.ndarray:
        return _array(data, float)
    if tp is float:
        return float(_number(data))
    if tp is int:
        return int(data)
    if origin in (list, tuple):
        args = typing.get_args(tp)
        item = args[0] if args else Any
        out = [from_plain(item, v) for v in data]
        return tuple(out) if origin is tuple else out
    if origin is dict:
        args = typing.get_args(tp)
        item = args[1] if len(args) == 2 else Any
        return {k: from_plain(item, v) for k, v in data.items()}
    return data


class Record:
    """Mixin for result dataclasses: ``to_dict()`` and ``from_dict()`` (see the module notes)."""

    def to_dict(self) -> dict:
        """The record as plain JSON data.

        Returns
        -------
        dict
        """
        return {f.name: to_plain(getattr(self, f.name)) for f in dataclasses.fields(self)}

    @classmethod
    def from_dict(cls, doc: dict):
        """The record that :meth:`to_dict` turned into ``doc``.

        Parameters
        ----------
        doc : dict
            Plain JSON data.

        Returns
        -------
        Record
            An instance of the class it is called on.
        """
        hints = typing.get_type_hints(cls)
        kw = {}
        for f in dataclasses.fields(cls):
            if f.name in doc:
                kw[f.name] = from_plain(hints.get(f.name, Any), doc[f.name])
        return cls(**kw)

    def _repr_html_(self) -> str | None:
        """The result as an HTML table in a notebook (None, Jupyter's plain display, when it has no view).

        Returns
        -------
        str or None
        """
        v = view_of(self)
        return None if v is None else v.html(self)

    def to_frame(self):
        """The result's numbers as a table: one row per number with its label, value, unit, interval and key.

        Returns
        -------
        pandas.DataFrame
            Columns ``label``, ``value``, ``unit``, ``low``, ``high`` (the interval where there is one) and
            ``key`` (the stored name, last).

        Raises
        ------
        TypeError
            When the result's class has no view.
        """
        v = view_of(self)
        if v is None:
            raise TypeError(f"{type(self).__name__} has no table view")
        return v.frame(self)
