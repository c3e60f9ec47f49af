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
    t = dict(table or {})
    model = str(t.pop("model", "cournot")).capitalize()
    demand = t.pop("demand", "linear")
    cost = t.pop("cost", None)
    n = t.pop("n_firms", None)
    params = ", ".join(f"{k} {plain_values(v, brackets=True)}" for k, v in t.items())
    firms = f", {n} firms" if n is not None else (f", {len(cost)} firms" if isinstance(cost, list) else "")
    return f"{model} competition, {demand} demand ({params}), marginal cost {plain_values(cost, brackets=True)}{firms}"


def put_estimate(out: dict, name: str, e) -> None:
    out[name] = e.value
    out[f"{name}.se"] = e.se
    out[f"{name}.low"] = e.low
    out[f"{name}.high"] = e.high


def thin(x, max_points: int = 200) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    if n == 0:
        return np.zeros(0), np.zeros(0)
    idx = np.unique(np.round(np.linspace(0, n - 1, min(n, max_points))).astype(int))
    return (idx + 1).astype(float), x[idx]



_STAGE_CACHE: OrderedDict = OrderedDict()
_STAGE_CACHE_SIZE = 32


def stage_of(ms, market_table: dict, agreement: str, actions):
    """Stage game and levels of a market, solved once per process for each (market, agreement)."""

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
    """``x`` as a float, nan for None."""
    return math.nan if x is None else float(x)

_COLL_KEYS = ("agreement", "actions")
AGREEMENT_RULE = Options("joint", "symmetric", "proportional", "given")


def collusion_of(doc: dict) -> tuple[str, list | None]:
    """The agreement rule and the agreed actions (or None) of a document's ``[collusion]`` table."""
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
