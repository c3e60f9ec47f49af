"""Catalogue entries of the symmetric slice of the any-punishment payoff set, three firms or more (see
:mod:`sim.evidence.catalogue`, which turns each tuple into an ``Entry``: label, unit, definition, method with its
source).
"""

from __future__ import annotations

__all__ = ["FRONTIER_ENTRIES", "REFINE_ENTRIES", "SLICE_ENTRIES"]

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

_REFINE = ("the any-punishment question answered again on a grid of this many actions per firm "
           "(sim.theory.refinement.grid_refinement): the lowest discount factor by bisection on the bracketed payoff "
           "sets of Abreu, Pearce and Stacchetti (1990), the named schemes on the same grid")

#: the refinement table (``[any_punishment] refine``), one column per grid ``[k]``: stem -> (label, unit, definition,
#: method)
REFINE_ENTRIES: dict[str, tuple] = {
    "any_punishment.refine.actions": (
        "actions per firm of the refined grid", "count",
        "The number of actions per firm on the k-th grid of the refinement table.", _REFINE),
    "any_punishment.refine.threshold.lower": (
        "lowest critical discount factor under any punishment on the refined grid, lower end", "0 to 1",
        "Below this discount factor the agreement is no equilibrium outcome on the k-th grid (outer sets).", _REFINE),
    "any_punishment.refine.threshold.upper": (
        "lowest critical discount factor under any punishment on the refined grid, upper end", "0 to 1",
        "At this discount factor an equilibrium sustaining the agreement on the k-th grid was constructed (inner "
        "sets).", _REFINE),
    "any_punishment.refine.grim": (
        "critical discount factor of grim trigger on the refined grid", "0 to 1",
        "Grim trigger's critical discount factor for the agreement on the k-th grid.", _REFINE),
    "any_punishment.refine.stick_carrot": (
        "critical discount factor of the best stick and carrot on the refined grid", "0 to 1",
        "The best symmetric stick and carrot's critical discount factor on the k-th grid.", _REFINE),
    "any_punishment.refine.accuracy": (
        "accuracy of the payoff sets on the refined grid", "{money}",
        "Hausdorff distance between the inner and outer payoff sets at the reported discount factor on the k-th "
        "grid.", _REFINE),
}

_FRONTIER = ("the largest sum of the firms' payoffs, or the largest payoff of one firm, over the vertices of the inner "
             "set (equilibrium payoffs, self-generating in the sense of Abreu, Pearce and Stacchetti, 1990, "
             "Econometrica 58(5)) and of the outer set (supporting hyperplanes, Judd, Yeltekin and Conklin, 2003, "
             "Econometrica 71(4); exact images for two firms) at the reported discount factor on the action grid "
             "(sim.theory.practice.sustainable_frontier); a linear function's maximum over a convex hull is attained "
             "at a vertex")

#: the frontier of sustainable profits at the reported discount factor: stem -> (label, unit, definition, method);
#: the best payoffs carry the firm qualifier (``.firmN``)
FRONTIER_ENTRIES: dict[str, tuple] = {
    "any_punishment.best_joint.lower": (
        "best joint profit of an equilibrium, lower end", "{money}",
        "The highest joint profit per period (sum over firms, discounted average) of a constructed equilibrium at "
        "the payoff set's discount factor: the best joint profit attainable is at least this (inner set).",
        _FRONTIER),
    "any_punishment.best_joint.upper": (
        "best joint profit of an equilibrium, upper end", "{money}",
        "No equilibrium at the payoff set's discount factor gives a higher joint profit per period (outer set).",
        _FRONTIER),
    "any_punishment.best_profit.lower": (
        "best equilibrium payoff of the firm, lower end", "{money}",
        "The firm's highest payoff per period in a constructed equilibrium at the payoff set's discount factor "
        "(inner set): the most profitable asymmetric outcome for that firm is at least this.", _FRONTIER),
    "any_punishment.best_profit.upper": (
        "best equilibrium payoff of the firm, upper end", "{money}",
        "No equilibrium at the payoff set's discount factor gives the firm more per period (outer set).", _FRONTIER),
    "any_punishment.best_equal_profit.lower": (
        "best equal profit of an equilibrium, lower end", "{money}",
        "Two firms: the highest profit t such that both firms earning t is a constructed equilibrium outcome at the "
        "payoff set's discount factor (inner set), the most profitable symmetric outcome at least.", _SLICE),
    "any_punishment.best_equal_profit.upper": (
        "best equal profit of an equilibrium, upper end", "{money}",
        "Two firms: no equilibrium at the payoff set's discount factor gives both firms an equal profit above this "
        "(outer set).", _SLICE),
}
