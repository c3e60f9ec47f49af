"""A change of protocol as an event: the same market and line-up, the learners go on under new learning settings.

An ``[event]`` of ``kind = "protocol"`` continues saved sessions (``[learning] continue_from``) in the saved market,
with the saved seats, grids and memories, while the learners' settings change: the update rule (asynchronous,
synchronous or mixed, Asker, Fershtman and Pakes, 2022, AEA Papers and Proceedings 112), the learning rate
``alpha``, the exploration decay ``beta``, the discount factor ``delta``, or a bandit's ``exploration`` and
``noise``. Each learner keeps its Q-values (or a bandit its statistics), history, random stream and clock, so its
exploration goes on from where it was (``exp(-beta t)`` with the new ``beta`` and the saved ``t``).

The event is checked: the market must be the saved one (a changed market is ``kind = "market"``) and at least one
learner's settings must differ from the saved ones (otherwise the run would be the plain continuation, which
``continue_from`` without an event already is). The report names every setting that changed, firm by firm.
"""

from __future__ import annotations

import json

from sim.core.errors import InputError
from sim.core.records import to_plain
from sim.learning.saved import _first_difference, describe_layout

__all__ = ["PROTOCOL_SETTINGS", "check_protocol", "protocol_changes", "protocol_words"]

#: the settings of a learner that a change of protocol may change (the others, its family, grid and memory, stay)
PROTOCOL_SETTINGS = ("update", "alpha", "beta", "delta", "exploration", "noise")


def _rule(seat: dict) -> str:
    """A Q-learner's update rule in words (a saved description omits the asynchronous default)."""
    rule = seat.get("update", "asynchronous")
    if rule == "mixed":
        return f"mixed (counterfactual share {float(seat.get('counterfactual_share', 0.0)):g})"
    return rule


def protocol_changes(saved_seats: list, lineup) -> list[dict]:
    """Every learner setting that differs between the saved run and the line-up that continues it.

    Parameters
    ----------
    saved_seats : list of dict
        The saved file's ``seats`` (:func:`sim.learning.saved.describe_layout` of the saved run).
    lineup : sim.learning.lineup.Lineup
        The line-up after the event.

    Returns
    -------
    list of dict
        One per change, seats in order: ``firm`` (from 1), ``setting`` (one of :data:`PROTOCOL_SETTINGS`),
        ``before`` and ``after``. A fixed policy has no settings to change.
    """
    out = []
    for i, (a, b) in enumerate(zip(saved_seats, describe_layout(lineup))):
        if b.get("strategy") != "qlearning" or b.get("family") == "fixed":
            continue
        for name in PROTOCOL_SETTINGS:
            before, after = (_rule(a), _rule(b)) if name == "update" else (a.get(name), b.get(name))
            if before != after:
                out.append({"firm": i + 1, "setting": name, "before": before, "after": after})
    return out


def protocol_words(changes: list[dict]) -> str:
    """The change of protocol in words, for the report.

    Parameters
    ----------
    changes : list of dict
        :func:`protocol_changes`.

    Returns
    -------
    str
        E.g. ``"the learners' protocol changes: firm 1 update asynchronous -> synchronous; ..."``.
    """
    parts = []
    for c in changes:
        b, a = c["before"], c["after"]
        b, a = (f"{b:g}", f"{a:g}") if isinstance(b, float) and isinstance(a, float) else (b, a)
        parts.append(f"firm {c['firm']} {c['setting']} {b} -> {a}")
    return "the learners' protocol changes: " + "; ".join(parts)


def check_protocol(saved, lineup, market: dict | None) -> list[dict]:
    """Refuse a change of protocol that changes the market, or nothing.

    Parameters
    ----------
    saved : sim.learning.saved.SavedLearners
    lineup : sim.learning.lineup.Lineup
        The line-up after the event.
    market : dict or None
        The run's market (:meth:`sim.Market.to_dict`); None: not compared.

    Returns
    -------
    list of dict
        :func:`protocol_changes` (not empty).

    Raises
    ------
    InputError
        ``market.<setting>`` for a market that differs from the saved one; ``event.kind`` when no learner setting
        changes.
    """
    h = saved.header
    if market is not None:
        diff = _first_difference(h.get("market"), json.loads(json.dumps(to_plain(market))))
        if diff is not None:
            there = (h.get("market") or {}).get(diff, "not given")
            raise InputError(f"market.{diff}", f"a change of protocol keeps the saved market ({there!r} there, "
                                               f"{market.get(diff, 'not given')!r} here); a changed market is "
                                               "event.kind = 'market'")
    changes = protocol_changes(h.get("seats") or [], lineup)
    if not changes:
        raise InputError("event.kind", "'protocol' changes the learners' settings, but every learner's "
                                       f"{', '.join(PROTOCOL_SETTINGS)} are the saved ones; give the new settings in "
                                       "[learning] or [[strategies]], or continue without an [event]")
    return changes
