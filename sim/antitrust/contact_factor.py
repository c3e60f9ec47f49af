"""The factor table's multimarket-contact row: the merging firms' other markets, pooled with the assessed one.

Firms that meet in several markets can pool their incentive constraints (Bernheim and Whinston, 1990,
"Multimarket contact and collusive behavior", RAND Journal of Economics 21(1)): when a deviation in any market is
punished in every market the deviator shares with its rivals, a firm keeps the agreement when the sum over its
markets of the gains from cheating is at most the sum of the discounted losses. A merger joins the merging firms'
constraints: markets where only one of them sold become linked to the assessed market through the merged firm.

The user lists the other markets (``[[assess.other_markets]]``: each with its demand and costs, the names of the
firms that meet there and optionally its growth rate). :func:`check_other_markets` validates them before any work
and builds the contact game before the merger (the assessed market first, with the experiment's firm names, at
no growth) with each other market where two merging firms both sell merged as the assessed market is
(:func:`sim.antitrust.merger.merge`, same efficiency). :func:`contact_row` computes the pooled thresholds before and
after (:func:`sim.theory.contact_allocation.merger_contact`, grim trigger in every market) and returns the row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sim.antitrust.compare import finite_or_none, rank
from sim.antitrust.factors import _direction_from, _row
from sim.antitrust.merger import Merger, merge
from sim.core.errors import InputError
from sim.theory.contact_allocation import merger_contact
from sim.theory.multimarket import ContactGame, ContactMarket

__all__ = ["OTHER_MARKET_KEYS", "ContactSetup", "check_other_markets", "contact_row"]

#: keys of one ``[[assess.other_markets]]`` entry
OTHER_MARKET_KEYS = ("label", "firms", "growth", "market")
_KEY = "assess.other_markets"
#: label of the assessed market in the contact game
ASSESSED = "assessed market"


@dataclass(frozen=True)
class ContactSetup:
    """The validated contact game of an assessment.

    Parameters
    ----------
    game : ContactGame
        The markets before the merger: the assessed market (index 0) and the other markets.
    mapping : dict
        Firm name before -> name after (the merging firms -> the merged firm's name).
    replacements : dict
        Market index -> the market after the merger, where two merging firms both sell.
    merging : tuple of str
        The merging firms' names.
    merged : str
        The merged firm's name.
    """

    game: ContactGame
    mapping: dict
    replacements: dict
    merging: tuple
    merged: str


def _rekey(exc: InputError) -> InputError:
    # the contact game numbers the assessed market 0, so its market k is the user's entry k (counted from 1)
    key = exc.key
    if key.startswith("markets["):
        k = int(key[len("markets["):key.index("]")])
        key = f"{_KEY}[{k}]{key[key.index(']') + 1:]}"
    elif key in ("firms", "agreement", "markets"):
        key = _KEY
    return InputError(key, exc.message)


def check_other_markets(value, mres, agreement: str, efficiency: float = 0.0) -> ContactSetup | None:
    """Validate ``assess.other_markets`` and build the contact game, before any work.

    Parameters
    ----------
    value : list of dict or None
        One table per other market: ``market`` (a market table), ``firms`` (the names of its firms in the order of
        its firm indices; names of the experiment's firms or of other firms), optional ``label`` and ``growth``
        (in (-1, 1)).
    mres : MergerResult
        The assessed market before and after the merger, with the firm names.
    agreement : str
        The agreement in every market.
    efficiency : float
        The merger's proportional cost saving, applied where two merging firms both sell in another market.

    Returns
    -------
    ContactSetup or None
        None when no other market is given.

    Raises
    ------
    InputError
        Naming ``assess.other_markets[k]...`` (k counted from 1).
    """
    if value is None:
        return None
    if not isinstance(value, list) or not value or not all(isinstance(d, dict) for d in value):
        raise InputError(_KEY, f"must be a non-empty list of tables ([[assess.other_markets]]), got {value!r}")
    others = []
    for k, d in enumerate(value):
        unknown = [x for x in d if x not in OTHER_MARKET_KEYS]
        if unknown:
            raise InputError(f"{_KEY}[{k + 1}].{unknown[0]}", f"unknown key; allowed: {', '.join(OTHER_MARKET_KEYS)}")
        try:
            others.append(ContactMarket.from_dict({**d, "label": d.get("label", f"other market {k + 1}")},
                                                  f"markets[{k + 1}]"))
        except InputError as exc:
            raise _rekey(exc) from None
    names = list(mres.names_pre)
    declared = tuple(dict.fromkeys([*names, *(f for cm in others for f in (cm.firms or ()) if isinstance(f, str))]))
    try:
        game = ContactGame(declared, (ContactMarket(mres.pre, tuple(names), 0.0, None, ASSESSED), *others),
                           agreement)
    except InputError as exc:
        raise _rekey(exc) from None
    merging = tuple(names[i] for i in mres.merging)
    merged = mres.names_post[mres.merged]
    replacements = {0: mres.post}
    for m, cm in enumerate(game.markets[1:], start=1):
        here = [f for f in cm.firms if f in merging]
        if len(here) > 1 and len(here) == len(cm.firms):
            raise InputError(f"{_KEY}[{m}].firms", f"the merger leaves one firm in {cm.label} (a monopoly has no "
                                                   "incentive constraint to pool); leave this market out")
        if len(here) > 1:
            try:
                replacements[m] = merge(cm.market, Merger(here, efficiency=efficiency, names=list(cm.firms)),
                                        f"{_KEY}[{m}]").post
            except InputError as exc:
                raise InputError(f"{_KEY}[{m}]", f"the merger in this market: {exc.message}") from None
    mapping = {f: (merged if f in merging else f) for f in declared}
    return ContactSetup(game, mapping, replacements, merging, merged)


def _worst(values) -> float:
    values = list(values)
    if not values or any(not math.isfinite(x) for x in values):
        return math.nan
    return max(values)


def _side(pt, firms: tuple, market: int = 0) -> dict:
    """The assessed market alone and with contact, and the pooled thresholds of ``firms``, from PooledThresholds."""
    pres = pt.presence
    inside = [i for i in range(len(pt.firms)) if pres[i, market]]
    rows = []
    for f in firms:
        i = pt.firms.index(f)
        own = [pt.standalone[i, m] for m in range(pres.shape[1]) if pres[i, m]]
        rows.append({"firm": f, "markets": int(pres[i].sum()), "alone": finite_or_none(_worst(own)),
                     "pooled": finite_or_none(pt.pooled[i])})
    return {"alone": finite_or_none(pt.market_thresholds[market]),
            "pooled": finite_or_none(_worst(pt.pooled[i] for i in inside)),
            "merging": rows, "common": finite_or_none(pt.common)}


def contact_row(setup: ContactSetup) -> dict:
    """The multimarket-contact row of the factor table.

    Parameters
    ----------
    setup : ContactSetup

    Returns
    -------
    dict
        A factor-table row (see :func:`sim.antitrust.factors.factor_table`); ``values`` holds per side the
        assessed market's threshold alone and with its firms' constraints pooled over their markets, the merging
        firms' (after: the merged firm's) pooled thresholds, and the contact the merger adds.
    """
    ch = merger_contact(setup.game, setup.mapping, setup.replacements)
    vals = {"before": _side(ch.before, setup.merging), "after": _side(ch.after, (setup.merged,)),
            "added_contact": [{"firm": a, "with": b, "markets_before": int(x), "markets_after": int(y)}
                              for a, b, x, y in ch.added_contact],
            "markets": list(ch.before.labels)}
    dirs = [_direction_from(vals[s]["alone"], vals[s]["pooled"]) if math.isfinite(rank(vals[s]["alone"]))
            or math.isfinite(rank(vals[s]["pooled"])) else "not computed" for s in ("before", "after")]
    direction = dirs[0] if dirs[0] == dirs[1] else "mixed"
    added = "; ".join(f"{x['firm']} and {x['with']} meet in {x['markets_after']} markets (before: at most "
                      f"{x['markets_before']})" for x in vals["added_contact"])
    note = (f"after the merger {added}" if added else "the merger adds no contact between firms") + (
        "; grim trigger in every market, a deviation anywhere punished in every market the firms share; the "
        "assessed market at no growth, the other markets at their stated growth")
    if direction == "no effect":
        note += ("; no effect is what Bernheim and Whinston (1990) find for markets alike: pooling identical "
                 "constraints changes nothing")
    row = _row("contact", f"the assessed market pooled with {len(vals['markets']) - 1} other market(s) where the "
                          "firms meet: " + ", ".join(vals["markets"][1:]),
               "critical discount factor (grim trigger) of the assessed market on its own and with every firm's "
               "incentive constraints pooled over its markets (the largest pooled threshold of its firms)",
               vals, direction, note)
    if direction == "no effect":
        # the literature's "facilitates" is weak: with markets alike it predicts no effect, so there is no disagreement
        row["agrees"] = None
    return row
