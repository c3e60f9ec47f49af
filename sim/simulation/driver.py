"""The simulation driver: buffers, seeds, the split of replications into batches and chunks, the kernel calls.

Seeds: replication ``r`` of the stream family ``key`` always uses words ``4r .. 4r+3`` of
``SeedSequence(seed, spawn_key=key)`` (:func:`sim.core.rng.stream_states`), so results are identical for
any number of threads and any split of the replications into batches.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field

import numpy as np
from tqdm import tqdm

import sim.simulation.kernel as K
from sim.core.compiling import announce_compile
from sim.core.errors import SolverError
from sim.core.parallel import NumbaThreads
from sim.core.rng import stream_states
from sim.simulation.game import Game
from sim.simulation.state_game import draw_state_paths

__all__ = ["RawRun", "alive_by_period", "demand_inputs", "kernel_groups", "run_game"]


@dataclass
class RawRun:
    """What the kernel (or the reference) produces for one run, summed over chunks.

    Parameters
    ----------
    profit_sum : ndarray of shape (n_reps, n_firms)
        Sum of each firm's per-period profits.
    disc : ndarray of shape (n_reps, n_firms)
        Discounted sum of each firm's per-period profits.
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
    n_paths : int
        Number of recorded paths.
    path_actions : ndarray of shape (P, H, n_products)
        Actions of the recorded replications (``P = max(n_paths, 1)``; ``H = n_periods`` when paths are
        recorded, else 1); nan after a replication's end.
    path_prices : ndarray of shape (P, H, n_products)
        Prices of the products.
    path_market : ndarray of shape (P, H, 3)
        Market price, demand shock and consumer surplus (columns ``M_*`` of :mod:`sim.simulation.kernel`).
    path_profit : ndarray of shape (P, H, n_firms)
        Profits.
    path_state : int64 ndarray of shape (P, H, n_firms)
        Each firm's state at the start of the period (-1 after the end).
    path_flags : int64 ndarray of shape (P, H, n_firms)
        ``FLAG_*`` bits of :mod:`sim.simulation.kernel`: cheated, trembled, colluded.
    path_collude : int64 ndarray of shape (P, H)
        1 when every firm colluded (-1 after the end).
    demand_path : int64 ndarray of shape (n_reps, n_periods), or of shape (0, 0)
        The demand state of every period of every replication, when the line-up was played in a market whose
        demand state moves (:mod:`sim.simulation.state_game`); empty otherwise.
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
    demand_path: np.ndarray = field(default_factory=lambda: np.zeros((0, 0), dtype=np.int64))

    @classmethod
    def empty(cls, n_reps: int, n_firms: int, n_products: int, n_periods: int, n_paths: int) -> RawRun:
        """Zeroed outputs of a run (paths filled with nan and -1).

        Parameters
        ----------
        n_reps : int
            Number of replications.
        n_firms : int
            Number of firms.
        n_products : int
            Number of products.
        n_periods : int
            Number of periods (the cap of a random horizon).
        n_paths : int
            Number of recorded paths.

        Returns
        -------
        RawRun
        """
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
        """Number of replications."""
        return int(self.ints.shape[0])

    def totals(self, lo: int, hi: int, hist: np.ndarray, by_period: np.ndarray, status: np.ndarray) -> K.Totals:
        """The kernel's output group for replications ``lo .. hi-1`` (views into this run's arrays).

        Parameters
        ----------
        lo : int
            First replication of the batch.
        hi : int
            One past the last replication of the batch.
        hist : int64 ndarray of shape (n_chunks, N_HIST, n_periods + 1)
            Per-chunk length histograms (added to).
        by_period : int64 ndarray of shape (n_chunks, n_periods)
            Per-chunk collusive counts by period (added to).
        status : int64 ndarray of shape (n_chunks,)
            Per-chunk status codes (written).

        Returns
        -------
        Totals
        """
        return K.Totals(self.profit_sum[lo:hi], self.disc[lo:hi], self.ints[lo:hi], self.flts[lo:hi], hist, by_period,
                        status)

    def path_buffers(self) -> K.PathBuffers:
        """The kernel's path group (the path arrays of this run).

        Returns
        -------
        PathBuffers
        """
        return K.PathBuffers(self.path_actions, self.path_prices, self.path_market, self.path_profit, self.path_state,
                             self.path_flags, self.path_collude)


def _progress_bar(total: int, enabled, desc: str):
    if enabled is None:
        enabled = sys.stderr.isatty()
    if not enabled:
        return None

    return tqdm(total=total, desc=desc, unit="rep", leave=False, file=sys.stderr)


def kernel_groups(game: Game, periods: int, delta: float, horizon: str = "fixed", continuation: float = 1.0,
                  paths: int = 0) -> tuple:
    """The kernel's input groups of a game and run settings (see :mod:`sim.simulation.kernel`).

    Every value gets the type the compiled kernel was compiled for (an integer discount factor would
    otherwise compile a second specialisation); the conversions change no value.

    Parameters
    ----------
    game : Game
        The compiled game.
    periods : int
        Number of periods (the cap of a random horizon).
    delta : float
        Discount factor.
    horizon : {"fixed", "random"}
        Whether the game ends after each period with probability ``1 - continuation``.
    continuation : float
        Continuation probability of a random horizon.
    paths : int
        Number of replications (the first ones) whose full paths are recorded.

    Returns
    -------
    market : MarketInputs
    lineup : LineupInputs
    monitoring : MonitoringInputs
    run : RunInputs
    """
    mk, lu, mon = game.arrays, game.lineup, game.monitoring
    market = K.MarketInputs(int(mk.code), mk.scalars, mk.vector, mk.cost, mk.capacity, mk.owner, int(mk.n_firms),
                            bool(mk.quantity_setting), mk.mixed)
    lineup = K.LineupInputs(lu.states, lu.probs, lu.firms, lu.levels, game.tremble)
    monitoring = K.MonitoringInputs(int(mon["noise_code"]), float(mon["sigma"]), float(mon["perception_error"]),
                                    float(mon["implementation_error"]))
    run = K.RunInputs(int(periods), float(delta), horizon == "random", float(continuation), int(paths))
    return market, lineup, monitoring, run


def _batch_size(replications: int, periods: int, n_firms: int, paths: int, progress) -> int:
    # one kernel call unless a progress bar wants updates (about 2e6 firm-periods per call)
    show = sys.stderr.isatty() if progress is None else bool(progress)
    batch = replications if not show else max(1, min(replications, 2_000_000 // max(1, periods * n_firms)))
    # the recorded paths belong to the first batch
    return max(batch, min(paths, replications))


def run_game(game: Game, periods: int, replications: int, delta: float, seed: int, key=(0,),
             horizon: str = "fixed", continuation: float = 1.0, paths: int = 0, threads: int | None = None,
             progress=None, batch: int | None = None, n_chunks: int | None = None, demand=None) -> RawRun:
    """Driver: allocate buffers, derive the seeds, split the replications and call the kernel.

    Arguments are taken as already validated (see :func:`simulate`); ``batch`` and ``n_chunks``
    change only the work split, never the results.

    Parameters
    ----------
    game : Game
        The compiled game (:func:`prepare_game` or :func:`compile_game`).
    periods : int
        Number of periods (the cap of a random horizon).
    replications : int
        Number of replications.
    delta : float
        Discount factor of the discounted profit sums.
    seed : int
        The user's seed.
    key : tuple of int
        Stream family of the seeds (see :func:`sim.core.rng.stream_states`).
    horizon : {"fixed", "random"}
        ``random``: the game ends after each period with probability ``1 - continuation``.
    continuation : float
        Continuation probability of a random horizon.
    paths : int
        Number of replications (the first ones) whose full paths are recorded.
    threads : int, optional
        Number of threads (default: numba's setting).
    progress : bool, optional
        Progress bar on stderr (default: only when stderr is a terminal).
    batch : int, optional
        Replications per kernel call (default: all, or about 2e6 firm-periods with a progress bar).
    n_chunks : int, optional
        Chunks per kernel call (default: four per thread).
    demand : StateGame, optional
        Play every period in its demand state's market with the state's level profiles
        (:mod:`sim.simulation.state_game`; the states are drawn from the stream family ``(key..., 1)``).

    Returns
    -------
    RawRun
        The raw per-replication and per-length arrays (with ``demand_path`` when ``demand`` is given).
    """
    n = game.arrays.n_firms
    raw = RawRun.empty(replications, n, game.arrays.n_products, periods, paths)
    if demand is not None:
        raw.demand_path = draw_state_paths(demand.states, periods, replications, seed, key)
    market, lineup, monitoring, run = kernel_groups(game, periods, delta, horizon, continuation, paths)
    path_buffers = raw.path_buffers()
    with NumbaThreads(threads) as n_threads:
        if batch is None:
            batch = _batch_size(replications, periods, n, paths, progress)
        chunks = n_chunks if n_chunks is not None else max(1, 4 * n_threads)
        chunks = max(1, min(chunks, batch))
        hist = np.zeros((chunks, K.N_HIST, periods + 1), dtype=np.int64)
        by_period = np.zeros((chunks, periods), dtype=np.int64)
        status = np.zeros(chunks, dtype=np.int64)
        # every replication's generator state at once: deriving them batch by batch would hash the
        # stream family from its start each time (cost quadratic in the number of batches); 32 bytes per
        # replication, less than the per-replication results
        rng_all = stream_states(seed, key, 0, replications)
        announce_compile("simulation", (K.simulate_chunks if demand is None else K.simulate_state_chunks,))
        bar = _progress_bar(replications, progress, "simulate")
        try:
            for lo in range(0, replications, batch):
                hi = min(replications, lo + batch)
                c = min(chunks, hi - lo)
                starts = np.linspace(0, hi - lo, c + 1).round().astype(np.int64)
                if demand is None:
                    K.simulate_chunks(K.Batch(starts, rng_all[lo:hi], lo), market, lineup, monitoring, run,
                                      raw.totals(lo, hi, hist, by_period, status), path_buffers)
                else:
                    K.simulate_state_chunks(K.Batch(starts, rng_all[lo:hi], lo), market, lineup, monitoring, run,
                                            raw.totals(lo, hi, hist, by_period, status), path_buffers,
                                            demand_inputs(demand, raw.demand_path[lo:hi]))
                if np.any(status[:c] != K.STATUS_OK):
                    raise SolverError("the stage game could not be evaluated for a simulated action profile "
                                      "(differentiated Bertrand demand did not settle)")
                if bar is not None:
                    bar.update(hi - lo)
        finally:
            if bar is not None:
                bar.close()
    raw.hist[:] = hist.sum(axis=0)
    raw.by_period[0] = by_period.sum(axis=0)
    raw.by_period[1] = alive_by_period(raw.ints[:, K.R_PERIODS], periods)
    return raw


def demand_inputs(demand, path: np.ndarray) -> K.DemandInputs:
    """The kernel's demand group of a state game and a batch's paths of states.

    Parameters
    ----------
    demand : StateGame
        The per-state markets and level profiles.
    path : int64 ndarray of shape (n_batch, n_periods)
        The demand state of each period of the batch's replications.

    Returns
    -------
    DemandInputs
    """
    return K.DemandInputs(np.ascontiguousarray(path), demand.scalars, demand.vector, demand.cost, demand.capacity,
                          demand.levels, demand.tremble)


def alive_by_period(lengths: np.ndarray, periods: int) -> np.ndarray:
    """Number of replications still running in each period, from their lengths.

    Parameters
    ----------
    lengths : int array_like of shape (n_reps,)
        Periods played in each replication.
    periods : int
        Number of periods (the cap of the horizon).

    Returns
    -------
    int64 ndarray of shape (periods,)
    """
    cnt = np.bincount(np.asarray(lengths, dtype=np.int64), minlength=periods + 1)[: periods + 1]
    return cnt[::-1].cumsum()[::-1][1:].astype(np.int64)
