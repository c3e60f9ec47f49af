"""Catalogue entries of learning with demand shocks: the response of learners to one adverse demand draw
(:mod:`sim.learning.shock_response`), stem -> (label, unit, definition, method, interval); and the settings of the
shock (:mod:`sim.learning.shocks`), key path -> (label, unit, definition, method)."""

from __future__ import annotations

__all__ = ["SHOCK_ENTRIES", "SHOCK_PARAMETERS"]

_WILSON = "Wilson score interval (Wilson, 1927, JASA 22)"
_MEAN = "normal approximation across independent sessions (mean +- z s / sqrt(n))"
_PATHS = ("each converged session learns on from its final state twice, from the same random numbers: with the first "
          "period's demand shock forced to the stated adverse value and without; price wars after adverse demand "
          "shocks as in Calvano, Calzolari, Denicolo and Pastorello (2021, International Journal of Industrial "
          "Organization 79), after Green and Porter (1984, Econometrica 52(1))")

SHOCK_ENTRIES = {
    "price_war_share": ("share of sessions with a price war after an adverse demand draw", "0 to 1",
                        "Share of converged sessions in which the mean price over firms with the adverse draw falls "
                        "below the mean price without it in at least one period after the draw.", _PATHS, _WILSON),
    "shock_price_change": ("change of the price after an adverse demand draw", "price",
                           "Mean over sessions of the mean price over firms with the adverse draw minus the mean "
                           "price without it, period by period after the draw.", _PATHS, _MEAN),
}

SHOCK_PARAMETERS = {
    "learning.demand_sigma": ("standard deviation of the demand shock during learning", "",
                              "Standard deviation of the mean-one shock that scales every firm's profit each period of "
                              "learning (0: none); the learners learn from the realised profits.",
                              "given; demand shocks with Q-learners after Calvano, Calzolari, Denicolo and Pastorello "
                              "(2021, International Journal of Industrial Organization 79)"),
    "learning.demand_noise": ("distribution of the demand shock during learning", "",
                              "lognormal exp(sigma Z - sigma^2/2) or normal 1 + sigma Z (floored at 0), Z standard "
                              "normal; both of mean one.", "given"),
}
