"""Benchmark section ``capacity_engine``: the simulation kernel in a capacity market against the linear Bertrand
kernel in the same run.

Workload: five firms, 1,000 periods x 4,000 replications, one thread, perfect monitoring. Two line-ups in each
market: every firm competing every period (in the capacity market this is the Bertrand-Edgeworth mixed
equilibrium, one price drawn per firm and period, the heaviest path) and grim trigger (the collusive path). The
reference is the same line-up in a homogeneous linear Bertrand market with five firms, timed in the same process,
so the ratio does not depend on the machine. Reports firm-periods per second and the ratio capacity / linear.
"""

from __future__ import annotations

from sim.bench import BenchOptions
from sim.bench.engine import best_time
from sim.models.capacity_repeated import CapacityStageMarket
from sim.models.market import market_from_dict
from sim.simulation.capacity import capacity_stage_levels
from sim.simulation.engine import compile_game, prepare_game, run_game
from sim.theory.capacity_analysis import capacity_market_from_dict

__all__ = ["CAPACITY_MARKET", "LINEAR_MARKET", "capacity_engine_benchmark"]

#: the invented five-kiln market of the shipped lime experiments
CAPACITY_MARKET = {"model": "capacity", "demand": "inelastic", "capacity": [40.0, 30.0, 20.0, 20.0, 10.0],
                   "market_size": 100.0, "reservation_price": 140.0, "cost": 60.0}
#: the reference: homogeneous Bertrand with linear demand, five firms
LINEAR_MARKET = {"model": "bertrand", "demand": "linear", "intercept": 140.0, "slope": 1.0, "cost": 60.0,
                 "n_firms": 5}
_LINEUPS = {"compete": [{"strategy": "always_compete", "seats": 5}],
            "grim trigger": [{"strategy": "grim_trigger", "seats": 5}]}


def capacity_engine_benchmark(opts: BenchOptions) -> dict:
    """The capacity_engine section (see the module notes).

    Parameters
    ----------
    opts : BenchOptions
        ``quick`` shrinks the workload to 100 periods x 400 replications; ``repeat`` sets the timing repeats.

    Returns
    -------
    dict
        Firm-periods per second of each market and line-up, and their ratios.
    """
    periods, reps = (100, 400) if opts.quick else (1000, 4000)
    stage, levels = capacity_stage_levels(CapacityStageMarket(capacity_market_from_dict(CAPACITY_MARKET)))
    linear = market_from_dict(LINEAR_MARKET)
    out = {"workload": f"5 firms, {periods} periods x {reps} replications, one thread, perfect monitoring",
           "ratios": {}}
    for name, lineup in _LINEUPS.items():
        games = {"capacity": compile_game(stage, levels, lineup), "linear Bertrand": prepare_game(linear, lineup)}
        rates = {}
        for market, game in games.items():
            run_game(game, 10, 10, 0.9, 1, threads=1, progress=False)  # compile or load the cache
            t = best_time(lambda g=game: run_game(g, periods, reps, 0.9, 1, threads=1, progress=False), opts.repeat)
            rates[market] = periods * reps * 5 / t
            out[f"{name}, {market}, firm-periods per second"] = rates[market]
        out["ratios"][f"{name}: capacity / linear Bertrand"] = rates["capacity"] / rates["linear Bertrand"]
    return out
