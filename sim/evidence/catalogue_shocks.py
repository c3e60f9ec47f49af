"""Catalogue entries of learning with demand shocks: the response of learners to one adverse demand draw
(:mod:`sim.learning.shock_response`), stem -> (label, unit, definition, method, interval); and the settings of the
shock (:mod:`sim.learning.shocks`), key path -> (label, unit, definition, method)."""

from __future__ import annotations

__all__ = ["SHOCK_ENTRIES", "SHOCK_PARAMETERS"]

_WILSON = "Wilson score interval (Wilson, 1927, JASA 22)"
_MEAN = "Student's t interval across independent sessions (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
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

_SIGNAL = ("as for price_war_share, under the run's protocol: learners that see past prices, or their own price and a "
           "low-profit signal (learning.observe = 'own_profit', sim.learning.signals); the draw lies three standard "
           "deviations of "
           "log theta below its median; temporary price wars after Green and Porter (1984, Econometrica 52(1)) and "
           "Calvano, Calzolari, Denicolo and Pastorello (2021, International Journal of Industrial Organization 79)")

SHOCK_ENTRIES.update({
    "price_cut_share": ("share of sessions that cut prices right after an adverse demand draw", "0 to 1",
                        "Share of converged sessions whose mean price over firms with the adverse draw is below the "
                        "mean price without it in period 2, the first period whose prices can react to the draw.",
                        _SIGNAL, _WILSON),
    "temporary_cut_share": ("share of sessions with a price war that ends", "0 to 1",
                            "Share of converged sessions that cut prices in period 2 after the adverse draw and whose "
                            "prices are those without the draw again in the last 4 periods followed (20 in all).",
                            _SIGNAL, _WILSON),
    "price_cut_depth": ("depth of the price cut after an adverse demand draw", "price",
                        "Mean, over the sessions that cut prices in period 2, of the change of the mean price over "
                        "firms in that period (with the draw minus without; negative: a cut).", _SIGNAL, _MEAN),
    "price_war_length": ("length of a price war that ends", "periods",
                         "Mean, over the sessions with a price war that ends, of the periods from period 2 to the "
                         "last period whose prices differ from those without the draw, both counted.", _SIGNAL,
                         _MEAN),
})

_ERROR_PLAY = ("after learning with noisy prices (learning.observe = 'noisy_prices'), each converged session's "
               "learned strategies play greedily from its final state for 10,000 periods, every learner seeing its "
               "rivals' prices with the error of learning; no learning, exploration or demand shock "
               "(sim.learning.noisy_prices.error_play); imperfect monitoring after Stigler (1964, JPE 72) and Green "
               "and Porter (1984, Econometrica 52(1))")

SHOCK_ENTRIES.update({
    "error_play_profit_gain": ("profit gain in play with error after learning", "share of the gain",
                               "Mean over sessions of (sum of the firms' mean profits over the periods of play with "
                               "error - sum of static Nash profits) / (sum of joint-profit profits - sum of static "
                               "Nash profits).", _ERROR_PLAY, _MEAN),
    "error_play_gain_change": ("change of the profit gain that the error causes after learning",
                               "share of the gain",
                               "Mean over sessions of the profit gain in play with error minus the same session's "
                               "limit profit gain without error (negative: the error costs collusion).", _ERROR_PLAY,
                               _MEAN),
    "error_play_price": ("mean price in play with error after learning", "price",
                         "Mean over sessions of the firm's mean price over the periods of play with error.",
                         _ERROR_PLAY, _MEAN),
})

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
SHOCK_PARAMETERS.update({
    "learning.observe": ("what the learners observe", "",
                         "'prices': the last periods' prices (the state of Calvano et al., 2020); 'own_profit': the "
                         "own last price and whether the own profit fell below the signal band of the profit at "
                         "the symmetric prices; 'noisy_prices': the own last price and the rivals' as seen with a "
                         "normal error.", "given; sim.learning.signals, sim.learning.noisy_prices"),
    "learning.signal_band": ("band of the low-profit signal", "0 to 1",
                             "A profit more than this share below the profit at the symmetric prices is low.",
                             "given; sim.learning.signals"),
    "learning.price_noise": ("error of a seen price", "grid steps",
                             "Standard deviation of the normal error with which a learner sees each rival's last "
                             "price, rounded to the nearest grid price (each learner its own draws).",
                             "given; imperfect monitoring after Stigler (1964) and Green and Porter (1984); "
                             "sim.learning.noisy_prices"),
})
