"""What the built-in analyses share: the general assumptions, a market's description, estimates as flat
metrics, thinned curves, and the stage game of a market solved once per process."""

from __future__ import annotations

import math
from collections import OrderedDict

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Options
from sim.core.tables import refuse_unknown
from sim.core.text import plain_values
from sim.core.values import canonical_json
from sim.simulation.engine import stage_levels

GENERAL_ASSUMPTIONS = (
    "Firms interact repeatedly in the stage game derived from the stated demand system, constant marginal "
    "costs and mode of competition (Cournot quantities or Bertrand prices); the collusive outcome is the stated "
    "agreement rule, not an estimate of actual conduct.",
    "Discount factors are common to all firms and constant over time; results are conditional on the parameter "
    "values in the experiment file and its sweep.",
)


def describe_market(table: dict) -> str:
    """A market table in one line for a report: competition, demand with its parameters, marginal cost, firms.

    Parameters
    ----------
    table : dict or None
        The experiment's ``[market]`` table as given (``model`` defaults to Cournot, ``demand`` to linear).

    Returns
    -------
    str
    """
    t = dict(table or {})
    model = str(t.pop("model", "cournot")).capitalize()
    demand = t.pop("demand", "linear")
    cost = t.pop("cost", None)
    n = t.pop("n_firms", None)
    params = ", ".join(f"{k} {plain_values(v, brackets=True)}" for k, v in t.items())
    firms = f", {n} firms" if n is not None else (f", {len(cost)} firms" if isinstance(cost, list) else "")
    return f"{model} competition, {demand} demand ({params}), marginal cost {plain_values(cost, brackets=True)}{firms}"


def put_estimate(out: dict, name: str, e) -> None:
    """Write an estimate into a cell's metrics as four entries: ``name``, ``name.se``, ``name.low``, ``name.high``.

    Parameters
    ----------
    out : dict
        The metrics, changed in place.
    name : str
        The metric's name.
    e : Estimate
        The point estimate with its standard error and confidence interval.
    """
    out[name] = e.value
    out[f"{name}.se"] = e.se
    out[f"{name}.low"] = e.low
    out[f"{name}.high"] = e.high


def thin(x, max_points: int = 200) -> tuple[np.ndarray, np.ndarray]:
    """At most ``max_points`` evenly spaced points of a series over periods, the first and last kept, for a figure.

    Parameters
    ----------
    x : array_like of shape (n_periods,)
        The series, one value per period.
    max_points : int
        The most points kept.

    Returns
    -------
    periods : ndarray of shape (n_kept,)
        The periods kept, counted from 1, as floats.
    values : ndarray of shape (n_kept,)
        The series at those periods.
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    if n == 0:
        return np.zeros(0), np.zeros(0)
    idx = np.unique(np.round(np.linspace(0, n - 1, min(n, max_points))).astype(int))
    return (idx + 1).astype(float), x[idx]



_STAGE_CACHE: OrderedDict = OrderedDict()
_STAGE_CACHE_SIZE = 32


def stage_of(ms, market_table: dict, agreement: str, actions):
    """Stage game and levels of a market, solved once per process for each (market, agreement).

    The last 32 markets solved are kept, keyed by the market table, the agreement and the actions.

    Parameters
    ----------
    ms : Market or MarketSpec
        The validated market.
    market_table : dict
        The ``[market]`` table it was built from (the key of the cache).
    agreement : str
        The collusive outcome the level ``"collusive"`` stands for (see :func:`collusion_of`).
    actions : list of float or None
        The agreed collusive actions with ``agreement = "given"``.

    Returns
    -------
    stage : StageGame
        The solved stage game.
    levels : StageLevels
        Its named profiles (:func:`sim.simulation.engine.stage_levels`).
    """

    key = canonical_json([market_table, agreement, actions])
    hit = _STAGE_CACHE.get(key)
    if hit is not None:
        _STAGE_CACHE.move_to_end(key)
        return hit
    out = stage_levels(ms, agreement, actions)
    _STAGE_CACHE[key] = out
    if len(_STAGE_CACHE) > _STAGE_CACHE_SIZE:
        _STAGE_CACHE.popitem(last=False)
    return out


def nan_if_none(x) -> float:
    """``x`` as a float, nan for None.

    Parameters
    ----------
    x : float or None

    Returns
    -------
    float
    """
    return math.nan if x is None else float(x)

_COLL_KEYS = ("agreement", "actions")
AGREEMENT_RULE = Options("joint", "symmetric", "proportional", "given")


def collusion_of(doc: dict) -> tuple[str, list | None]:
    """The agreement rule and the agreed actions (or None) of a document's ``[collusion]`` table.

    Parameters
    ----------
    doc : dict
        The experiment document (an absent ``[collusion]`` table means the joint-profit agreement).

    Returns
    -------
    agreement : {"joint", "symmetric", "proportional", "given"}
        The rule; ``"given"`` whenever actions are given.
    actions : list or None
        The agreed actions, one per product, when given.

    Raises
    ------
    InputError
        ``collusion`` for a key it does not know; ``collusion.agreement`` for an unknown rule;
        ``collusion.actions`` when it is not a non-empty list, or missing with ``agreement = "given"``.
    """
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", _COLL_KEYS)
    actions = coll.get("actions")
    agreement = AGREEMENT_RULE.check("collusion.agreement", coll.get("agreement", "given" if actions else "joint"))
    if actions is not None:
        if not isinstance(actions, list) or not actions:
            raise InputError("collusion.actions", f"must be a list of numbers (one per product), got {actions!r}")
        agreement = "given"
    elif agreement == "given":
        raise InputError("collusion.actions", "missing: agreement = 'given' needs the agreed actions")
    return agreement, actions
