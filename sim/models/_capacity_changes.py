"""Capacity changes in mergers and their effect on collusion in capacity-constrained price games.

* :func:`merge_capacities`: the merging firms become one firm with the sum of their capacities.
* :func:`move_capacity`: capacity moves from one firm to another (a transfer), to a named firm or to
  a new entrant (a divestiture).
* :func:`compare_capacity_change`: the critical discount factors before and after, the binding firm
  before and after, and the capacity distribution's symmetry.

Symmetry. Compte, Jenny and Rey (2002, "Capacity constraints, mergers and collusion", European
Economic Review 46(1)) show that with inelastic demand, when the rivals of the largest firm cannot
serve the market on their own, the critical discount factor is the largest firm's share of total
capacity (its capacity divided by the total, with the demand in place of the capacity when the
largest firm alone could serve the market): what matters is how large the largest firm is, not the
HHI. A merger or a transfer that makes capacities more alike can therefore make collusion easier.
Reported: the largest firm's capacity share, its equal-split benchmark ``1 / n``, and the rivals'
capacity relative to demand at the agreed price (below one: the rivals of the largest firm cannot
serve the market, and its punishment is capped by its residual monopoly).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.text import CAUTION
from sim.models._capacity_collusion import CollusionAnalysis

__all__ = ["CapacityChange", "capacity_symmetry", "compare_capacity_change", "firm_index"]


def firm_index(names, firm, key: str) -> int:
    """Index (0-based) of a firm given by number or name.

    Parameters
    ----------
    names : sequence of str
        The firms' names.
    firm : int or str
        A firm number (1, 2, ...) or name.
    key : str
        Key path named in the error.

    Returns
    -------
    int
    """
    if isinstance(firm, str):
        if firm not in names:
            raise InputError(key, f"no firm is named {firm!r}; firms: {', '.join(names)}")
        return list(names).index(firm)
    if isinstance(firm, bool) or not isinstance(firm, int | np.integer) or not 1 <= int(firm) <= len(names):
        raise InputError(key, f"must be a firm number 1 to {len(names)} or a firm name, got {firm!r}")
    return int(firm) - 1


def capacity_symmetry(capacity, demand: float) -> dict:
    """The capacity-distribution measures that matter for collusion (see the module notes).

    Parameters
    ----------
    capacity : array_like of shape (n_firms,)
    demand : float
        Quantity demanded at the agreed price.

    Returns
    -------
    dict
        ``largest_share`` (largest capacity / total), ``equal_share`` (1 / n), ``rivals_cover`` (total
        capacity of the largest firm's rivals / demand), ``capacity_hhi`` (HHI of capacity shares,
        0-10000, for comparison only).
    """
    k = np.asarray(capacity, dtype=float)
    K = float(k.sum())
    s = k / K
    return {"largest_share": float(k.max() / K), "equal_share": 1.0 / k.size,
            "rivals_cover": float((K - k.max()) / demand) if demand > 0 else math.inf,
            "capacity_hhi": float(10_000.0 * (s * s).sum())}


@dataclass(frozen=True)
class CapacityChange:
    """Collusion before and after a change in capacities.

    Attributes
    ----------
    description : str
    before, after : CollusionAnalysis
    symmetry_before, symmetry_after : dict
        See :func:`capacity_symmetry`.
    binding_before, binding_after : str
        Name of the binding firm under Nash reversion.
    binding_changed : bool
    grim_change, harshest_change : float
        Market threshold after minus before (negative: collusion becomes easier).
    """

    description: str
    before: CollusionAnalysis
    after: CollusionAnalysis
    symmetry_before: dict
    symmetry_after: dict
    binding_before: str
    binding_after: str
    binding_changed: bool
    grim_change: float
    harshest_change: float

    @property
    def easier(self) -> bool:
        """True when the market's Nash-reversion threshold falls.

        Returns
        -------
        bool
        """
        return bool(self.grim_change < 0)

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        none = lambda x: None if not math.isfinite(x) else float(x)  # noqa: E731
        return {"description": self.description, "before": self.before.to_dict(), "after": self.after.to_dict(),
                "symmetry_before": dict(self.symmetry_before), "symmetry_after": dict(self.symmetry_after),
                "binding_before": self.binding_before, "binding_after": self.binding_after,
                "binding_changed": self.binding_changed, "grim_change": none(self.grim_change),
                "harshest_change": none(self.harshest_change), "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> CapacityChange:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        CapacityChange
        """
        nan = lambda x: math.nan if x is None else float(x)  # noqa: E731
        return cls(d["description"], CollusionAnalysis.from_dict(d["before"]), CollusionAnalysis.from_dict(d["after"]),
                   dict(d["symmetry_before"]), dict(d["symmetry_after"]), d["binding_before"], d["binding_after"],
                   bool(d["binding_changed"]), nan(d["grim_change"]), nan(d["harshest_change"]))


def compare_capacity_change(before: CollusionAnalysis, after: CollusionAnalysis, description: str) -> CapacityChange:
    """Compare the collusion analyses before and after a capacity change.

    Parameters
    ----------
    before, after : CollusionAnalysis
    description : str

    Returns
    -------
    CapacityChange
    """
    d0 = float(before.agreement.quantities.sum())
    d1 = float(after.agreement.quantities.sum())
    b0, b1 = before.names[before.grim_binding], after.names[after.grim_binding]
    return CapacityChange(description, before, after, capacity_symmetry(before.capacity, d0),
                          capacity_symmetry(after.capacity, d1), b0, b1, b0 != b1,
                          after.grim_market - before.grim_market, after.harshest_market - before.harshest_market)
