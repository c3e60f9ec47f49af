"""How a result object shows itself in a notebook: a registry of views.

Every result (:class:`sim.core.records.Record`) has ``_repr_html_()`` (Jupyter's rich display) and ``to_frame()``
(a pandas DataFrame). Both look the result's class up here. The views themselves -- labels and units from the
evidence catalogue, the caution -- belong to the evidence layer, which the layers below may not import; so the
evidence layer registers them (:func:`register_view`, keyed by the class's qualified name so that registering
imports no result class), and the package root names the module that does it (:func:`add_provider`), imported on
the first lookup. A class without a view shows its plain ``repr`` and refuses ``to_frame``.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

__all__ = ["View", "add_provider", "register_view", "view_of"]


@dataclass(frozen=True)
class View:
    """How one result type shows itself.

    Attributes
    ----------
    html : callable
        ``html(result) -> str``: an HTML fragment (escaped text, one table, the caution).
    frame : callable
        ``frame(result) -> pandas.DataFrame``: one row per number.
    """

    html: Callable[[Any], str]
    frame: Callable[[Any], Any]


_VIEWS: dict[str, View] = {}
_PROVIDERS: list[str] = []


def _name(cls) -> str:
    return f"{cls.__module__}.{cls.__qualname__}"


def register_view(result_type, html: Callable[[Any], str], frame: Callable[[Any], Any]) -> None:
    """Show instances of ``result_type`` (and its subclasses) with ``html`` and ``frame``.

    Parameters
    ----------
    result_type : type or str
        The class, or its qualified name (``"sim.theory.analysis.ThresholdsResult"``).
    html : callable
        ``html(result) -> str``.
    frame : callable
        ``frame(result) -> pandas.DataFrame``.
    """
    key = result_type if isinstance(result_type, str) else _name(result_type)
    _VIEWS[key] = View(html, frame)


def add_provider(module: str) -> None:
    """Name a module that registers views when it is imported (imported on the first lookup).

    Parameters
    ----------
    module : str
        A dotted module name.
    """
    if module not in _PROVIDERS:
        _PROVIDERS.append(module)


def view_of(obj) -> View | None:
    """The view of ``obj``'s class or of its nearest base class that has one.

    Parameters
    ----------
    obj : object

    Returns
    -------
    View or None
    """
    while _PROVIDERS:
        importlib.import_module(_PROVIDERS.pop(0))
    for cls in type(obj).__mro__:
        v = _VIEWS.get(_name(cls))
        if v is not None:
            return v
    return None
