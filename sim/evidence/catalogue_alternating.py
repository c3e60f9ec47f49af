"""Catalogue entries of alternating (sequential) price setting by two learners (``learning.timing = "alternating"``,
:mod:`sim.learning.alternating`): where the sessions end, a fixed price pair or a cycle (Klein, 2021): stem -> (label,
unit, definition, method, interval); and the parameters a sweep of such sessions varies."""

from __future__ import annotations

__all__ = ["ALTERNATING_ENTRIES", "ALTERNATING_PARAMETERS"]

_WILSON = "Wilson score interval (Wilson, 1927, JASA 22)"
_MEAN = "Student's t interval across independent sessions (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
_KLEIN = ("greedy play from each session's final state under alternating moves, followed until the state (both prices "
          "and the firm to move) repeats, which it must within 2 m1 m2 periods; protocol of Klein (2021, RAND Journal "
          "of Economics 52(3)) after Maskin and Tirole (1988, Econometrica 56(3))")
_GAIN = "(profit - Nash) / (collusive - Nash), profits averaged over the cycle (Calvano et al., 2020); "

ALTERNATING_ENTRIES = {
    "fixed_price_share": ("share of sessions at a fixed price pair", "0 to 1",
                          "Share of sessions whose greedy play after learning repeats the same two prices every period "
                          "(a focal price).", _KLEIN, _WILSON),
    "fixed_above_nash_share": ("share of sessions at a fixed price pair above static Nash", "0 to 1",
                               "Share of sessions at a fixed price pair in which every firm's price exceeds its "
                               "static-Nash price by more than the stated tolerance.", _KLEIN, _WILSON),
    "fixed_not_stage_nash_share": ("share of sessions at a fixed price pair that is not a static equilibrium of the "
                                   "grid", "0 to 1",
                                   "Share of sessions at a fixed price pair at which some firm would earn more in the "
                                   "period with another price of its own grid, the rival's price held: a pair that "
                                   "only the rival's reply sustains. A static (stage-game) Nash equilibrium of the "
                                   "grid, such as one grid step above cost in homogeneous Bertrand, is not counted, "
                                   "whatever its distance from the static-Nash price of continuous prices.",
                                   _KLEIN, _WILSON),
    "fixed_collusive_share": ("share of sessions at a fixed price pair near joint profit", "0 to 1",
                              "Share of sessions at a fixed price pair within the stated tolerance of the joint-profit "
                              "prices.", _KLEIN, _WILSON),
    "cycle_share": ("share of sessions in a price cycle", "0 to 1",
                    "Share of sessions whose greedy play after learning cycles through several price pairs (every "
                    "session not at a fixed price pair; some, not all, are Edgeworth-cycle-like paths of undercutting "
                    "and a jump back up).", _KLEIN, _WILSON),
    "cycle_length": ("length of the price cycle", "periods",
                     "Periods until the price pair repeats, over the sessions that end in a cycle.", _KLEIN, _MEAN),
    "profit_gain_fixed": ("profit gain at a fixed price pair", "share of the gain",
                          "Mean profit gain of the sessions that end at a fixed price pair.", _GAIN + _KLEIN, _MEAN),
    "profit_gain_cycle": ("profit gain in a price cycle", "share of the gain",
                          "Mean profit gain of the sessions that end in a price cycle.", _GAIN + _KLEIN, _MEAN),
}

ALTERNATING_PARAMETERS = {
    "learning.timing": ("move timing of the learners", "",
                        "Whether the firms set their prices every period at the same time (simultaneous) or in turn, "
                        "each price held for two periods (alternating).",
                        "given; alternating moves as in Klein (2021, RAND Journal of Economics 52(3)) after Maskin and "
                        "Tirole (1988, Econometrica 56(3))"),
    "learning.grid": ("price grid of the learners", "price", "The prices each learner chooses from.", "given"),
}
