"""The catalogue of every number a reader sees: its label, unit, definition, method with its published source, and
interval method.

A metric's stored name (``threshold.grim.firm2``, ``collusive_share.low``, ``partial_gain.finite[1][2].after``,
``score.grim``) is a stem with qualifiers; :func:`describe` takes the qualifiers off -- the interval bounds and
standard error (``.low``, ``.high``, ``.se``), the analytic prediction (``analytic.``), the firm or product
(``.firmN``, ``.productN``), the side of a merger (``.before``, ``.after``), list positions (``[k]``), quantiles
(``.q05``) and a tournament entrant's label -- and builds the reader's label from the stem's entry. Swept
parameters (``run.delta``, ``monitoring.sigma``...) have entries too. Tables, figures, console lines and the
bundle's glossary are labelled from here; the glossary is the only place a stored name (its "key") appears.

Units: money is in the experiment's currency per period (``[experiment] currency`` and ``period``; "currency units
per period" when the file gives none).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from sim.evidence.catalogue_alternating import ALTERNATING_ENTRIES, ALTERNATING_PARAMETERS
from sim.evidence.catalogue_assess import ASSESS_ENTRIES
from sim.evidence.catalogue_conditions import CONDITION_ENTRIES, CONDITION_PARAMETERS
from sim.evidence.catalogue_contact_play import CONTACT_PLAY_ENTRIES
from sim.evidence.catalogue_enforced import ENFORCED_ENTRIES
from sim.evidence.catalogue_learned_events import LEARNED_EVENT_ENTRIES
from sim.evidence.catalogue_parameters import PARAMETER_ROWS
from sim.evidence.catalogue_shocks import SHOCK_ENTRIES, SHOCK_PARAMETERS
from sim.evidence.catalogue_slice import FRONTIER_ENTRIES, REFINE_ENTRIES, SLICE_ENTRIES
from sim.evidence.catalogue_state_play import STATE_PLAY_ENTRIES

__all__ = ["ENTRIES", "PARAMETERS", "Described", "Entry", "describe", "describe_parameter", "glossary", "money"]


#: the unit of a discounted sum of profits per period
_DISCOUNTED = "{currency} (discounted sum of profits per period)"


@dataclass(frozen=True)
class Entry:
    """One stem of the catalogue.

    Attributes
    ----------
    label : str
        What a reader calls it (lower case, no unit).
    unit : str
        Its unit; ``"{money}"`` stands for the currency per period, ``""`` for a pure number.
    definition : str
        One sentence.
    method : str
        The formula or method, with its published source (or "common practice" where there is none).
    interval : str
        How its interval is computed ("none" for exact or analytic numbers).
    """

    label: str
    unit: str
    definition: str
    method: str
    interval: str = "none (exact or analytic)"


_RATIO = ("ratio of totals across replications; interval: Wilson score interval with the design-effect sample size "
          "(Korn and Graubard, 1998, Survey Methodology 24(2)), which stays in [0, 1]")
_MEAN = "Student's t interval across independent replications (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
#: a mean per period that is not a share (prices, money, the profit gain): ratio of totals, normal interval
_RATIO_MEAN = ("ratio of totals across replications; interval: normal approximation with the delta-method standard "
               "error (Cochran, 1977, Sampling Techniques, section 6.4)")
_KM = ("Kaplan-Meier restricted mean with Greenwood's variance (Kaplan and Meier, 1958; Klein and Moeschberger, 2003, "
       "section 4.5), interval on the log scale, within [1, horizon]")
_WILSON = "Wilson score interval (Wilson, 1927, JASA 22)"
_SESSIONS = "Student's t interval across independent sessions (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
# a mean of per-session shares that are all 0 or 1 is a share of sessions (sim.learning.results._mean_ci)
_BINARY = "the " + _WILSON + " on the count of sessions when every session's value is 0 or 1"
_FRIEDMAN = ("delta* = (pi_D - pi_C) / (pi_D - pi_N), the smallest delta with pi_C / (1 - delta) >= pi_D + delta pi_N "
             "/ (1 - delta) (Friedman, 1971, Review of Economic Studies 38(1))")
_JYC = ("outer approximation by supporting hyperplanes in fixed directions (Judd, Yeltekin and Conklin, 2003, "
        "\"Computing supergame equilibria\", Econometrica 71(4))")
_SETS = ("equilibrium payoffs bracketed between inner (self-generating) and outer sets of the operator of Abreu, "
         "Pearce and Stacchetti (1990, Econometrica 58(5)); two firms: exact images after Abreu and Sannikov (2014, "
         "Theoretical Economics 9); more firms: Judd, Yeltekin and Conklin (2003, Econometrica 71(4))")
_PENAL = "value of the optimal penal code (Abreu, 1988, Econometrica 56(2)), read from the payoff sets: " + _SETS
_ANY = ("smallest delta with (1 - delta) (pi_D - pi_C) <= delta (pi_C - v(delta)) for every firm, v the worst "
        "equilibrium payoff (Abreu, 1988, Econometrica 56(2)); bisection on delta over payoff sets bracketed after "
        "Abreu, Pearce and Stacchetti (1990), Judd, Yeltekin and Conklin (2003) and Abreu and Sannikov (2014)")

ENTRIES: dict[str, Entry] = {
    # stage game and thresholds
    "n_firms": Entry("number of firms", "", "Firms in the market.", "given"),
    "profit.collusive": Entry("collusive profit", "{money}", "The firm's profit per period under the agreement.",
                              "stage game of the stated demand and costs"),
    "profit.deviation": Entry("deviation profit", "{money}",
                              "The firm's profit in the period of its best one-shot deviation from the agreement.",
                              "best response to the rivals' agreed actions"),
    "profit.nash": Entry("static-Nash profit", "{money}",
                         "The firm's profit per period in the static Nash equilibrium.",
                         "static Nash equilibrium of the stage game, certified by a global best-response search"),
    "threshold.grim": Entry("critical discount factor, grim trigger", "",
                            "The lowest discount factor at which no firm gains by deviating when a deviation is "
                            "punished by static Nash forever.", _FRIEDMAN),
    "threshold.finite": Entry("critical discount factor, Nash reversion for T periods", "",
                              "The lowest discount factor at which a deviation punished by T periods of static Nash "
                              "does not pay.",
                              "smallest delta with (pi_D - pi_C) <= sum_{t=1..T} delta^t (pi_C - pi_N) "
                              "(Friedman, 1971)"),
    "threshold.stick_carrot": Entry("critical discount factor, stick and carrot", "",
                                    "The lowest discount factor sustaining the agreement with the best symmetric "
                                    "one-period punishment followed by a return to the agreement.",
                                    "Abreu (1986), Journal of Economic Theory 39: both the collusion and the "
                                    "punishment incentive constraints, minimised over the punishment level"),
    "threshold": Entry("critical discount factor of the headline scheme", "",
                       "The market's critical discount factor under the assessment's punishment scheme.",
                       "as for the scheme (grim trigger: Friedman, 1971)"),
    "threshold.change": Entry("change of the critical discount factor", "",
                              "After minus before the merger; negative when the merger makes collusion easier.",
                              "difference of the two thresholds"),
    "binding.grim": Entry("binding firm, grim trigger", "firm number",
                          "The firm with the highest critical discount factor (the one that is hardest to hold).",
                          "largest per-firm threshold"),
    "binding.finite": Entry("binding firm, Nash reversion for T periods", "firm number",
                            "The firm with the highest critical discount factor.", "largest per-firm threshold"),
    "binding.stick_carrot": Entry("binding firm, stick and carrot", "firm number",
                                  "The firm with the highest critical discount factor.", "largest per-firm threshold"),
    "binding": Entry("binding firm", "firm number", "The firm with the highest critical discount factor.",
                     "largest per-firm threshold"),
    "tied_firms.grim": Entry("firms binding equally, grim trigger", "firms",
                             "How many firms have the market's critical discount factor (within a relative 1e-9); "
                             "1 when the binding firm is unique, empty when not sustainable.",
                             "per-firm thresholds within the tie tolerance of the largest"),
    "tied_firms.finite": Entry("firms binding equally, Nash reversion for T periods", "firms",
                               "How many firms have the market's critical discount factor (within a relative 1e-9).",
                               "per-firm thresholds within the tie tolerance of the largest"),
    "tied_firms.stick_carrot": Entry("firms binding equally, stick and carrot", "firms",
                                     "How many firms have the market's critical discount factor (within a relative "
                                     "1e-9).", "per-firm thresholds within the tie tolerance of the largest"),
    "punishment": Entry("punishment length T", "periods", "Periods of static Nash after a deviation.", "given"),
    "punishment_level.stick_carrot": Entry("stick-and-carrot punishment level", "action (quantity or price)",
                                           "The common action of the one-period punishment.", "Abreu (1986)"),
    "delta": Entry("discount factor", "", "The discount factor at which partial collusion is found.",
                   "given"),
    "partial_gain.grim": Entry("profit gain of the best sustainable collusion, grim trigger", "share of the gain",
                               "(joint profit - joint Nash profit) / (joint collusive - joint Nash) of the most "
                               "profitable outcome on the path from Nash to the agreement that grim trigger sustains.",
                               "search along the straight path of actions (this tool's choice of path)"),
    "partial_gain.finite": Entry("profit gain of the best sustainable collusion, Nash reversion for T periods",
                                 "share of the gain", "As for grim trigger, with T periods of punishment.",
                                 "search along the straight path of actions (this tool's choice of path)"),
    "partial_gain.stick_carrot": Entry("profit gain of the best sustainable collusion, stick and carrot",
                                       "share of the gain", "As for grim trigger, with the best stick and carrot.",
                                       "search along the straight path of actions (this tool's choice of path)"),
    "trigger_price.quantity": Entry("collusive quantity per firm, trigger-price equilibrium", "quantity",
                                    "Each firm's output while colluding.",
                                    "Green and Porter (1984), Econometrica 52(1)"),
    "trigger_price.trigger": Entry("trigger price", "price", "A market price below it starts a price war.",
                                   "Green and Porter (1984)"),
    "trigger_price.war_length": Entry("price-war length, trigger-price equilibrium", "periods",
                                      "Periods of static Nash after the price falls below the trigger.",
                                      "Green and Porter (1984)"),
    "trigger_price.degenerate": Entry("no trigger-price collusion possible", "yes (1) / no (0)",
                                      "Whether no output below static Nash can be sustained, so that the "
                                      "'equilibrium' scheme played is static Nash itself (trigger 0).",
                                      "Green and Porter (1984)"),
    "trigger_price.war_probability": Entry("probability of a price war per collusive period", "probability",
                                           "The chance that the shocked price falls below the trigger.",
                                           "Green and Porter (1984)"),
    "trigger_price.expected_collusive_spell": Entry("expected collusive spell, trigger-price equilibrium", "periods",
                                                    "Mean number of collusive periods between price wars.",
                                                    "geometric with the war probability"),
    "trigger_price.war_share": Entry("long-run share of price-war periods", "0 to 1",
                                     "Share of periods spent in price wars in the long run.", "renewal argument"),
    "trigger_price.value": Entry("value of the trigger-price equilibrium", "{money}",
                                 "Expected discounted profit of a firm, per period of the horizon (times 1 - delta).",
                                 "Green and Porter (1984)"),
    "trigger_price.nash_value": Entry("value of static Nash forever", "{money}",
                                      "The same for static Nash in every period.", "stage game"),
    # simulation
    "collusive_share": Entry("share of collusive periods", "0 to 1",
                             "Share of periods in which every firm colludes.", "counted in the simulation", _RATIO),
    "war_share": Entry("share of price-war periods", "0 to 1",
                       "Share of periods that belong to a price war.", "counted in the simulation", _RATIO),
    "wars_per_replication": Entry("price wars per replication", "count", "Price wars started in a replication.",
                                  "counted in the simulation", _MEAN),
    "war_frequency": Entry("price wars started per period", "per period", "Price wars started per period.",
                           "counted in the simulation", _RATIO),
    "spell_length": Entry("mean collusive spell", "periods", "Mean length of a run of collusive periods.",
                          "survival analysis of spells cut off by the horizon", _KM),
    "war_length": Entry("mean price-war length", "periods",
                        "Mean length of a price war, its deviation period included.",
                        "survival analysis of wars cut off by the horizon", _KM),
    "punishment_length": Entry("mean punishment phase", "periods",
                               "Mean length of a run of periods in which some firm punishes.",
                               "survival analysis", _KM),
    "first_breakdown": Entry("time to first breakdown", "periods",
                             "Number of the first period that is not collusive (counted from 1).",
                             "survival analysis, one observation per replication", _KM),
    "broken_down": Entry("share of replications that broke down", "0 to 1",
                         "Share of replications with at least one non-collusive period.", "counted", _WILSON),
    "price": Entry("mean market price", "price", "Average market price per period.", "counted", _RATIO_MEAN),
    "overcharge": Entry("overcharge over the static-Nash price", "share of the Nash price",
                        "Mean price / static-Nash price - 1.", "affine map of the mean price", _RATIO_MEAN),
    "consumer_surplus": Entry("mean consumer surplus", "{money}", "Consumer surplus per period.",
                              "closed form of the demand system", _RATIO_MEAN),
    "joint_profit": Entry("mean joint profit", "{money}", "Sum of the firms' profits per period.", "counted",
                          _RATIO_MEAN),
    "profit_gain": Entry("profit gain", "share of the gain",
                         "(profit - static-Nash profit) / (collusive profit - static-Nash profit): 0 at Nash, 1 at "
                         "the agreement.", "Calvano, Calzolari, Denicolo and Pastorello (2020), AER 110(10)",
                         "simulations: " + _RATIO_MEAN + "; learning sessions: the mean of each converged "
                         "session's profit gain, Student's t interval across independent sessions"),
    "profit": Entry("mean profit", "{money}", "The firm's profit per period.", "counted", _RATIO_MEAN),
    "discounted_profit": Entry("discounted profit", _DISCOUNTED,
                               "Sum over the horizon of delta^t times the profit.", "counted", _MEAN),
    "nash_price": Entry("static-Nash price", "price", "Market price of the static Nash equilibrium.", "stage game"),
    "collusive_price": Entry("collusive price", "price", "Market price under the agreement.", "stage game"),
    "deviation.gain": Entry("gain from a one-shot deviation", _DISCOUNTED,
                            "Paired difference of the deviator's discounted profit with and without the deviation: "
                            "positive means the line-up is not an equilibrium.",
                            "one-shot deviation principle (Mailath and Samuelson, 2006, section 2.2)", _MEAN),
    "deviation.pays": Entry("deviation pays", "yes (1) / no (0)", "Whether the mean gain is positive.", "sign"),
    "deviation.firm": Entry("deviating firm", "firm number", "The firm that deviates once.", "given"),
    "deviation.conform_value": Entry("discounted profit without deviating", _DISCOUNTED,
                                     "The deviator's mean discounted profit when it follows its strategy.", "counted"),
    "deviation.deviate_value": Entry("discounted profit when deviating", _DISCOUNTED,
                                     "The deviator's mean discounted profit with the deviation.", "counted"),
    "critical_delta": Entry("critical discount factor of the schemes played", "",
                            "The highest critical discount factor among the punishment schemes the line-up plays.",
                            _FRIEDMAN),
    "effective_delta": Entry("effective discount factor", "",
                             "The discount factor times the probability that the game goes on (random horizon).",
                             "common practice, no source"),
    "clears": Entry("clears every threshold", "yes (1) / no (0)",
                    "Whether the discount factor is at or above every scheme's threshold.", "comparison"),
    "equilibrium": Entry("trigger-price equilibrium exists", "yes (1) / no (0)",
                         "Whether a trigger-price equilibrium exists at these settings.", "Green and Porter (1984)"),
    "war_probability": Entry("probability of a price war per collusive period", "probability",
                             "The chance that the price signal falls below the trigger.", "Green and Porter (1984)"),
    "war_share_long_run": Entry("long-run share of price-war periods", "0 to 1",
                                "Share of periods in price wars in the long run.", "renewal argument"),
    "collusive_by_period": Entry("share of replications colluding", "0 to 1",
                                 "Share of the replications still running in which every firm colludes, per period.",
                                 "counted", "pointwise " + _WILSON + " per period (fixed horizon); none under a random "
                                                                     "horizon"),
    # learning
    "sessions": Entry("learning sessions", "count", "Independent sessions.", "given"),
    "converged": Entry("share of sessions that converged", "0 to 1",
                       "Share of sessions whose greedy strategies did not change for the convergence window.",
                       "Calvano et al. (2020)", _WILSON),
    "periods": Entry("periods to convergence", "periods", "Periods a session ran until it converged, counted from "
                     "its start (for sessions continued from saved learners, from the start of the saved session).",
                     "counted",
                     _SESSIONS),
    "limit_price": Entry("limit price", "price", "The firm's mean price in the limit play of converged sessions "
                         "(of every session when none converged).", "greedy play from the final state", _SESSIONS),
    "limit_profit": Entry("limit profit", "{money}", "Mean over converged sessions (every session when none "
                          "converged) of the firm's mean profit in the limit play.", "greedy play from the final state",
                          _SESSIONS),
    "near_collusive": Entry("share of sessions near collusion", "0 to 1",
                            "Share of converged sessions (every session when none converged) in which every firm's "
                            "mean limit action lies within the stated tolerance (learning.near) times its "
                            "Nash-to-collusive distance of its joint-profit action (inclusive: an action exactly at "
                            "that distance counts, as the grid points next to the benchmark do on a grid of 7 prices "
                            "with xi = 0.1 and the default tolerance).", "counted", _WILSON),
    "near_nash": Entry("share of sessions near static Nash", "0 to 1",
                       "Share of converged sessions (every session when none converged) in which every firm's mean "
                       "limit action lies within the stated tolerance (learning.near) times its Nash-to-collusive "
                       "distance of its static-Nash action (inclusive: an action exactly at that distance counts, "
                       "as the grid points next to the benchmark do on a grid of 7 prices with xi = 0.1 and the "
                       "default tolerance).",
                       "counted", _WILSON),
    "rival_price_cut": Entry("rivals' price cut after a deviation (below 0: a rise)", "price",
                             "How much the rivals lower their price in the period after a forced deviation (their "
                             "price before it minus their price in the period after, so that a negative cut is a "
                             "rise; the terminal report states the change, after minus before): the "
                             "learning rivals' mean (an automaton's response is its rule, not learned; every "
                             "rival's when none learns). Rivals are the seats of other owners: after a merger the "
                             "deviating product's merged partner is not one.",
                             "impulse response (Calvano et al., 2020)", _SESSIONS),
    "deviation_gain": Entry("gain from the forced deviation", _DISCOUNTED,
                            "Discounted profit of the deviating firm with the deviation minus without (after a "
                            "merger, of the merged firm: its products' summed profit, what the deviating product's "
                            "learner is rewarded with).",
                            "impulse response (Calvano et al., 2020)", _SESSIONS),
    "deviation_pays": Entry("share of deviations that pay", "0 to 1",
                            "Mean over converged sessions of the share of the deviations tried in each -- one at "
                            "every point of the limit cycle (exact), or the simulated ones (estimate) -- whose "
                            "discounted value gain is positive; not a share of sessions.",
                            "counted per session, averaged over sessions (the terminal report words it the same way)",
                            _SESSIONS + ", kept within [0, 1]; " + _BINARY),
    "returned": Entry("share of deviations after which play returns", "0 to 1",
                      "Mean over converged sessions of the share of the deviations tried at the points of the limit "
                      "cycle after which greedy play returns to the cycle it left; not a share of sessions.",
                      "counted per session, averaged over sessions", _SESSIONS + ", kept within [0, 1]; " + _BINARY),
    "periods_to_return": Entry("periods to return", "periods", "Mean over converged sessions of the mean number of "
                            "periods after a deviation until the state of greedy play is back on the limit cycle, "
                            "over the deviations after which it returns: 1 when the period after the deviation is "
                            "already back (as the impulse response's row +1 shows), 0 when the deviation leaves the "
                            "state on the cycle (the forced price was the one the cycle plays there, or it moves play "
                            "to another point of the cycle); with a memory of k periods the state holds the "
                            "deviation's prices for k periods, so it is back k periods after at the soonest. Named "
                            "return_periods, and counting the deviation's own period too, in runs of earlier "
                            "versions.",
                            "counted per session, averaged over sessions", _SESSIONS + ", kept at or above 0"),
    # the column of runs written by earlier versions, still described when their folders are reported again
    "return_periods": Entry("periods to return, counting the deviation's period (earlier versions)", "periods",
                            "As periods_to_return, but counting the deviation's own period too: one more. Written "
                            "by earlier versions only.", "counted per session, averaged over sessions", _SESSIONS),
    "nash_profit": Entry("static-Nash profit", "{money}", "Profit per period in the static Nash equilibrium.",
                         "stage game"),
    "collusive_profit": Entry("collusive profit", "{money}", "Profit per period under the joint-profit agreement.",
                              "stage game"),
    # tournaments
    "entrants": Entry("entrants", "count", "Rules in the tournament.", "given"),
    "seats": Entry("firms per match", "count", "Firms in each match.", "given"),
    "matches": Entry("matches", "count", "Matches played (every group and seating).", "given"),
    "ranking_holds": Entry("share of resamples keeping the ranking", "0 to 1",
                           "Share of bootstrap resamples in which the ranking is the one reported.",
                           "bootstrap over replications (Efron and Tibshirani, 1993)"),
    "moran.max_standard_errors": Entry("largest gap between simulated and exact fixation", "standard errors",
                                       "The largest difference between simulated and exact Moran fixation "
                                       "probabilities, in standard errors.", "Nowak et al. (2004), Nature 428"),
    "score": Entry("score", "as the score chosen", "The entrant's score against rivals drawn uniformly.",
                   "mean over its matches",
                   "normal approximation (score +- z se, se from the matches' standard errors)"),
    "rank": Entry("rank", "rank (1 is best)", "The entrant's place by score.", "ordering"),
    "rank_share": Entry("share of resamples at this rank", "0 to 1",
                        "Share of bootstrap resamples in which the entrant keeps its rank.", "bootstrap"),
    "top_share": Entry("share of resamples ranked first", "0 to 1",
                       "Share of bootstrap resamples in which the entrant ranks first.", "bootstrap"),
    "share": Entry("population share after replicator dynamics", "0 to 1",
                   "The rule's share of the population at the end of the replicator dynamics.",
                   "Taylor and Jonker (1978), Mathematical Biosciences 40"),
    "rare_mutation_share": Entry("long-run share under rare mutations", "0 to 1",
                                 "Share of time the population spends at this rule under rare mutations.",
                                 "Fudenberg and Imhof (2006), Journal of Economic Theory 131"),
    "ess": Entry("resists invasion", "yes (1) / no (0)",
                 "Whether no other rule does better against it than it does against itself.",
                 "Maynard Smith and Price (1973), Nature 246"),
    "ess_n": Entry("resists invasion in a finite population", "yes (1) / no (0)",
                   "The same in the Moran population of the stated size.", "Nowak et al. (2004)"),
    "wins": Entry("pairings kept the higher profit", "count", "Pairings in which the rule earned more than its rival.",
                  "counted"),
    "losses": Entry("pairings kept the lower profit", "count", "Pairings in which the rule earned less.", "counted"),
    # assessment
    "direction": Entry("direction of the merger's effect", "-1 easier, 0 unchanged, 1 harder",
                       "Whether the merger lowers (easier collusion) or raises the critical discount factor.",
                       "comparison of the thresholds before and after"),
    "sustainable": Entry("collusion sustainable", "yes (1) / no (0)",
                         "Whether the agreement is sustainable at the stated discount factor.", "threshold <= delta"),
    "hhi": Entry("HHI", "points (0 to 10,000)", "Sum of squared market shares in percent.",
                 "Herfindahl-Hirschman index (US Horizontal Merger Guidelines, 2010, section 5.3)"),
    "delta_hhi": Entry("change of the HHI", "points", "HHI after minus before the merger.", "as for the HHI"),
    "naive_delta_hhi": Entry("change of the HHI at unchanged shares", "points",
                             "2 s_i s_j for the merging firms' shares: the screen of the guidelines.",
                             "US Horizontal Merger Guidelines (2010), section 5.3"),
    "price_change": Entry("price change from the merger", "share of the pre-merger price",
                          "Post-merger price / pre-merger price - 1 under static Nash.",
                          "merger simulation (Werden and Froeb, 1994)"),
    "persistence.difference": Entry("change of the share of collusive periods", "0 to 1",
                                    "After minus before the merger.", "difference of the two estimates",
                                    "normal approximation (difference +- z sqrt(se_before^2 + se_after^2))"),
    "calibration.max_relative_residual": Entry("largest relative residual of the calibration", "share",
                                               "How far the calibrated market misses the observed data.",
                                               "calibration to prices, shares and margins"),
    # the any-punishment part of the thresholds analysis (payoff sets on an action grid)
    "any_punishment.grid": Entry("actions per firm on the grid", "count",
                                 "Number of actions of the firm in the finite stage game on which the payoff sets "
                                 "are computed.", "uniform grid over the action range with the static Nash, "
                                 "collusive, deviation, stick and minmax actions placed on it (this tool's choice)"),
    "any_punishment.directions": Entry("directions of the outer payoff sets", "count",
                                       "Number of directions of the supporting hyperplanes (0: exact two-firm sets).",
                                       _JYC),
    "any_punishment.threshold.lower": Entry("critical discount factor under any punishment, lower end", "",
                                            "At or below it the agreement is not an equilibrium outcome under any "
                                            "punishment: the outer payoff set refutes it.", _ANY),
    "any_punishment.threshold.upper": Entry("critical discount factor under any punishment, upper end", "",
                                            "At it the agreement is sustained by constructed equilibria whose "
                                            "punishments are the optimal penal codes.", _ANY),
    "any_punishment.on_grid.grim": Entry("critical discount factor on the action grid, grim trigger", "",
                                         "Grim trigger's threshold in the same finite stage game.", _FRIEDMAN),
    "any_punishment.on_grid.stick_carrot": Entry("critical discount factor on the action grid, stick and carrot", "",
                                                 "The best symmetric one-period punishment (a common action of "
                                                 "every firm on the grid) followed by the agreement.",
                                                 "Abreu (1986), Journal of Economic Theory 39, minimised over the "
                                                 "common actions on the grid"),
    "any_punishment.on_grid.two_phase": Entry("critical discount factor on the action grid, one-period punishment "
                                              "at any profile", "",
                                              "One period at any action profile, asymmetric ones included, then the "
                                              "agreement.", "Abreu (1986), minimised over every profile of the grid"),
    "any_punishment.delta": Entry("discount factor of the payoff set", "",
                                  "The discount factor at which the worst payoffs and the payoff set are reported "
                                  "(given, or the upper end of the interval).", "given or computed"),
    "any_punishment.sustained": Entry("agreement sustained under any punishment", "yes (1) / no (0)",
                                      "Whether the agreement is an equilibrium outcome at that discount factor "
                                      "(empty when the bracket cannot decide).", _ANY),
    "any_punishment.accuracy": Entry("accuracy of the payoff sets", "{money}",
                                     "Hausdorff distance between the inner and the outer equilibrium payoff sets at "
                                     "that discount factor: every number read from them is known to this precision.",
                                     _SETS),
    "any_punishment.worst.lower": Entry("worst equilibrium payoff, lower end", "{money}",
                                        "A lower bound of the firm's worst subgame-perfect equilibrium payoff "
                                        "(discounted average), from the outer set.", _PENAL),
    "any_punishment.worst.upper": Entry("worst equilibrium payoff, upper end", "{money}",
                                        "The firm's payoff in the harshest punishment constructed (its optimal penal "
                                        "code), from the inner set.", _PENAL),
    # price competition with capacity constraints
    "capacity": Entry("capacity", "quantity per period", "The most the firm can sell in a period.", "given"),
    "profit.minmax": Entry("minmax profit", "{money}",
                           "The least profit the rivals can hold the firm to: they price at zero and sell first, the "
                           "firm sells its residual demand at its best price.",
                           "minmax of the stage game (Abreu, 1988, Econometrica 56(2); Lambson, 1987, Review of "
                           "Economic Studies 54(3))"),
    "static_mixed": Entry("static equilibrium in mixed strategies", "yes (1) / no (0)",
                          "Whether the static equilibrium of price competition with capacities is mixed "
                          "(Bertrand-Edgeworth).",
                          "Kreps and Scheinkman (1983), Bell Journal of Economics 14(2); Osborne and Pitchik (1986), "
                          "Journal of Economic Theory 38(2); numerically on a price grid for more than two firms"),
    "threshold.minmax": Entry("critical discount factor, minmax punishment", "",
                              "The lowest discount factor at which the agreement holds when a deviator is held to its "
                              "minmax profit forever.",
                              "delta* = (pi_D - pi_C) / (pi_D - pi_minmax) (Abreu, 1988; with capacities: Compte, "
                              "Jenny and Rey, 2002, European Economic Review 46(1))"),
    "binding.minmax": Entry("binding firm, minmax punishment", "firm number",
                            "The firm with the highest critical discount factor under minmax punishments.",
                            "argmax over firms (the first on ties)"),
    "capacity_share.largest": Entry("largest capacity share", "0 to 1",
                                    "The largest firm's capacity divided by the total capacity.",
                                    "the symmetry measure of Compte, Jenny and Rey (2002), Capacity constraints, "
                                    "mergers and collusion, European Economic Review 46(1)"),
    "spare_capacity": Entry("spare capacity", "share of the quantity sold",
                            "Total capacity over the quantity sold under the agreement, minus one.",
                            "common practice, no source"),
    "rivals_cover": Entry("capacity of the largest firm's rivals", "share of demand",
                          "The total capacity of the largest firm's rivals over the demand at the agreed price; below "
                          "one they cannot serve the market on their own.",
                          "Compte, Jenny and Rey (2002), Capacity constraints, mergers and collusion, European "
                          "Economic Review 46(1)"),
    "threshold.grim.change": Entry("change of the critical discount factor, grim trigger", "",
                                   "After minus before the merger; negative: coordination becomes easier.",
                                   "difference of the two thresholds; " + _FRIEDMAN),
    "threshold.minmax.change": Entry("change of the critical discount factor, minmax punishment", "",
                                     "After minus before the merger; negative: coordination becomes easier.",
                                     "difference of the two thresholds (Compte, Jenny and Rey, 2002)"),
    "binding_changed": Entry("binding firm changes", "yes (1) / no (0)",
                             "Whether the merger changes which firm binds under minmax punishments.",
                             "comparison of the binding firms (Compte, Jenny and Rey, 2002)"),
    "eu_safe_harbour": Entry("within the EU guidelines' levels of no concern", "yes (1) / no (0)",
                             "Whether the post-merger HHI and its change lie within the levels at which concerns are "
                             "unlikely.",
                             "Guidelines on the assessment of horizontal mergers, OJ C 31, 5.2.2004, paragraphs 19-21"),
    "us_presumption": Entry("US structural presumption", "yes (1) / no (0)",
                            "Whether the HHI after the merger is above 1,800 with a change above 100, or the merged "
                            "share above 30 % with a change above 100.",
                            "U.S. Department of Justice and Federal Trade Commission, Merger Guidelines (2023), "
                            "section 2.1"),
}

# enforcement, demand states and multimarket contact (sim.evidence.catalogue_conditions)
ENTRIES.update({k: Entry(*v) for k, v in CONDITION_ENTRIES.items()})
# the assessment's payoff sets, growth and multimarket-contact rows (sim.evidence.catalogue_assess)
ENTRIES.update({k: Entry(*v) for k, v in ASSESS_ENTRIES.items()})
# a simulated cartel facing an authority (sim.evidence.catalogue_enforced)
ENTRIES.update({k: Entry(*v) for k, v in ENFORCED_ENTRIES.items()})
# a simulated line-up with moving demand (sim.evidence.catalogue_state_play)
ENTRIES.update({k: Entry(*v) for k, v in STATE_PLAY_ENTRIES.items()})
# the same firms simulated in several markets in contact (sim.evidence.catalogue_contact_play)
ENTRIES.update({k: Entry(*v) for k, v in CONTACT_PLAY_ENTRIES.items()})
# alternating price setting by learners: fixed price pairs against cycles (sim.evidence.catalogue_alternating)
ENTRIES.update({k: Entry(*v) for k, v in ALTERNATING_ENTRIES.items()})
# the symmetric slice of the any-punishment set, three firms or more (sim.evidence.catalogue_slice)
ENTRIES.update({k: Entry(*v) for k, v in SLICE_ENTRIES.items()})
ENTRIES.update({k: Entry(*v) for k, v in REFINE_ENTRIES.items()})
# the frontier of sustainable profits of the any-punishment set (sim.evidence.catalogue_slice)
ENTRIES.update({k: Entry(*v) for k, v in FRONTIER_ENTRIES.items()})
# learners' response to one adverse demand draw (sim.evidence.catalogue_shocks)
ENTRIES.update({k: Entry(*v) for k, v in SHOCK_ENTRIES.items()})
# learners against automata, and saved learners continued after an event (sim.evidence.catalogue_learned_events)
ENTRIES.update({k: Entry(*v) for k, v in LEARNED_EVENT_ENTRIES.items()})

#: swept or given parameters: key path -> Entry (unit and label of an axis)
PARAMETERS: dict[str, Entry] = {k: Entry(*v) for k, v in PARAMETER_ROWS.items()}
PARAMETERS.update({k: Entry(*v) for k, v in CONDITION_PARAMETERS.items()})
PARAMETERS.update({k: Entry(*v) for k, v in ALTERNATING_PARAMETERS.items()})
PARAMETERS.update({k: Entry(*v) for k, v in SHOCK_PARAMETERS.items()})

_SCHEME_WORDS = {"grim": "grim trigger", "finite": "Nash reversion for T periods", "stick_carrot": "stick and carrot"}


@dataclass(frozen=True)
class Described:
    """A stored name resolved through the catalogue.

    Attributes
    ----------
    key : str
        The stored name.
    label : str
        The reader's label, qualifiers included.
    unit : str
        The unit (money in the experiment's currency and period).
    entry : Entry
        The stem's entry.
    """

    key: str
    label: str
    unit: str
    entry: Entry

    @property
    def axis(self) -> str:
        """An axis label: the label with its unit in brackets."""
        return f"{self.label} [{self.unit}]" if self.unit else self.label


def money(currency: str | None = None, period: str | None = None) -> str:
    """The unit of money per period.

    Parameters
    ----------
    currency, period : str, optional

    Returns
    -------
    str
    """
    return f"{currency or 'currency units'} per {period or 'period'}"


_TAIL = re.compile(r"\.(se|low|high)$")
_SIDE = re.compile(r"\.(before|after)(?=\.|$|\[)")
_FIRM = re.compile(r"\.(firm|product)(\d+)(?=\.|$|\[)")
_INDEX = re.compile(r"\[(\d+)\]")
_QUANT = re.compile(r"\.q(\d\d)$")


def _stem(core: str) -> tuple[str, str | None]:
    if core in ENTRIES:
        return core, None
    head, _, last = core.rpartition(".")
    if head in ENTRIES:  # a tournament entrant's label, or a scheme's suffix
        return head, last
    return core, None


def describe(key: str, currency: str | None = None, period: str | None = None, firm_names=None,
             product_names=None) -> Described:
    """Resolve a stored metric name (see the module notes).

    Parameters
    ----------
    key : str
    currency, period : str, optional
        Units of money.
    firm_names : sequence of str, optional
        Names of the firms (firm N is ``firm_names[N - 1]``).
    product_names : sequence of str, optional
        Names of the products (product N is ``product_names[N - 1]``; default: ``firm_names``).

    Returns
    -------
    Described

    Raises
    ------
    KeyError
        When the stem has no entry.
    """
    core = key
    analytic = core.startswith("analytic.")
    core = core.removeprefix("analytic.")
    tail = _TAIL.search(core)
    core = _TAIL.sub("", core)
    quant = _QUANT.search(core)
    core = _QUANT.sub("", core)
    sides = _SIDE.findall(core)
    core = _SIDE.sub("", core)
    firms = _FIRM.findall(core)
    core = _FIRM.sub("", core)
    idx = _INDEX.findall(core)
    core = _INDEX.sub("", core)
    stem, extra = _stem(core)
    if stem not in ENTRIES:
        raise KeyError(f"{key!r} has no entry in the evidence catalogue")
    e = ENTRIES[stem]
    label = e.label
    quals = []
    if extra:
        quals.append(_SCHEME_WORDS.get(extra, extra))
    for what, n in firms:
        n = int(n)
        names = product_names if what == "product" and product_names else firm_names
        name = names[n - 1] if names and n <= len(names) else f"{what} {n}"
        quals.append(name)
    if idx:
        quals.append("item " + ", ".join(idx))
    if sides:
        quals.append(f"{sides[0]} the merger")
    if quant:
        quals.append(f"{int(quant.group(1))}th percentile across sessions")
    if quals:
        label = f"{label} ({'; '.join(quals)})"
    if analytic:
        label = f"analytic prediction of the {label}"
    if tail:
        label = {"se": "standard error of the", "low": "lower bound of the 95 % interval of the",
                 "high": "upper bound of the 95 % interval of the"}[tail.group(1)] + " " + label
    # "{currency}": an amount not per period (a discounted sum of money over the periods)
    unit = e.unit.replace("{money}", money(currency, period)).replace("{currency}", currency or "currency units")
    return Described(key, label, unit, e)


def describe_parameter(path: str, currency: str | None = None, period: str | None = None) -> Described:
    """Resolve a swept parameter's path (``run.delta``, ``strategies.1``, ``market.cost.2``).

    Parameters
    ----------
    path : str
    currency, period : str, optional

    Returns
    -------
    Described

    Raises
    ------
    KeyError
        When the path has no entry.
    """
    parts = path.split(".")
    for n in range(len(parts), 0, -1):
        head = ".".join(parts[:n])
        if head in PARAMETERS:
            e = PARAMETERS[head]
            rest = [p for p in parts[n:]]
            label = e.label + (f" ({' '.join('firm ' + p if p.isdigit() else p for p in rest)})" if rest else "")
            if head == "strategies" and rest:
                label = f"strategy of line-up entry {rest[0]}" + (f", {'.'.join(rest[1:])}" if len(rest) > 1 else "")
            return Described(path, label, e.unit.replace("{money}", money(currency, period)), e)
    raise KeyError(f"{path!r} has no entry in the evidence catalogue")


def glossary(keys, currency: str | None = None, period: str | None = None, names_of=None) -> list[list[str]]:
    """Rows of a bundle's glossary: key, label, unit, definition, method and source, interval.

    Parameters
    ----------
    keys : iterable of str
        Stored metric names (bounds and standard errors are folded into their metric).
    currency, period : str, optional
    names_of : callable, optional
        ``names_of(key) -> dict``: the ``firm_names`` and ``product_names`` that label a key
        (:func:`sim.evidence.catalogue_names.key_names`); default: firms and products by number.

    Returns
    -------
    list of list of str
    """
    rows, seen = [], set()
    for k in keys:
        base = _TAIL.sub("", k)
        if base in seen:
            continue
        seen.add(base)
        d = describe(base, currency, period, **(names_of(base) if names_of is not None else {}))
        if _QUANT.search(base):
            # a percentile of the sessions' values: the entry defines the value, not the statistic
            rows.append([base, d.label, d.unit or "-", "The stated percentile, across sessions, of: "
                         + d.entry.definition, d.entry.method, "none (a percentile of the sessions' values)"])
            continue
        rows.append([base, d.label, d.unit or "-", d.entry.definition, d.entry.method, d.entry.interval])
    return rows

