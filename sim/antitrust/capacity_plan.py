"""The plan of a merger in a capacity market: the merging firms and the capacity moves that come with it.

``[merger]``: ``firms`` (two or more, by name or number from 1; they become one firm with the sum of their
capacities, in the place of the first of them), ``name`` (the merged firm's name; default the names joined by
``+``) and ``[[merger.capacity_moves]]`` (applied in order after the merger): ``source`` gives up ``amount`` of
capacity to ``target`` (a transfer) or, without a target, to a new firm named ``new_firm`` (a divestiture).
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.models.capacity_pricing import CapacityPricing

__all__ = ["CapacityMergerPlan", "apply_plan", "firm_position", "merger_plan_from_dict"]

_MOVE_KEYS = ("source", "amount", "target", "new_firm")


@dataclass(frozen=True)
class CapacityMergerPlan:
    """A validated ``[merger]`` table of a capacity market.

    Parameters
    ----------
    firms : tuple
        The merging firms as given (names or numbers from 1).
    name : str or None
        The merged firm's name.
    moves : tuple of dict
        Each capacity move: ``source``, ``amount``, ``target`` (None: a divestiture) and ``new_firm``.
    """

    firms: tuple
    name: str | None
    moves: tuple


def merger_plan_from_dict(table, market: CapacityPricing, prefix: str = "merger") -> CapacityMergerPlan:
    """Validate a ``[merger]`` table against the pre-merger market (the merger is applied once to check it).

    Parameters
    ----------
    table : dict
    market : CapacityPricing
        The pre-merger market.
    prefix : str

    Returns
    -------
    CapacityMergerPlan
    """
    t = refuse_unknown(table, prefix, ("firms", "name", "capacity_moves"))
    if "firms" not in t:
        raise InputError(f"{prefix}.firms", "missing (the merging firms, by name or number)")
    name = t.get("name")
    if name is not None and (not isinstance(name, str) or not name.strip()):
        raise InputError(f"{prefix}.name", f"must be a non-empty name, got {name!r}")
    moves = t.get("capacity_moves", [])
    if not isinstance(moves, list):
        raise InputError(f"{prefix}.capacity_moves", f"must be a list of tables, got {moves!r}")
    checked = []
    for k, mv in enumerate(moves):
        key = f"{prefix}.capacity_moves[{k + 1}]"
        mv = refuse_unknown(mv, key, _MOVE_KEYS)
        for need in ("source", "amount"):
            if need not in mv:
                raise InputError(f"{key}.{need}", "missing")
        checked.append({"source": mv["source"], "amount": mv["amount"], "target": mv.get("target"),
                        "new_firm": mv.get("new_firm", "Entrant")})
    fr = t["firms"]
    plan = CapacityMergerPlan(tuple(fr) if isinstance(fr, list) else fr, name, tuple(checked))
    apply_plan(market, plan, prefix)
    return plan


def apply_plan(market: CapacityPricing, plan: CapacityMergerPlan, prefix: str = "merger",
               amounts=None) -> tuple[CapacityPricing, list, list]:
    """The market after the merger and its capacity moves.

    Parameters
    ----------
    market : CapacityPricing
        The pre-merger market.
    plan : CapacityMergerPlan
    prefix : str
        Key path of the plan in errors.
    amounts : sequence of float, optional
        Amounts of the capacity moves in place of the plan's (the sensitivity analysis draws them).

    Returns
    -------
    post : CapacityPricing
    steps : list of str
        What happened, in words.
    firm_map : list of int
        Post-merger index (0-based) of each pre-merger firm.
    """
    firms = list(plan.firms) if isinstance(plan.firms, tuple) else plan.firms
    post = market.merge(firms, plan.name)
    pre_names = list(market.spec().names)
    post_names = list(post.spec().names)
    merged = [pre_names[firm_position(pre_names, f)] for f in firms]
    steps = [f"{' and '.join(merged)} merge into {post_names[firm_position(pre_names, firms[0])]} (capacities summed)"]
    for k, mv in enumerate(plan.moves):
        amount = mv["amount"] if amounts is None else amounts[k]
        try:
            post = post.move_capacity(mv["source"], amount, mv["target"], mv["new_firm"])
        except InputError as exc:
            raise InputError(exc.key.replace("change.", f"{prefix}.capacity_moves[{k + 1}].", 1)
                             .replace(".new_name", ".new_firm"), exc.message) from None
        src = mv["source"]
        to = mv["target"] if mv["target"] is not None else f"a new firm, {mv['new_firm']}"
        steps.append(f"{src} moves capacity {float(amount):g} to {to}")
    final = list(post.spec().names)
    merged_name = post_names[firm_position(pre_names, firms[0])]
    fmap = [final.index(merged_name) if n in merged else final.index(n) for n in pre_names]
    return post, steps, fmap


def firm_position(names, firm) -> int:
    """Index (0-based) of a firm given by name or number from 1 (already validated).

    Parameters
    ----------
    names : list of str
    firm : str or int

    Returns
    -------
    int
    """
    if isinstance(firm, str):
        return names.index(firm)
    return int(firm) - 1
