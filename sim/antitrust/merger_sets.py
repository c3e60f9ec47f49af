"""The equilibrium payoff sets before and after a merger: what any punishment can sustain on each side.

The named schemes of the assessment (grim trigger, Nash reversion for T periods, the best symmetric stick and
carrot) each fix the shape of the punishment. With ``[assess.payoff_sets]`` the assessment also compares the sets of
subgame-perfect equilibrium payoffs of the two markets (Abreu, Pearce and Stacchetti, 1990, Econometrica 58(5)) on
action grids, reusing the thresholds analysis's any-punishment part (:mod:`sim.theory.any_punishment`) on each side:

* the lowest critical discount factor of the agreement when a deviation meets the deviator's worst equilibrium
  payoff (Abreu, 1988, Econometrica 56(2)), as an interval ``(low, high]``, beside grim trigger and the best
  symmetric stick and carrot on the same grid;
* at the assessment's discount factor: each firm's worst equilibrium payoff (the value of its optimal penal code),
  the best joint profit and the symmetric slice (the payoffs at which every firm earns the same: a segment
  ``[t_min, t_max]``), each bracketed by the inner set (constructed equilibria) and the outer set (every
  equilibrium payoff), :func:`sim.theory.practice.sustainable_frontier`;
* the sets themselves projected on the profits of firms 1 and 2 (for the figure).

Two firms: exact sets after Abreu and Sannikov (2014, Theoretical Economics 9); more firms: outer approximations in
fixed directions after Judd, Yeltekin and Conklin (2003, Econometrica 71(4)). :func:`check_payoff_sets` validates
the table and its cost before any work; :func:`compare_payoff_sets` computes. A model result is evidence under the
stated assumptions (the grid, the demand system, perfect monitoring, pure strategies, public randomisation), not
proof of conduct.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.records import Record
from sim.core.tables import refuse_unknown
from sim.theory.any_punishment import (
    AnyPunishmentResult,
    AnyPunishmentSpec,
    any_punishment_analysis,
    check_any_punishment,
    estimate_any_punishment,
)
from sim.theory.discretize import discretize
from sim.theory.payoff_sets import equilibrium_payoffs
from sim.theory.practice import sustainable_frontier, symmetric_slice

__all__ = ["PAYOFF_SET_KEYS", "PayoffSetSide", "PayoffSetsComparison", "PayoffSetsSpec", "check_payoff_sets",
           "compare_payoff_sets", "estimate_payoff_sets", "symmetric_slice"]

_KEY = "assess.payoff_sets"
#: keys of the ``[assess.payoff_sets]`` table
PAYOFF_SET_KEYS = ("grid", "directions", "tolerance")


@dataclass(frozen=True)
class PayoffSetsSpec:
    """The validated ``[assess.payoff_sets]`` table, one any-punishment question per side.

    Parameters
    ----------
    before, after : AnyPunishmentSpec
        Grid, directions, tolerance and the discount factor (the assessment's) of each side.
    """

    before: AnyPunishmentSpec
    after: AnyPunishmentSpec


def _rekeyed(exc: InputError, side: str) -> InputError:
    key = exc.key.replace("any_punishment", _KEY, 1)
    return InputError(key, f"{exc.message} (the market {side} the merger)")


def check_payoff_sets(table, mres, agreement: str, delta: float) -> PayoffSetsSpec | None:
    """Validate ``[assess.payoff_sets]`` against both markets, before any work.

    Parameters
    ----------
    table : dict or None
        ``grid`` (actions per firm, one count for both markets; default 15), ``directions`` (outer-set directions
        for three firms or more; default 64 for three, 24 per firm beyond) and ``tolerance`` (width of the interval
        on the discount factor, in (0, 0.1]; default 0.001). None: no payoff sets.
    mres : MergerResult
        The markets before and after the merger.
    agreement : str
    delta : float
        The assessment's discount factor (the sets are reported there).

    Returns
    -------
    PayoffSetsSpec or None

    Raises
    ------
    InputError
        Naming ``assess.payoff_sets.grid`` (a list, too few actions for the key levels, too large),
        ``assess.payoff_sets.directions``, ``assess.payoff_sets.tolerance``, or ``assess.payoff_sets`` for a market
        whose firms own several products.
    """
    if table is None:
        return None
    if not isinstance(table, dict):
        raise InputError(_KEY, f"must be a table (grid, directions, tolerance), got {table!r}")
    table = refuse_unknown(table, _KEY, PAYOFF_SET_KEYS)
    if isinstance(table.get("grid"), list):
        raise InputError(f"{_KEY}.grid", "give one count of actions per firm (the markets before and after have "
                                         f"different numbers of firms), got {table['grid']!r}")
    specs = {}
    for side, market in (("before", mres.pre), ("after", mres.post)):
        sub = dict(table)
        if "directions" in sub and market.spec().n_firms == 2:
            del sub["directions"]  # exact sets for two firms: no directions are used
        try:
            specs[side] = check_any_punishment({**sub, "delta": delta}, market, agreement)
        except InputError as exc:
            raise _rekeyed(exc, side) from None
    return PayoffSetsSpec(specs["before"], specs["after"])


def estimate_payoff_sets(spec: PayoffSetsSpec) -> dict:
    """Memory and time of both sides' payoff sets, estimated before any work.

    Parameters
    ----------
    spec : PayoffSetsSpec

    Returns
    -------
    dict
        ``bytes`` (the larger side's peak), ``sets`` (payoff sets computed, both sides, one more each at the
        assessment's discount factor) and ``seconds`` (rough, one core); see
        :func:`sim.theory.any_punishment.estimate_any_punishment`.
    """
    b, a = estimate_any_punishment(spec.before), estimate_any_punishment(spec.after)
    per_set_b, per_set_a = b["seconds"] / b["sets"], a["seconds"] / a["sets"]
    return {"bytes": max(b["bytes"], a["bytes"]), "sets": b["sets"] + a["sets"] + 2,
            "seconds": b["seconds"] + a["seconds"] + per_set_b + per_set_a}


@dataclass(frozen=True)
class PayoffSetSide(Record):
    """The equilibrium payoff set of one side at the assessment's discount factor.

    Parameters
    ----------
    label : {"before", "after"}
    names : list of str
        Firm names, length n_firms.
    sets : AnyPunishmentResult
        The lowest threshold under any punishment with its interval, the named schemes on the same grid, the worst
        equilibrium payoffs and the sets projected on firms 1 and 2, at the assessment's discount factor.
    joint : ndarray of shape (2,)
        The best joint profit (sum over firms of the discounted average profit) of an equilibrium: at least the
        first (inner set), at most the second (outer set).
    symmetric : ndarray of shape (4,)
        The symmetric slice ``[t_min, t_max]``: ``t_min`` lies in ``[symmetric[0], symmetric[1]]`` (outer, inner) and
        ``t_max`` in ``[symmetric[2], symmetric[3]]`` (inner, outer); nan where a set misses the diagonal.
    """

    label: str
    names: list
    sets: AnyPunishmentResult
    joint: np.ndarray
    symmetric: np.ndarray


@dataclass(frozen=True)
class PayoffSetsComparison(Record):
    """The payoff sets before and after a merger.

    Parameters
    ----------
    delta : float
        The assessment's discount factor.
    before, after : PayoffSetSide
    direction : str
        The merger's effect on the lowest threshold under any punishment: ``"easier"`` (the interval after lies
        below the one before), ``"harder"``, or ``"undetermined"`` (the intervals overlap).
    """

    delta: float
    before: PayoffSetSide
    after: PayoffSetSide
    direction: str

    def sides(self) -> tuple:
        """Both sides with their labels.

        Returns
        -------
        tuple of (str, PayoffSetSide)
        """
        return ("before", self.before), ("after", self.after)


def _side(label: str, market, names: list, spec: AnyPunishmentSpec, agreement: str) -> PayoffSetSide:
    ap = any_punishment_analysis(market, spec, agreement)
    nan2, nan4 = np.full(2, np.nan), np.full(4, np.nan)
    if not math.isfinite(ap.delta):
        return PayoffSetSide(label, list(names), ap, nan2, nan4)
    # the full-dimensional set at the assessment's delta (the result keeps its projection on two firms only)
    game = discretize(market, list(spec.grid), agreement=agreement)
    res = equilibrium_payoffs(game, ap.delta, method=spec.method, directions=spec.directions or None)
    fr = sustainable_frontier(res)
    lo_in, hi_in = symmetric_slice(res.inner_vertices)
    lo_out, hi_out = symmetric_slice(res.outer_vertices)
    return PayoffSetSide(label, list(names), ap, np.asarray(fr.joint, float),
                         np.array([lo_out, lo_in, hi_in, hi_out], dtype=float))


def _direction(before: AnyPunishmentResult, after: AnyPunishmentResult) -> str:
    # a threshold not certified below one (high nan) ranks above every number
    def high(ap):
        return ap.high if math.isfinite(ap.high) else math.inf

    if high(after) <= before.low:
        return "easier"
    if high(before) <= after.low:
        return "harder"
    return "undetermined"


def compare_payoff_sets(spec: PayoffSetsSpec, mres, agreement: str, step=None) -> PayoffSetsComparison:
    """The equilibrium payoff sets of the markets before and after the merger.

    Parameters
    ----------
    spec : PayoffSetsSpec
        From :func:`check_payoff_sets`.
    mres : MergerResult
    agreement : str
    step : callable, optional
        ``step(what)``, called after each side (progress).

    Returns
    -------
    PayoffSetsComparison
    """
    sides = {}
    for label, market, names, sp in (("before", mres.pre, mres.names_pre, spec.before),
                                      ("after", mres.post, mres.names_post, spec.after)):
        sides[label] = _side(label, market, names, sp, agreement)
        if step is not None:
            step(f"payoff sets {label}")
    return PayoffSetsComparison(float(spec.before.delta), sides["before"], sides["after"],
                                _direction(sides["before"].sets, sides["after"].sets))
