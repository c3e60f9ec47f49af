"""Global sensitivity of a capacity merger's effect on the threshold, when every uncertain input moves at once.

``[assess.global_sensitivity]`` of a capacity experiment:

* ``inputs``: a table of uncertain inputs, each a range ``[low, high]`` (drawn uniformly): ``cost``,
  ``reservation_price``, ``market_size``, ``capacity_N`` (capacity of pre-merger firm N, from 1) and ``move_N`` (the
  amount of the merger's capacity move N, from 1);
* ``n_base`` (a power of two, default 64), ``seed`` (default 0), ``confidence`` (default 0.95).

The outputs are the critical discount factors under minmax punishments before and after the merger and their
change (:func:`minmax_threshold`); Sobol indices come from :func:`sim.antitrust.global_sensitivity.sobol_indices`
(SALib). A market whose capacities do not exceed the demand at the agreed price needs no coordination: its threshold
counts as 0; a firm no discount factor below one holds counts as 1. Before any work every corner of the ranges is
checked to give valid markets, so that no draw fails.
"""

from __future__ import annotations

import itertools
import math
import numbers
import re

import numpy as np

from sim.antitrust.capacity_plan import apply_plan
from sim.antitrust.global_sensitivity import SobolResult, sobol_indices
from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.models.capacity_pricing import CapacityPricing, threshold

__all__ = ["MAX_CORNER_INPUTS", "capacity_sobol", "minmax_threshold", "sensitivity_settings"]

_KEY = "assess.global_sensitivity"
_SCALARS = ("cost", "reservation_price", "market_size")
#: the corner check visits 2**d corners; more inputs are checked at their bounds one at a time
MAX_CORNER_INPUTS = 10
#: largest number of base samples (each costs n_inputs + 2 evaluations of both markets)
MAX_BASE = 8192


def minmax_threshold(market: CapacityPricing, agreement: dict) -> float:
    """The market's critical discount factor under minmax punishments (no static equilibrium needed).

    Parameters
    ----------
    market : CapacityPricing
    agreement : dict
        ``rule``, ``shares``, ``price``.

    Returns
    -------
    float
        0 when the capacities do not exceed the demand at the agreed price; 1 when a firm cannot be held.
    """
    s = market.spec()
    p_ref = agreement["price"]
    if p_ref is None:
        p_ref = s.reservation_price if not s.linear else 0.5 * (s.reservation_price + s.cost)
    if s.total_capacity <= float(s.quantity(p_ref)) * (1 + 1e-12):
        return 0.0
    agreed = market.agreement(agreement["rule"], agreement["shares"], agreement["price"])
    dev, _, _ = market.best_deviations(agreed)
    per_firm = threshold(agreed.profits, dev, market.minmax())
    return 1.0 if np.any(~np.isfinite(per_firm)) else float(np.max(per_firm))


def _input_names(n_firms: int, n_moves: int) -> list:
    return [*_SCALARS, *(f"capacity_{i + 1}" for i in range(n_firms)), *(f"move_{k + 1}" for k in range(n_moves))]


def sensitivity_settings(table, market: CapacityPricing, plan) -> dict:
    """Validate ``[assess.global_sensitivity]`` (errors name ``assess.global_sensitivity.<key>``).

    Parameters
    ----------
    table : dict
    market : CapacityPricing
        The pre-merger market.
    plan : CapacityMergerPlan

    Returns
    -------
    dict
        ``inputs`` (name -> [low, high]), ``n_base``, ``seed``, ``confidence``.
    """
    t = refuse_unknown(table, _KEY, ("inputs", "n_base", "seed", "confidence"))
    inputs = t.get("inputs")
    if not isinstance(inputs, dict) or not inputs:
        raise InputError(f"{_KEY}.inputs", f"must be a table of uncertain inputs (name = [low, high]), got {inputs!r}")
    allowed = _input_names(market.spec().n_firms, len(plan.moves))
    out = {}
    for name, rng in inputs.items():
        key = f"{_KEY}.inputs.{name}"
        if name not in allowed:
            raise InputError(key, f"unknown input; allowed: {', '.join(allowed)}")
        if not isinstance(rng, list) or len(rng) != 2 or any(
                isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(v) for v in rng):
            raise InputError(key, f"must be a range [low, high] of two finite numbers, got {rng!r}")
        if not rng[0] < rng[1]:
            raise InputError(key, f"empty range: low must be below high, got [{rng[0]:g}, {rng[1]:g}]")
        out[name] = [float(rng[0]), float(rng[1])]
    n_base = t.get("n_base", 64)
    if (isinstance(n_base, bool) or not isinstance(n_base, int) or n_base < 2 or n_base & (n_base - 1)
            or n_base > MAX_BASE):
        raise InputError(f"{_KEY}.n_base", f"must be a power of two from 2 to {MAX_BASE}, got {n_base!r}")
    seed = t.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise InputError(f"{_KEY}.seed", f"must be a non-negative integer, got {seed!r}")
    conf = t.get("confidence", 0.95)
    if isinstance(conf, bool) or not isinstance(conf, int | float) or not 0 < conf < 1:
        raise InputError(f"{_KEY}.confidence", f"must be a number in (0, 1), got {conf!r}")
    settings = {"inputs": out, "n_base": n_base, "seed": seed, "confidence": float(conf)}
    _check_corners(market, plan, settings)
    return settings


def _markets(market: CapacityPricing, plan, values: dict):
    """The markets before and after at given input values."""
    changes = {k: values[k] for k in _SCALARS if k in values}
    caps = [float(c) for c in market.spec().capacity]
    for k, v in values.items():
        m = re.fullmatch(r"capacity_(\d+)", k)
        if m:
            caps[int(m.group(1)) - 1] = v
    pre = market.clone(capacity=caps, names=list(market.spec().names), **changes)
    amounts = [values.get(f"move_{k + 1}", mv["amount"]) for k, mv in enumerate(plan.moves)]
    post, _, _ = apply_plan(pre, plan, amounts=amounts)
    return pre, post


def _check_corners(market, plan, settings) -> None:
    names = list(settings["inputs"])
    if len(names) <= MAX_CORNER_INPUTS:
        corners = itertools.product(*(settings["inputs"][n] for n in names))
        points = [dict(zip(names, c)) for c in corners]
    else:
        points = [{n: settings["inputs"][n][j]} for n in names for j in (0, 1)]
    for p in points:
        try:
            _markets(market, plan, p)[1].spec()
        except InputError as exc:
            where = ", ".join(f"{k} = {v:g}" for k, v in p.items())
            raise InputError(f"{_KEY}.inputs", f"the ranges reach an invalid market ({where}): {exc}") from None


class _Model:
    """The thresholds before and after as a function of the uncertain inputs (picklable)."""

    def __init__(self, market, plan, agreement):
        self.market, self.plan = market, plan
        self.agreement = agreement if agreement["rule"] != "given" else {"rule": "proportional", "shares": None,
                                                                          "price": agreement["price"]}

    def __call__(self, values: dict) -> dict:
        pre, post = _markets(self.market, self.plan, values)
        t0, t1 = minmax_threshold(pre, self.agreement), minmax_threshold(post, self.agreement)
        # rounded so that an output the inputs cannot move is exactly constant (no Sobol indices of rounding noise)
        return {"before": round(t0, 10), "after": round(t1, 10), "change": round(t1 - t0, 10)}


def capacity_sobol(market: CapacityPricing, plan, agreement: dict, settings: dict) -> SobolResult:
    """Sobol indices of the minmax-punishment thresholds before and after the merger and of their change.

    Parameters
    ----------
    market : CapacityPricing
        The pre-merger market.
    plan : CapacityMergerPlan
    agreement : dict
        ``rule``, ``shares``, ``price`` (given shares fall back to shares proportional to capacities, since the
        capacities move).
    settings : dict
        :func:`sensitivity_settings`.

    Returns
    -------
    SobolResult
        Outputs ``before``, ``after``, ``change``.
    """
    return sobol_indices(_Model(market, plan, agreement), settings["inputs"], n_base=settings["n_base"],
                         seed=settings["seed"], confidence=settings["confidence"])
