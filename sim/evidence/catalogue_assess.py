"""Catalogue entries of the assessment's payoff-set comparison, its growth row and its multimarket-contact row (see
:mod:`sim.evidence.catalogue`, which turns each tuple into an ``Entry``: label, unit, definition, method with its
source).
"""

from __future__ import annotations

__all__ = ["ASSESS_ENTRIES"]

_SETS = ("equilibrium payoffs at the assessment's discount factor on the action grid, bracketed between the inner set "
         "(constructed equilibria) and the outer set (every equilibrium payoff) of the operator of Abreu, Pearce and "
         "Stacchetti (1990, Econometrica 58(5)); two firms: exact images after Abreu and Sannikov (2014, Theoretical "
         "Economics 9); more firms: Judd, Yeltekin and Conklin (2003, Econometrica 71(4))")
_SLICE = ("the smallest or largest t with (t, ..., t) in the convex hull of the set's vertices, a linear programme "
          "(HiGHS); " + _SETS)
_GROWTH = ("threshold without growth / (1 + g): profits growing at rate g make the effective discount factor delta "
           "(1 + g); for grim trigger (pi_D - pi_C) / ((pi_D - pi_N)(1 + g)) (Ivaldi, Jullien, Rey, Seabright and "
           "Tirole, 2003, The Economics of Tacit Collusion, section III.6; cycles: Haltiwanger and Harrington, 1991, "
           "RAND 22(1))")
_POOLED = ("largest over the assessed market's firms of the smallest delta with sum over the firm's markets of "
           "beta_m / (1 - beta_m) (pi_C - pi_N) - (pi_D - pi_C) >= 0 (Bernheim and Whinston, 1990, RAND 21(1))")

#: metric and value stems: stem -> (label, unit, definition, method)
ASSESS_ENTRIES: dict[str, tuple] = {
    "best_joint_profit.inner": ("best joint profit of an equilibrium, lower end", "{money}",
                                "The largest sum of the firms' discounted average profits over the constructed "
                                "equilibria (the best joint profit is at least this).", _SETS),
    "best_joint_profit.outer": ("best joint profit of an equilibrium, upper end", "{money}",
                                "The largest sum of the firms' profits over the outer set (the best joint profit is at "
                                "most this).", _SETS),
    "symmetric_slice.min_outer": ("lowest equal profit of an equilibrium, lower end", "{money}",
                                  "The lowest profit t such that every firm earning t may be an equilibrium outcome "
                                  "(outer set: bound from below).", _SLICE),
    "symmetric_slice.min_inner": ("lowest equal profit of an equilibrium, upper end", "{money}",
                                  "The lowest profit t such that every firm earning t is a constructed equilibrium "
                                  "outcome (inner set: bound from above).", _SLICE),
    "symmetric_slice.max_inner": ("highest equal profit of an equilibrium, lower end", "{money}",
                                  "The highest profit t such that every firm earning t is a constructed equilibrium "
                                  "outcome (inner set: bound from below).", _SLICE),
    "symmetric_slice.max_outer": ("highest equal profit of an equilibrium, upper end", "{money}",
                                  "The highest profit t such that every firm earning t may be an equilibrium outcome "
                                  "(outer set: bound from above).", _SLICE),
    "growth.threshold_with_growth": ("critical discount factor with demand growth", "",
                                     "The headline scheme's critical discount factor when every stage profit grows "
                                     "(g > 0) or declines (g < 0) at the stated rate g per period.", _GROWTH),
    "growth.change_with_growth": ("change of the critical discount factor with demand growth", "",
                                  "Threshold with the stated growth minus the threshold without growth (positive: "
                                  "collusion is harder).", _GROWTH),
    "contact.alone": ("critical discount factor of the assessed market on its own", "",
                      "The lowest discount factor at which grim trigger sustains the agreement in the assessed market "
                      "with no other market.", "(pi_D - pi_C) / (pi_D - pi_N), largest over firms (Friedman, 1971)"),
    "contact.pooled": ("critical discount factor of the assessed market with multimarket contact", "",
                       "The lowest discount factor at which every firm of the assessed market keeps the agreement "
                       "when its incentive constraints are pooled over every market it sells in.", _POOLED),
    "contact.merging.pooled": ("pooled critical discount factor of a merging firm", "",
                               "The lowest discount factor at which the firm keeps the agreement in every market it "
                               "sells in, its constraints pooled.", _POOLED),
}
