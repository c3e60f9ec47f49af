"""Repeated-game simulation: play a line-up of automaton strategies in a market, many times.

Three layers, as everywhere in the package:

* :func:`simulate` -- the validated public entry: market, line-up, monitoring and run settings in;
  a :class:`~sim.simulation.results.SimulationResult` out (per-firm, per-replication arrays, persistence metrics
  with confidence intervals, and the analytic baseline side by side).
* :func:`prepare_game` and :func:`run_game` -- the lower-level entry for callers that play many small
  matches (tournaments, sweeps): the stage game is solved once per market (:func:`stage_levels`),
  a line-up compiles to arrays in microseconds (:func:`compile_game`), and :func:`run_game` allocates
  the buffers, derives the seeds and calls the kernel, without re-validating the compiled arrays.
* :mod:`sim.simulation.kernel` -- the numba kernel; :mod:`sim.simulation.twin` -- its plain-Python twin.

Seeds: replication ``r`` of the stream family ``key`` always uses words ``4r .. 4r+3`` of
``SeedSequence(seed, spawn_key=key)`` (:func:`sim.core.rng.stream_states`), so results are identical for
any number of threads and any split of the replications into batches.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass

import numpy as np
from tqdm import tqdm

import sim.simulation.kernel as K
from sim.core.errors import InputError, SolverError
from sim.core.parallel import NumbaThreads, check_threads
from sim.core.params import Integer, Options, Real
from sim.core.rng import stream_states
from sim.core.tables import refuse_unknown
from sim.models.market import MarketSpec, market_from_dict
from sim.models.monitoring import Monitoring, monitoring_from_dict
from sim.models.stagecore import MarketArrays, market_arrays, market_owner
from sim.simulation.results import summarize
from sim.theory.equilibrium import stage_game
from sim.theory.thresholds import stick_and_carrot
from strategies.base import Automaton, CompiledLineup, StageLevels, compile_lineup
from strategies.registry import lineup_from_tables

__all__ = ["Game", "RawRun", "compile_game", "prepare_game", "run_game", "simulate", "stage_levels"]

#: largest number of path values (periods x replications x products) held in memory
MAX_PATH_VALUES = 50_000_000


# --------------------------------------------------------------------------------------------------
# Stage-game levels
# --------------------------------------------------------------------------------------------------


def _per_firm(x: np.ndarray, owner: np.ndarray, n_firms: int) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    if x.shape[0] == n_firms:
        return x
    return np.bincount(owner, weights=x, minlength=n_firms)


def stage_levels(market, agreement: str = "joint", actions=None) -> tuple:
    """Solve the stage game once and return ``(stage, levels)`` for compiling line-ups.

    ``levels`` (:class:`strategies.base.StageLevels`) holds the collusive, Nash and deviation profiles
    of the stage game and computes the stick-and-carrot punishment profile on first use. Every profile
    the stage game reports is attainable and evaluates to the profits reported with it (homogeneous
    Bertrand with continuous prices undercuts by the market's price step, see :mod:`sim.models.market`), so
    the line-up plays them as they are and its payoffs match the analytic ones.
    """

    ms: MarketSpec = market if isinstance(market, MarketSpec) else market.spec()
    st = stage_game(ms, agreement, actions)
    owner = market_owner(ms)
    profiles = {
        "collusive": np.asarray(st.collusive.actions, dtype=float).copy(),
        "nash": np.asarray(st.nash.actions, dtype=float).copy(),
        "deviation": np.array(st.deviation_actions, dtype=float),
    }
    n = ms.n_firms

    def punishment(key):

        sc = stick_and_carrot(ms, st)
        prof = np.asarray(sc.punishment_actions, dtype=float)
        if prof.size == 0 or not np.all(np.isfinite(prof)):
            raise InputError(key, "the stick-and-carrot punishment does not exist in this market (no punishment "
                                  "level brings the critical discount factor below one)")
        levels.cache["stick_carrot"] = sc
        return prof

    levels = StageLevels(
        profiles=profiles, owner=owner, n_firms=n, quantity_setting=ms.quantity_setting,
        capacity=np.asarray(ms.capacity, dtype=float),
        firm_profits={
            "collusive": _per_firm(st.collusive.profits, owner, n),
            "nash": _per_firm(st.nash.profits, owner, n),
            "deviation": _per_firm(st.deviation_profits, owner, n),
        },
        lazy={"punishment": punishment},
    )
    return st, levels


# --------------------------------------------------------------------------------------------------
# Compiled game
# --------------------------------------------------------------------------------------------------


@dataclass
class Game:
    """A market, a compiled line-up and the monitoring, ready for the kernel.

    Attributes
    ----------
    market : MarketSpec
    arrays : MarketArrays
    lineup : CompiledLineup
    monitoring : dict
        Validated monitoring parameters (``signal``, ``noise``, ``sigma``, ``perception_error``,
        ``implementation_error``, ``noise_code``).
    stage : StageGame
    levels : StageLevels
    tremble : ndarray of shape (n_products,)
        Actions played after an implementation error (the deviation profile).
    """

    market: MarketSpec
    arrays: MarketArrays
    lineup: CompiledLineup
    monitoring: dict
    stage: object
    levels: StageLevels
    tremble: np.ndarray

    @property
    def n_firms(self) -> int:
        return self.arrays.n_firms


def _as_lineup(lineup, n_firms: int, prefix: str = "strategies") -> list:
    if isinstance(lineup, Automaton):
        return [lineup.clone() for _ in range(n_firms)]
    if isinstance(lineup, list | tuple) and lineup and all(isinstance(x, dict) for x in lineup):
        return lineup_from_tables(list(lineup), n_firms, prefix)
    if not isinstance(lineup, list | tuple):
        raise InputError(prefix, f"must be a list of strategies (one per firm), got {lineup!r}")
    return list(lineup)


def as_monitoring(monitoring) -> Monitoring:
    """A :class:`Monitoring` from None (perfect monitoring), a table or a Monitoring."""
    if monitoring is None:
        return Monitoring()
    if isinstance(monitoring, dict):
        return monitoring_from_dict(monitoring)
    if not isinstance(monitoring, Monitoring):
        raise InputError("monitoring", f"must be a Monitoring or a table, got {monitoring!r}")
    return monitoring


def compile_game(stage, levels: StageLevels, lineup, monitoring=None, prefix: str = "strategies",
                 strict: bool = True) -> Game:
    """Compile a line-up for a market whose stage game is already solved (see :func:`stage_levels`).

    Checks that the line-up has one strategy per firm and that strategies watching conduct are not
    combined with price-only monitoring. With ``strict`` (the default, used by :func:`simulate`) a
    perception error is refused when no strategy watches conduct (it would have no effect); callers
    that play many line-ups under one monitoring setting (tournaments) pass ``strict=False``.
    """
    ms = stage.market
    strategies = _as_lineup(lineup, ms.n_firms, prefix)
    mon = as_monitoring(monitoring).validated()
    compiled = compile_lineup(strategies, levels, prefix)
    if mon["signal"] == "price":
        for i, t in enumerate(compiled.tables):
            if t.watches_conduct:
                raise InputError(f"{prefix}[{i + 1}].strategy",
                                 f"{compiled.names[i]!r} watches the rivals' actions, which firms cannot see with "
                                 f"monitoring.signal = 'price'; use signal = 'perfect' or a price-watching strategy")
    if strict and mon["perception_error"] > 0 and not compiled.watches_conduct:
        raise InputError("monitoring.perception_error",
                         f"no strategy in the line-up watches the rivals' conduct, so a perception error of "
                         f"{mon['perception_error']:g} would have no effect; set it to 0")
    tremble = np.ascontiguousarray(levels.profiles["deviation"], dtype=np.float64)
    return Game(ms, market_arrays(ms), compiled, mon, stage, levels, tremble)


def prepare_game(market, lineup, monitoring=None, agreement: str = "joint", actions=None,
                 strict: bool = True) -> Game:
    """Solve the stage game and compile the line-up (validated; raises InputError)."""
    ms = market if isinstance(market, MarketSpec) else market.spec()
    st, levels = stage_levels(ms, agreement, actions)
    return compile_game(st, levels, lineup, monitoring, strict=strict)


# --------------------------------------------------------------------------------------------------
# Raw outputs and the driver
# --------------------------------------------------------------------------------------------------


@dataclass
class RawRun:
    """What the kernel (or the reference) produces for one run, summed over chunks.

    Attributes
    ----------
    profit_sum, disc : ndarray of shape (n_reps, n_firms)
        Sum and discounted sum of each firm's per-period profits.
    ints : int64 ndarray of shape (n_reps, N_RINT)
        Per-replication counts (columns ``R_*`` of :mod:`sim.simulation.kernel`).
    flts : ndarray of shape (n_reps, N_RFLT)
        Per-replication sums of the market price and of consumer surplus.
    hist : int64 ndarray of shape (N_HIST, n_periods + 1)
        Lengths of collusive spells, price wars and punishment phases that ended or were cut off by
        the horizon (rows ``H_*`` of :mod:`sim.simulation.kernel`).
    by_period : int64 ndarray of shape (2, n_periods)
        Per period: replications in which every firm colluded (row 0), and replications still running
        (row 1, derived from the horizon lengths).
    path_* : ndarrays with first axis ``n_paths``
        Full paths of the first replications (empty when no paths were asked for).
    """

    profit_sum: np.ndarray
    disc: np.ndarray
    ints: np.ndarray
    flts: np.ndarray
    hist: np.ndarray
    by_period: np.ndarray
    n_paths: int
    path_actions: np.ndarray
    path_prices: np.ndarray
    path_market: np.ndarray
    path_profit: np.ndarray
    path_state: np.ndarray
    path_flags: np.ndarray
    path_collude: np.ndarray

    @classmethod
    def empty(cls, n_reps: int, n_firms: int, n_products: int, n_periods: int, n_paths: int) -> RawRun:
        P = max(n_paths, 1)
        H = n_periods if n_paths > 0 else 1
        return cls(
            np.zeros((n_reps, n_firms)), np.zeros((n_reps, n_firms)),
            np.zeros((n_reps, K.N_RINT), dtype=np.int64), np.zeros((n_reps, K.N_RFLT)),
            np.zeros((K.N_HIST, n_periods + 1), dtype=np.int64), np.zeros((2, n_periods), dtype=np.int64),
            n_paths,
            np.full((P, H, n_products), np.nan), np.full((P, H, n_products), np.nan), np.full((P, H, 3), np.nan),
            np.full((P, H, n_firms), np.nan), np.full((P, H, n_firms), -1, dtype=np.int64),
            np.zeros((P, H, n_firms), dtype=np.int64), np.full((P, H), -1, dtype=np.int64),
        )

    @property
    def n_reps(self) -> int:
        return int(self.ints.shape[0])


def _progress_bar(total: int, enabled, desc: str):
    if enabled is None:
        enabled = sys.stderr.isatty()
    if not enabled:
        return None

    return tqdm(total=total, desc=desc, unit="rep", leave=False, file=sys.stderr)


def run_game(game: Game, periods: int, replications: int, delta: float, seed: int, key=(0,),
             horizon: str = "fixed", continuation: float = 1.0, paths: int = 0, threads: int | None = None,
             progress=None, batch: int | None = None, n_chunks: int | None = None) -> RawRun:
    """Driver: allocate buffers, derive the seeds, split the replications and call the kernel.

    Arguments are taken as already validated (see :func:`simulate`); ``batch`` (replications per kernel
    call) and ``n_chunks`` (chunks per call) change only the work split, never the results.

    Returns
    -------
    RawRun
    """
    mk = game.arrays
    lu = game.lineup
    mon = game.monitoring
    n, P = mk.n_firms, mk.n_products
    raw = RawRun.empty(replications, n, P, periods, paths)
    with NumbaThreads(threads) as n_threads:
        if batch is None:
            # one kernel call unless a progress bar wants updates (about 2e6 firm-periods per call)
            show = sys.stderr.isatty() if progress is None else bool(progress)
            batch = replications if not show else max(1, min(replications, 2_000_000 // max(1, periods * n)))
            # the recorded paths belong to the first batch
            batch = max(batch, min(paths, replications))
        chunks = n_chunks if n_chunks is not None else max(1, 4 * n_threads)
        chunks = max(1, min(chunks, batch))
        hist = np.zeros((chunks, K.N_HIST, periods + 1), dtype=np.int64)
        by_period = np.zeros((chunks, periods), dtype=np.int64)
        status = np.zeros(chunks, dtype=np.int64)
        # every replication's generator state at once: deriving them batch by batch would hash the
        # stream family from its start each time (cost quadratic in the number of batches); 32 bytes per
        # replication, less than the per-replication results
        rng_all = stream_states(seed, key, 0, replications)
        bar = _progress_bar(replications, progress, "simulate")
        try:
            for lo in range(0, replications, batch):
                hi = min(replications, lo + batch)
                m = hi - lo
                c = min(chunks, m)
                starts = np.linspace(0, m, c + 1).round().astype(np.int64)
                rng = rng_all[lo:hi]
                K.simulate_chunks(
                    starts, rng, lo,
                    mk.code, mk.scalars, mk.vector, mk.cost, mk.capacity, mk.owner, n, mk.quantity_setting,
                    lu.states, lu.probs, lu.firms, lu.levels, game.tremble,
                    mon["noise_code"], mon["sigma"], mon["perception_error"], mon["implementation_error"],
                    periods, delta, horizon == "random", continuation, paths,
                    raw.profit_sum[lo:hi], raw.disc[lo:hi], raw.ints[lo:hi], raw.flts[lo:hi],
                    hist, by_period,
                    raw.path_actions, raw.path_prices, raw.path_market, raw.path_profit, raw.path_state,
                    raw.path_flags, raw.path_collude, status,
                )
                if np.any(status[:c] != K.STATUS_OK):
                    raise SolverError("the stage game could not be evaluated for a simulated action profile "
                                      "(differentiated Bertrand demand did not settle)")
                if bar is not None:
                    bar.update(m)
        finally:
            if bar is not None:
                bar.close()
    raw.hist[:] = hist.sum(axis=0)
    raw.by_period[0] = by_period.sum(axis=0)
    raw.by_period[1] = alive_by_period(raw.ints[:, K.R_PERIODS], periods)
    return raw


def alive_by_period(lengths: np.ndarray, periods: int) -> np.ndarray:
    """Number of replications still running in each period, from their lengths: shape (periods,)."""
    cnt = np.bincount(np.asarray(lengths, dtype=np.int64), minlength=periods + 1)[: periods + 1]
    return cnt[::-1].cumsum()[::-1][1:].astype(np.int64)


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
    """Validate run settings; errors name ``run.<key>``."""
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
    lineup : list of Automaton (one per firm, seat order), list of experiment-file entries
        (dicts with ``strategy`` and optional ``seats``), or one Automaton played by every firm
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    periods : int
        Number of periods (the cap of a random horizon).
    replications : int
    delta : float in (0, 1)
        Discount factor of payoffs (with a random horizon, the continuation probability discounts
        on top of it).
    seed : int
    horizon : {"fixed", "random"}
        ``random``: the game ends after each period with probability ``1 - continuation``.
    continuation : float in (0, 1]
    paths : int
        Number of replications (the first ones) whose full paths are recorded.
    agreement, actions :
        The collusive outcome that the level ``"collusive"`` stands for (see
        :func:`sim.theory.equilibrium.collusive_outcome`).
    threads : int, optional
        Number of threads (default: numba's setting). Results do not depend on it.
    confidence : float in (0, 1)
        Level of the confidence intervals (normal approximation; see :mod:`sim.simulation.results`).
    baseline : bool
        Whether to compute the analytic baseline (thresholds, trigger-price model, time to breakdown).
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    key : tuple of int
        Stream family of the seeds (cells of a sweep use different keys).

    Returns
    -------
    SimulationResult
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
_EXPERIMENT_KEYS = ("name", "kind", "description")
_COLLUSION_KEYS = ("agreement", "actions")
RUN_DEFAULTS = {"periods": 1000, "replications": 1000, "horizon": "fixed", "continuation": 0.99, "delta": 0.95,
                "seed": 0, "paths": 0}


def simulation_from_dict(doc: dict, check_tables: bool = True) -> dict:
    """Read the tables of a ``kind = "simulate"`` experiment (see the schema in the README).

    Returns a dict with ``market`` (Market), ``agreement``, ``actions``, ``monitoring`` (Monitoring),
    ``strategies`` (the raw ``[[strategies]]`` entries) and ``run`` (settings with defaults filled in).
    Unknown tables and keys raise :class:`InputError` naming them; values are validated by
    :func:`simulate` (or :func:`prepare_game` and :func:`check_run`).
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
