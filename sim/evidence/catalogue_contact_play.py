"""Catalogue entries of the same firms simulated in several markets in contact (the ``contact_simulation`` kind,
:mod:`sim.simulation.multimarket`): stem -> (label, unit, definition, method, interval)."""

from __future__ import annotations

__all__ = ["CONTACT_PLAY_ENTRIES"]

_MEAN = "Student's t interval across independent replications (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
_PLAYED = ("the markets played together period by period (sim.simulation.multimarket.simulate_markets); a period is "
           "collusive in a market when every firm's automaton there is in a collusive state and no firm cheated or "
           "erred in it")

CONTACT_PLAY_ENTRIES = {
    "contact.pooled_share": ("collusive share with pooled punishment", "0 to 1",
                             "Share of the periods in which every firm colludes in the market when a deviation seen "
                             "in any market is punished in all of them.",
                             _PLAYED + "; pooled signals after Bernheim and Whinston (1990), RAND 21(1)", _MEAN),
    "contact.separate_share": ("collusive share with separate punishment", "0 to 1",
                               "Share of the periods in which every firm colludes in the market when each market's "
                               "automata react to that market alone.", _PLAYED, _MEAN),
    "contact.difference_share": ("change of the collusive share from pooling", "0 to 1 (difference)",
                                 "Pooled minus separate collusive share of the market, replication by replication on "
                                 "the same random streams.", _PLAYED, _MEAN + ", on the paired differences"),
}
