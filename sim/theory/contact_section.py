"""The multimarket part of the thresholds analysis: one record with everything the report shows.

:func:`contact_section` reports, for firms that meet in several markets (Bernheim and Whinston,
1990, "Multimarket contact and collusive behavior", RAND 21(1)), every market's threshold on its own,
every firm's pooled threshold and the lowest common discount factor, and at each discount factor asked
for which markets lend slack to which and the best allocation of collusion across the markets.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.records import Record

from .contact_allocation import Allocation, best_allocation
from .multimarket import ContactGame, PooledThresholds, SlackReport, pooled_thresholds, slack_at

__all__ = ["ContactSection", "contact_section"]


@dataclass(frozen=True)
class ContactSection(Record):
    """Collusion when the firms meet in several markets.

    Attributes
    ----------
    game : ContactGame
        The markets, their firm lists, growth and enforcement.
    shared : ndarray of shape (n_firms, n_firms)
        Markets each pair of firms shares (the diagonal: each firm's own count).
    pooled : PooledThresholds
        Thresholds of every market alone and of every firm's pooled constraint.
    slack : list of SlackReport
        At each discount factor asked for (where every market's ``delta (1 + growth)`` stays below one):
        each firm's slack per market and which markets lend slack to which.
    allocations : list of Allocation
        At the same discount factors, the best allocation of collusion across the markets.
    """

    game: ContactGame
    shared: np.ndarray
    pooled: PooledThresholds
    slack: list[SlackReport]
    allocations: list[Allocation]


def contact_section(game: ContactGame, deltas) -> ContactSection:
    """Pooled thresholds, slack and the best allocation of collusion at each discount factor.

    Parameters
    ----------
    game : ContactGame
    deltas : sequence of float in (0, 1), length n_deltas

    Returns
    -------
    ContactSection
    """
    ok = [float(d) for d in deltas if all(float(d) * (1.0 + cm.growth) < 1.0 for cm in game.markets)]
    return ContactSection(game, game.contact().astype(float), pooled_thresholds(game), [slack_at(game, d) for d in ok],
                          [best_allocation(game, d) for d in ok])
