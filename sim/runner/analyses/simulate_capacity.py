"""The ``simulate`` kind for a capacity market (``[market] model = "capacity"``): the same tables, line-ups,
monitoring, run settings and deviation check as every other market (:mod:`sim.runner.analyses.simulate`), with
the stage game of price competition with capacity constraints (:mod:`sim.simulation.capacity`) and the
``[collusion]`` table of the capacity model (``agreement`` = ``"proportional"``, ``"equal"`` or ``"given"`` with
``shares``; an optional agreed ``price``)."""

from __future__ import annotations

from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.models.capacity_repeated import CapacityStageMarket
from sim.models.monitoring import monitoring_from_dict
from sim.simulation.capacity import capacity_stage_levels
from sim.simulation.engine import RUN_DEFAULTS, check_run, compile_game
from sim.theory.capacity_analysis import (
    agreement_of,
    capacity_market_from_dict,
    require_spare_capacity,
    require_static_equilibrium,
)
from strategies.registry import lineup_from_tables

__all__ = ["prepare_capacity_game"]

_TABLES = ("experiment", "market", "collusion", "monitoring", "strategies", "run", "deviation")


def prepare_capacity_game(doc: dict, run_table: dict) -> dict:
    """Validate a capacity market's simulation and compile its line-up.

    Parameters
    ----------
    doc : dict
        The experiment document.
    run_table : dict
        The ``[run]`` table without the kind's own keys.

    Returns
    -------
    dict
        ``market`` (CapacityStageMarket), ``market_table``, ``spec`` (the same market), ``agreement`` (the rule),
        ``actions`` (None), ``lineup``, ``monitoring``, ``run`` (validated), ``game``, ``stage`` and ``levels``.
    """
    for k in doc:
        if k not in _TABLES:
            raise InputError(k, f"unknown table for a simulation; allowed: {', '.join(_TABLES)}")
    pricing = capacity_market_from_dict(doc["market"])
    require_spare_capacity(pricing)
    require_static_equilibrium(pricing)
    n = pricing.n_firms
    coll = agreement_of(doc.get("collusion", {}), n)
    market = CapacityStageMarket(pricing, coll["rule"], coll["shares"], coll["price"])
    entries = doc.get("strategies")
    if not isinstance(entries, list):
        raise InputError("strategies", "missing: give the line-up as [[strategies]] entries")
    for k, e in enumerate(entries):
        if isinstance(e, dict) and e.get("trigger") == "equilibrium":
            raise InputError(f"strategies[{k + 1}].trigger", "'equilibrium' (the trigger-price equilibrium of "
                                                            "Green and Porter) is not available in a capacity market")
    mon = monitoring_from_dict(doc.get("monitoring", {}))
    r = dict(RUN_DEFAULTS)
    r.update(refuse_unknown(run_table, "run", tuple(RUN_DEFAULTS)))
    run = check_run(r["periods"], r["replications"], r["delta"], r["seed"], r["horizon"], r["continuation"],
                    r["paths"], n)
    lineup = lineup_from_tables(entries, n, "strategies")
    stage, levels = capacity_stage_levels(market)
    game = compile_game(stage, levels, lineup, mon)
    return {"market": market, "market_table": doc["market"], "spec": market, "agreement": coll["rule"],
            "actions": None, "lineup": lineup, "monitoring": mon, "run": run, "game": game, "stage": stage,
            "levels": levels}
