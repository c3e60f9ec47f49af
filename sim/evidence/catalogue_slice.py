"""Catalogue entries of the symmetric slice of the any-punishment payoff set, three firms or more (see
:mod:`sim.evidence.catalogue`, which turns each tuple into an ``Entry``: label, unit, definition, method with its
source).
"""

from __future__ import annotations

__all__ = ["SLICE_ENTRIES"]

_SLICE = ("the smallest or largest t with (t, ..., t) in the convex hull of the full set's vertices (not of its "
          "projection on two firms), a linear programme (HiGHS); the set at the reported discount factor on the "
          "action grid, bracketed between inner (self-generating) and outer sets of the operator of Abreu, Pearce and "
          "Stacchetti (1990, Econometrica 58(5)), the outer one by supporting hyperplanes in fixed directions (Judd, "
          "Yeltekin and Conklin, 2003, Econometrica 71(4))")

#: metric stems: stem -> (label, unit, definition, method)
SLICE_ENTRIES: dict[str, tuple] = {
    "any_punishment.symmetric_slice.min_outer": (
        "lowest equal profit of an equilibrium, lower end", "{money}",
        "The lowest profit t such that every firm earning t may be an equilibrium outcome at the payoff set's "
        "discount factor (outer set: bound from below).", _SLICE),
    "any_punishment.symmetric_slice.min_inner": (
        "lowest equal profit of an equilibrium, upper end", "{money}",
        "The lowest profit t such that every firm earning t is a constructed equilibrium outcome at the payoff set's "
        "discount factor (inner set: bound from above).", _SLICE),
    "any_punishment.symmetric_slice.max_inner": (
        "highest equal profit of an equilibrium, lower end", "{money}",
        "The highest profit t such that every firm earning t is a constructed equilibrium outcome at the payoff "
        "set's discount factor (inner set: bound from below).", _SLICE),
    "any_punishment.symmetric_slice.max_outer": (
        "highest equal profit of an equilibrium, upper end", "{money}",
        "The highest profit t such that every firm earning t may be an equilibrium outcome at the payoff set's "
        "discount factor (outer set: bound from above).", _SLICE),
}
