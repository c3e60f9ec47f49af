"""What the catalogue needs to know of a run to label and show its numbers: the names of its firms and products
(for stored names such as ``threshold.grim.after.firm2`` or ``price_change.product1``), and which numbers are whole
(counts, firm numbers, yes/no) so that tables show them without decimals."""

from __future__ import annotations

import re

from sim.evidence.catalogue import ENTRIES, describe

__all__ = ["WHOLE_UNITS", "key_names", "whole_number"]

#: units whose numbers are whole (counts, firm numbers, yes/no), and stems whose unit is not but whose numbers are
WHOLE_UNITS = frozenset({"count", "firm number", "firms", "yes (1) / no (0)"})
_WHOLE_STEMS = ("n_firms", "punishment", "market.n_firms")
_AFTER = re.compile(r"\.after(?=\.|$|\[)")
_BEFORE = re.compile(r"\.before(?=\.|$|\[)")
_BOUNDS = re.compile(r"\.(se|low|high)$")


def key_names(key: str, names: dict | None) -> dict:
    """The firm and product names that label a stored metric name: those after a merger for a key of the market
    after it, else those before.

    Parameters
    ----------
    key : str
    names : dict or None
        ``before`` and ``after`` (firm names, either may be None) and ``products`` (product names or None).

    Returns
    -------
    dict
        ``firm_names`` and ``product_names`` for :func:`sim.evidence.catalogue.describe` (empty without names).
    """
    if not names:
        return {}
    after = _AFTER.search(key)
    # the first side named decides (as in the catalogue's labels)
    after = after is not None and (_BEFORE.search(key) is None or after.start() < _BEFORE.search(key).start())
    firms = names["after"] if after and names.get("after") is not None else names.get("before")
    return {"firm_names": firms, "product_names": names.get("products")}


def whole_number(key: str) -> bool:
    """Whether a stored metric's numbers are whole (a count, a firm's number, a yes/no, a number of periods that is
    a setting): a table shows them without decimals.

    Parameters
    ----------
    key : str
        A stored metric name.

    Returns
    -------
    bool
    """
    try:
        entry = describe(_BOUNDS.sub("", key)).entry
    except KeyError:
        return False
    return entry.unit in WHOLE_UNITS or any(entry is ENTRIES.get(s) for s in _WHOLE_STEMS)
