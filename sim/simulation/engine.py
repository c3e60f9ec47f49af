"""Repeated-game simulation: play a line-up of automaton strategies in a market, many times.

Three layers, as everywhere in the package:

* :func:`simulate` -- the validated public entry: market, line-up, monitoring and run settings in;
  a :class:`~sim.simulation.results.SimulationResult` out (per-firm, per-replication arrays, persistence metrics
  with confidence intervals, and the analytic baseline side by side).
* :mod:`sim.simulation.game` and :mod:`sim.simulation.driver` -- the lower-level entry for callers that
  play many small matches (tournaments, sweeps): the stage game is solved once per market
  (:func:`stage_levels`), a line-up compiles to arrays in microseconds (:func:`compile_game`), and
  :func:`run_game` allocates the buffers, derives the seeds and calls the kernel, without re-validating
  the compiled arrays. Their public names are importable from here too.
* :mod:`sim.simulation.kernel` -- the numba kernel; :mod:`sim.simulation.twin` -- its plain-Python twin.
"""

from __future__ import annotations

from sim.core.errors import InputError
from sim.core.parallel import check_threads
from sim.core.params import Integer, Options, Real
from sim.core.tables import refuse_unknown
from sim.models.market import MarketSpec, market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.models.stagecore import market_owner
from sim.simulation.driver import RawRun, alive_by_period, kernel_groups, run_game
from sim.simulation.game import Game, as_monitoring, compile_game, prepare_game, stage_levels
from sim.simulation.results import summarize

__all__ = ["RUN_CONSTRAINTS", "RUN_DEFAULTS", "Game", "RawRun", "alive_by_period", "as_monitoring", "check_run",
           "compile_game", "kernel_groups", "prepare_game", "run_game", "simulate", "simulation_from_dict",
           "stage_levels"]

#: largest number of path values (periods x replications x products) held in memory
MAX_PATH_VALUES = 50_000_000


# --------------------------------------------------------------------------------------------------
# Public entry
# --------------------------------------------------------------------------------------------------

RUN_CONSTRAINTS = {
    "periods": Integer(1, 1_000_000_000),
    "replications": Integer(1, 1_000_000_000),
    "delta": Real(0, 1, closed="neither"),
    "seed": Integer(0, 2**63 - 1),
    "horizon": Options("fixed", "random"),
    "continuation": Real(0, 1, closed="right"),
    "paths": Integer(0, 1_000_000_000),
}


def check_run(periods, replications, delta, seed, horizon, continuation, paths, n_products: int,
              prefix: str = "run") -> dict:
    """Validate run settings; errors name ``run.<key>``.

    Parameters
    ----------
    periods : int
        Number of periods (the cap of a random horizon), in [1, 1e9].
    replications : int
        Number of replications, in [1, 1e9].
    delta : float
        Discount factor, in (0, 1).
    seed : int
        The user's seed, in [0, 2**63 - 1].
    horizon : {"fixed", "random"}
        Whether the game ends after each period with probability ``1 - continuation``.
    continuation : float
        Continuation probability, in (0, 1].
    paths : int
        Replications whose full paths are recorded, at most ``replications``.
    n_products : int
        Number of products (the size of the recorded paths).
    prefix : str
        Key path of the run table.

    Returns
    -------
    dict
        The validated settings by name.
    """
    vals = dict(periods=periods, replications=replications, delta=delta, seed=seed, horizon=horizon,
                continuation=continuation, paths=paths)
    out = {k: RUN_CONSTRAINTS[k].check(f"{prefix}.{k}", v) for k, v in vals.items()}
    if out["paths"] > out["replications"]:
        raise InputError(f"{prefix}.paths", f"must be at most run.replications ({out['replications']}), "
                                            f"got {out['paths']}")
    need = out["paths"] * out["periods"] * max(n_products, 3)
    if need > MAX_PATH_VALUES:
        raise InputError(f"{prefix}.paths", f"{out['paths']} full paths of {out['periods']} periods would hold "
                                            f"{need:.3g} values per array (at most {MAX_PATH_VALUES:.3g}); record "
                                            f"fewer replications")
    return out


def simulate(market, lineup, monitoring=None, periods: int = 1000, replications: int = 1000,
             delta: float = 0.95, seed: int = 0, horizon: str = "fixed", continuation: float = 0.99,
             paths: int = 0, agreement: str = "joint", actions=None, threads: int | None = None,
             confidence: float = 0.95, baseline: bool = True, progress=None, key=(0,)):
    """Simulate a line-up of strategies in a market.

    Parameters
    ----------
    market : Market or MarketSpec
        The market.
    lineup : list of Automaton, list of dict, or Automaton
        One strategy per firm (seat order), experiment-file entries (dicts with ``strategy`` and
        optional ``seats``), or one strategy played by every firm.
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    periods : int
        Number of periods (the cap of a random horizon).
    replications : int
        Number of replications.
    delta : float in (0, 1)
        Discount factor of payoffs (with a random horizon, the continuation probability discounts
        on top of it).
    seed : int
        The user's seed.
    horizon : {"fixed", "random"}
        ``random``: the game ends after each period with probability ``1 - continuation``.
    continuation : float in (0, 1]
        Continuation probability of a random horizon.
    paths : int
        Number of replications (the first ones) whose full paths are recorded.
    agreement : str
        The collusive outcome that the level ``"collusive"`` stands for (see
        :func:`sim.theory.equilibrium.collusive_outcome`).
    actions : array_like of shape (n_products,), optional
        The collusive actions with ``agreement = "given"``.
    threads : int, optional
        Number of threads (default: numba's setting). Results do not depend on it.
    confidence : float in (0, 1)
        Level of the confidence intervals (see :mod:`sim.core.stats`).
    baseline : bool
        Whether to compute the analytic baseline (thresholds, trigger-price model, time to breakdown).
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    key : tuple of int
        Stream family of the seeds (cells of a sweep use different keys).

    Returns
    -------
    SimulationResult
        Per-replication arrays, persistence metrics with confidence intervals and the analytic baseline.
    """

    ms = market if isinstance(market, MarketSpec) else market.spec()
    mon = as_monitoring(monitoring)
    mon.validated()
    P = int(market_owner(ms).shape[0])
    run = check_run(periods, replications, delta, seed, horizon, continuation, paths, P)
    threads = check_threads(threads)
    confidence = Real(0, 1, closed="neither").check("confidence", confidence)
    game = prepare_game(ms, lineup, mon, agreement, actions)
    raw = run_game(game, run["periods"], run["replications"], run["delta"], run["seed"], key, run["horizon"],
                   run["continuation"], run["paths"], threads, progress)
    return summarize(raw, game, run, confidence=confidence, baseline=baseline)


# --------------------------------------------------------------------------------------------------
# Experiment tables
# --------------------------------------------------------------------------------------------------

SIMULATE_TABLES = ("experiment", "market", "collusion", "monitoring", "strategies", "run")
_EXPERIMENT_KEYS = ("name", "kind", "description", "currency", "period")
_COLLUSION_KEYS = ("agreement", "actions")
RUN_DEFAULTS = {"periods": 1000, "replications": 1000, "horizon": "fixed", "continuation": 0.99, "delta": 0.95,
                "seed": 0, "paths": 0}


def simulation_from_dict(doc: dict, check_tables: bool = True) -> dict:
    """Read the tables of a ``kind = "simulate"`` experiment (see the schema in the README).

    Unknown tables and keys raise :class:`InputError` naming them; values are validated by
    :func:`simulate` (or :func:`prepare_game` and :func:`check_run`).

    Parameters
    ----------
    doc : dict
        The experiment's tables (a parsed TOML file).
    check_tables : bool
        Whether to refuse tables a simulation does not read.

    Returns
    -------
    dict
        ``market`` (Market), ``agreement``, ``actions``, ``monitoring`` (Monitoring), ``strategies``
        (the raw ``[[strategies]]`` entries) and ``run`` (settings with defaults filled in).
    """

    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    if check_tables:
        for k in doc:
            if k not in SIMULATE_TABLES:
                raise InputError(k, f"unknown table for a simulation; allowed: {', '.join(SIMULATE_TABLES)}")
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", _EXPERIMENT_KEYS)
    if "kind" in exp and exp["kind"] != "simulate":
        raise InputError("experiment.kind", f"this command runs kind = 'simulate' experiments, got {exp['kind']!r}")
    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    market = market_from_dict(doc["market"])
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", _COLLUSION_KEYS)
    mon = monitoring_from_dict(doc.get("monitoring", {}))
    run = dict(RUN_DEFAULTS)
    run.update(refuse_unknown(doc.get("run", {}), "run", tuple(RUN_DEFAULTS)))
    if "strategies" not in doc:
        raise InputError("strategies", "missing: give the line-up as [[strategies]] entries")
    strategies = doc["strategies"]
    if not isinstance(strategies, list):
        raise InputError("strategies", "must be an array of tables ([[strategies]] entries)")
    return {"market": market, "agreement": coll.get("agreement", "joint"), "actions": coll.get("actions"),
            "monitoring": mon, "strategies": strategies, "run": run}
