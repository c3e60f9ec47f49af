"""Checks shared by every reader of experiment-file tables.

One function, so that every command words an unknown key the same way: ``table.key: unknown key;
allowed: a, b, c`` (the allowed keys in the order the reader declares them).
"""

from __future__ import annotations

from collections.abc import Iterable

from sim.core.errors import InputError

__all__ = ["refuse_unknown"]


def refuse_unknown(table, name: str, allowed: Iterable[str]) -> dict:
    """Return ``table`` after checking that it is a table whose keys are all in ``allowed``.

    Parameters
    ----------
    table : object
        What the experiment file (or the command line) gave for the table.
    name : str
        Key path of the table in error messages, e.g. ``"run"`` or ``"strategies[2]"``.
    allowed : iterable of str
        The keys the reader knows, in the order it lists them.

    Returns
    -------
    dict
        ``table`` itself, unchanged.

    Raises
    ------
    InputError
        ``name`` when ``table`` is not a table; ``name.key`` for the first unknown key.
    """
    if not isinstance(table, dict):
        raise InputError(name, f"must be a table, got {table!r}")
    allowed = tuple(allowed)
    for k in table:
        if k not in allowed:
            raise InputError(f"{name}.{k}", f"unknown key; allowed: {', '.join(allowed)}")
    return table
