"""Docstrings written once: an override documents its contract where the contract is defined.

A method that implements an interface (a demand model's :meth:`inverse_demand`, a strategy's
:meth:`states`, a constraint's :meth:`check`) takes the same arguments and returns the same kind of value
as the method it overrides. Its docstring says what it does differently -- its formula, its rule -- and
:func:`doc_sections` completes it with the Parameters, Returns and other numpydoc sections of the method
that defines the contract, so that the contract is written, and corrected, in one place.
"""

from __future__ import annotations

import inspect
import re
from collections.abc import Callable
from typing import TypeVar

__all__ = ["doc_sections"]

F = TypeVar("F", bound=Callable)

# a numpydoc section header: a title line underlined with dashes
_HEADER = re.compile(r"^\w[\w ]*\n-{3,}$", re.M)


def doc_sections(source: Callable) -> Callable[[F], F]:
    """Decorator: complete a function's docstring with the numpydoc sections of ``source``'s docstring.

    The decorated function keeps its own summary and extended description (it needs none: without a
    docstring of its own it takes ``source``'s whole docstring); everything from ``source``'s first section
    header on (Parameters, Returns, Raises, ...) is appended to it.

    Parameters
    ----------
    source : callable
        The function or method that defines the contract (usually the method being overridden).

    Returns
    -------
    callable
        A decorator that sets the docstring of the function it is given and returns that function.

    Raises
    ------
    ValueError
        ``source`` has no docstring with a numpydoc section.
    """
    doc = inspect.getdoc(source) or ""
    head = _HEADER.search(doc)
    if head is None:
        raise ValueError(f"{getattr(source, '__qualname__', source)!r} has no numpydoc section to share")
    sections = doc[head.start():]

    def apply(func: F) -> F:
        own = inspect.cleandoc(func.__doc__) if func.__doc__ else ""
        func.__doc__ = f"{own}\n\n{sections}" if own else doc
        return func

    return apply
