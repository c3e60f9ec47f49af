"""Catalogue entries of learners seated with automata (each automaton's punishments during learning,
:mod:`sim.learning.triggers`) and of saved learners continued after an event (:mod:`sim.learning.events`): stem ->
(label, unit, definition, method, interval)."""

from __future__ import annotations

__all__ = ["LEARNED_EVENT_ENTRIES"]

_WILSON = "Wilson score interval (Wilson, 1927, JASA 22)"
_SESSIONS = "Student's t interval across independent sessions (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"

LEARNED_EVENT_ENTRIES = {
    # learners against automata: the automaton's punishments during learning
    "triggered": ("share of sessions in which the automaton's punishment was triggered", "0 to 1",
                  "Share of sessions in which the automaton entered a non-collusive (punishment) state from a "
                  "collusive one at least once while the learners learned.",
                  "counted in the learning kernel from the automaton's states (its collusive states as the "
                  "strategy defines them); learners against automata as in Calvano, Calzolari, Denicolo and "
                  "Pastorello (2020, AER, section V)", _WILSON),
    "triggers": ("triggers of the automaton's punishment per session", "count",
                 "Entries of the automaton into a non-collusive state from a collusive one during learning, "
                 "per session (in sessions continued after an event, during the learning after it).",
                 "counted in the learning kernel", _SESSIONS),
    "first_trigger": ("period of the first trigger", "period",
                      "Median over the sessions with a trigger of the period (from 1, counted from the session's "
                      "start, also after an event) whose conduct first put the automaton into punishment.",
                      "counted in the learning kernel", "none (a median)"),
    "last_trigger": ("period of the last trigger", "period",
                     "Median over the sessions with a trigger of the period (from 1, counted from the session's "
                     "start, also after an event) whose conduct last put the automaton into punishment.",
                     "counted in the learning kernel", "none (a median)"),
    "punishment_share": ("share of the session the automaton punished", "0 to 1",
                         "Periods the automaton played in a non-collusive state divided by the periods of the "
                         "session (in sessions continued after an event, both counted from the event), "
                         "averaged over sessions.", "counted in the learning kernel",
                         _SESSIONS + ", cut to [0, 1]"),
    "exploration_at_first_trigger": ("exploration probability at the first trigger", "probability",
                                     "The learners' probability of exploring, exp(-beta t), in the period of "
                                     "the first trigger; median over the sessions with a trigger.",
                                     "epsilon-greedy exploration decaying as exp(-beta t) (Calvano, Calzolari, "
                                     "Denicolo and Pastorello, 2020, AER)", "none (a median)"),
    "exploration_at_last_trigger": ("exploration probability at the last trigger", "probability",
                                    "The learners' probability of exploring, exp(-beta t), in the period of the "
                                    "last trigger; median over the sessions with a trigger.",
                                    "epsilon-greedy exploration decaying as exp(-beta t) (Calvano, Calzolari, "
                                    "Denicolo and Pastorello, 2020, AER)", "none (a median)"),
    "punishing_at_end": ("share of sessions ending with the automaton punishing", "0 to 1",
                         "Share of sessions whose automaton was in a non-collusive state when learning stopped.",
                         "counted", _WILSON),
    # saved learners continued after an event (a cost or demand shock, an entrant)
    "settled_again": ("share of sessions that settled again after the event", "0 to 1",
                      "Share of sessions in which, after the event, no greedy strategy changed for the "
                      "convergence window before the cap.",
                      "the convergence rule of Calvano, Calzolari, Denicolo and Pastorello (2020, AER), counted "
                      "from the event", _WILSON),
    "periods_to_settle": ("periods to settle again after the event", "periods",
                          "Periods from the event to the last change of any learner's greedy strategy, over the "
                          "sessions that settled again.",
                          "counted in the learning kernel; learners that keep learning after a lasting change, "
                          "as in the robustness checks of Calvano et al. (2020) and Asker, Fershtman and Pakes "
                          "(2022, AEA Papers and Proceedings 112)", _SESSIONS),
    "event_price_before": ("limit price at the event", "price",
                           "The firm's mean price in the limit of greedy play from the session's state at the "
                           "event, with what the learners knew then (the line-up after the event, no learning "
                           "after it), averaged over sessions; where the limit is an estimate (automata that "
                           "act at random), its price in the last period before the event.",
                           "greedy play from the saved state (Calvano et al., 2020)", _SESSIONS),
    "event_price_change": ("change of the limit price after the event", "price",
                           "The firm's mean limit price once the learners settled again, minus its limit price "
                           "at the event (as defined there), session by session; averaged over the sessions "
                           "that settled.",
                           "greedy play from the final state and from the state at the event (Calvano et al., "
                           "2020)", _SESSIONS),
    "profit_gain_after_merger": ("profit gain against the market after the merger", "share of the gain",
                                 "(mean limit profit over products - their mean static-Nash profit after the merger) "
                                 "/ (their mean joint-profit profit - that static-Nash profit), session by session, "
                                 "averaged over the sessions of the other limit outcomes: the profit gain with the "
                                 "merged firm's static Nash as its zero, so the merger's unilateral price effect is "
                                 "not counted as a gain (the joint-profit outcome is the same before and after).",
                                 "profit gain of Calvano et al. (2020, AER 110(10)) against the stage game with a "
                                 "multi-product owner (Deneckere and Davidson, 1985, RAND Journal of Economics 16(4))",
                                 _SESSIONS),
    "limit_price_above_merger_nash": ("limit price above the static-Nash price after the merger", "price",
                                      "The product's limit price after the learners settled again minus its "
                                      "static-Nash price with the merged firm setting its products' prices "
                                      "jointly, averaged over the sessions of the other limit outcomes.",
                                      "greedy play from the final state (Calvano et al., 2020) against the stage "
                                      "game with a multi-product owner (Deneckere and Davidson, 1985)", _SESSIONS),
    "merger_nash_price": ("static-Nash price after the merger", "price",
                          "The product's price in the static Nash equilibrium of the market in which the merged "
                          "firm sets its products' prices jointly to maximise their summed profit.",
                          "stage game with a multi-product owner (Deneckere and Davidson, 1985, RAND Journal of "
                          "Economics 16(4))"),
}
