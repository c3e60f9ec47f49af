"""Learning pricing agents: sessions of Q-learning firms, their limit play and the punishment they learn.

The experiment of Calvano, Calzolari, Denicolo and Pastorello (2020, AER, "Artificial Intelligence,
Algorithmic Pricing, and Collusion") on any market of this package:

1. every firm is a :class:`strategies.qlearning.QLearner` with a grid of actions;
2. a *session* lets them play and learn until every learner's greedy strategy has been unchanged for
   ``convergence`` consecutive periods (or ``max_periods`` is reached: not converged);
3. the learned strategies are then played greedily from the final state: the *limit path* ends in a
   cycle whose mean prices and profits give the session's *profit gain*
   ``(profit - Nash) / (collusive - Nash)``;
4. the *impulse response*: one firm is forced to deviate for one period (by default to its static
   best response on its grid), everyone then follows the learned strategies; a punishment shows as
   the rivals cutting their prices in the following period, and the exact discounted value of the
   deviation under the learned strategies says whether it paid.

Learners may be seated with automata of :mod:`strategies` (a learner facing grim trigger, tit for
tat, forgiving tit for tat, an opportunist...). Automata that act at random draw from the session's
stream in a fixed order; their line-ups get a simulated, seeded *estimate* of steps 3 and 4 instead
of the exact analysis, flagged as such in every result (:func:`learn`, Notes).

Many sessions run in parallel, each with its own random stream from
``sim.core.rng.stream_states(seed, (cell,), session, session + 1)``, so results do not depend on the
number of workers. Layers: :func:`learn` (validated public function) -> :func:`_run_sessions`
(driver: buffers, seeds, threads, progress) -> :mod:`sim.learning.kernel` (numba, releases the GIL).
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor, as_completed
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from tqdm import tqdm

import sim.learning.kernel as K
import sim.learning.kernel as LK
import strategies.step as SS
from sim.core.errors import InputError
from sim.core.parallel import usable_cores
from sim.core.params import Integer, Options, Real, optional
from sim.core.rng import stream_states
from sim.core.tables import refuse_unknown
from sim.learning.twin import reference_session as _ref
from sim.models.demand import LogitDemand
from sim.models.market import Market, MarketSpec, market_from_dict
from sim.models.stagecore import evaluate_py, market_arrays
from sim.simulation.engine import stage_levels
from sim.simulation.results import mean_estimate, normal_quantile, wilson_estimate
from sim.theory.equilibrium import stage_game
from strategies import AlwaysCompete, Automaton, strategy_from_dict
from strategies import compile_lineup as compile_automata
from strategies.qlearning import QLearner
from strategies.registry import check_seats

__all__ = [
    "LEARNER_PARAMS",
    "LearningResult",
    "Lineup",
    "benchmark",
    "compile_lineup",
    "learn",
    "learner_from_entry",
    "learning_from_dict",
    "reference_session",
]

#: sessions keep at most this many periods of their limit cycle (the statistics use the whole cycle)
CYCLE_STORE = 64
#: the impulse response averages over at most this many points of a session's limit cycle
IR_POINTS = 64
#: share of the available memory a run may take for its Q-matrices
_MEMORY_SHARE = 0.8
#: estimate of a line-up with automata that act at random: periods of greedy play simulated and
#: discarded before the limit averages start
LIMIT_BURN_IN = 1000
#: ... the default number of periods averaged (``limit_periods``)
LIMIT_PERIODS = 10_000
#: ... and the value of a simulated deviation is summed until the discount weight falls below this
#: (at most VALUE_CAP periods)
VALUE_TOL = 1e-10
VALUE_CAP = 100_000

RUN_CONSTRAINTS = {
    "sessions": Integer(1, 10_000_000),
    "seed": Integer(0, 2**63 - 1),
    "convergence": Integer(1, 10**12),
    "max_periods": Integer(1, 10**15),
    "deviator": Integer(0, 3),
    "response_periods": Integer(0, 10_000),
    "limit_periods": Integer(1, 100_000_000),
    "near": Real(0, 1),
    "workers": optional(Integer(1, 1024)),
    "cell": Integer(0, 2**31),
    "confidence": Real(0, 1, closed="neither"),
}


# ------------------------------------------------------------------------------------------------
# The line-up: learners resolved against a market
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Lineup:
    """A line-up of learners (and, optionally, automata) resolved against a market: the arrays the
    kernel plays.

    Attributes
    ----------
    market : sim.MarketSpec
    learners : tuple, one entry per seat
        The seat's :class:`~strategies.qlearning.CompiledLearner`, or None for an automaton seat.
    names : tuple of str
        Strategy name of each seat (``"qlearning"`` or the automaton's registry name).
    grids : tuple of ndarray
        Actions of each seat (a learner's grid; an automaton's distinct action values, increasing).
    kind, lidx : ndarray of int64, shape (n,)
        ``sim.learning.kernel.LEARNER`` or ``AUTOMATON``; the learner number of each learner seat.
    radix, place : ndarray of int64, shape (n,)
        Actions per seat and place value of each seat in a profile index.
    M, K, S : int
        Number of profiles, longest memory, number of history states (``M**K``).
    mod : ndarray of int64, shape (n,)
        Number of states of each learner (``M**k``; 1 for automata).
    alpha, beta, delta : ndarray of shape (n,)
        Learner parameters (0 for automata).
    payoff, actions, prices : ndarray of shape (M, n)
        Profit, action and price of each seat at each profile.
    mprice : ndarray of shape (M,)
        Public market price of each profile (what price-watching automata see).
    q0 : ndarray of shape (n_learners, max(mod), max(radix))
        Initial Q-values (entries beyond a learner's states or actions are unused).
    automata : strategies.CompiledLineup or None
        The engine's compiled automata (rows of learner seats are placeholders, never played).
    act_of_level : ndarray of int64, shape (n, L)
        Action index of each level of each automaton seat.
    values : ndarray of shape (n, max(radix))
        Value of each action of each seat.
    zn, zplace : ndarray of int64, shape (n,)
        Automaton state counts and their place values in the system state (1 and 0 for learners).
    nash_profits, collusive_profits, nash_actions, collusive_actions, nash_prices, collusive_prices :
        ndarray of shape (n,), the continuous static-Nash and joint-profit benchmarks.
    random_seats : tuple of int
        Automaton seats that act at random (a forgiveness, lapse or cheat probability strictly
        between 0 and 1). They draw from the session's stream; with any of them greedy play after
        learning is a Markov chain and the limit analysis is a simulated estimate
        (:attr:`limit_exact` is False).
    """

    market: Any
    learners: tuple
    names: tuple
    grids: tuple
    kind: np.ndarray
    lidx: np.ndarray
    radix: np.ndarray
    place: np.ndarray
    M: int
    K: int
    S: int
    mod: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    delta: np.ndarray
    payoff: np.ndarray
    actions: np.ndarray
    prices: np.ndarray
    mprice: np.ndarray
    q0: np.ndarray
    automata: Any
    a_states: np.ndarray
    a_probs: np.ndarray
    a_firms: np.ndarray
    a_levels: np.ndarray
    act_of_level: np.ndarray
    values: np.ndarray
    zn: np.ndarray
    zplace: np.ndarray
    z0: np.ndarray
    nash_profits: np.ndarray
    collusive_profits: np.ndarray
    nash_actions: np.ndarray
    collusive_actions: np.ndarray
    nash_prices: np.ndarray
    collusive_prices: np.ndarray
    random_seats: tuple = ()

    @property
    def n_seats(self) -> int:
        return int(self.radix.size)

    @property
    def learner_seats(self) -> list[int]:
        return [i for i, c in enumerate(self.learners) if c is not None]

    @property
    def has_automata(self) -> bool:
        return self.automata is not None

    @property
    def limit_exact(self) -> bool:
        """Whether greedy play after learning is deterministic, so that the limit cycle, the impulse
        response and the value of a deviation are exact (no automaton acts at random)."""
        return not self.random_seats

    def initial_greedy(self) -> np.ndarray:
        """First argmax of every row of ``q0`` restricted to each learner's actions, shape (n_learners, S_l)."""
        g = np.zeros(self.q0.shape[:2], dtype=np.int64)
        for i in self.learner_seats:
            li = int(self.lidx[i])
            g[li] = np.argmax(self.q0[li, :, : self.radix[i]], axis=1)
        return g

    def decode(self, prof) -> np.ndarray:
        """Action indices of profile numbers, shape (..., n)."""
        prof = np.asarray(prof, dtype=np.int64)
        return (prof[..., None] // self.place) % self.radix

    def kernel_args(self) -> tuple:
        """The arrays :func:`sim.learning.kernel._learn` takes after ``max_periods``, ``z`` excepted."""
        return (self.a_states, self.a_probs, self.a_firms, self.a_levels, self.act_of_level, self.values,
                self.mprice, np.arange(self.n_seats, dtype=np.int64), bool(self.market.quantity_setting))

    def game(self, greedy: np.ndarray, t_end: int, rng: np.ndarray | None = None) -> tuple:
        """The tuple ``G`` of :mod:`sim.learning.kernel` for greedy play after learning.

        ``rng`` (uint64 array of shape (4,), advanced in place by the kernel) is the generator the
        automata draw from; the default, a state that is never used, suits deterministic line-ups."""
        if rng is None:
            rng = np.zeros(4, dtype=np.uint64)
        return (self.kind, self.lidx, self.radix, self.place, self.mod, self.M, self.S, self.K, greedy,
                self.a_states, self.a_probs, self.a_firms, self.a_levels, self.act_of_level, self.values, self.mprice,
                self.payoff, np.arange(self.n_seats, dtype=np.int64), self.zplace, self.zn, int(t_end),
                bool(self.market.quantity_setting), rng)

    def system_state(self, s: int, z) -> int:
        """History state ``s`` and automaton states ``z`` as one integer."""
        return int(s) + self.S * int(sum(int(z[i]) * int(self.zplace[i]) for i in range(self.n_seats)))


def _available_memory() -> int:
    """Bytes of memory available to this process (Linux ``MemAvailable``, else physical memory)."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - exotic platforms
        return 8 << 30


def _gb(x: float) -> str:
    return f"{x / 1e9:.3g} GB"


def _check_memory(radix: list[int], ks: list[int], n_workers: int, prefix: str, available: int | None,
                  z_states: int = 1) -> None:
    """Refuse a state space that cannot be held, before anything is allocated."""
    n = len(radix)
    M = math.prod(radix)
    K = max(ks)
    S = M**K
    n_states = M ** max(ks)
    m_max = max(radix)
    key = f"{prefix}.k" if prefix else "k"
    per_session = n * n_states * m_max * 8 + n * n_states * 8  # Q-values and greedy actions
    tables = 4 * M * n * 8
    need = per_session * (n_workers + 1) + tables
    avail = _available_memory() if available is None else available
    states = str(n_states) if n_states < 10**9 else f"{float(n_states):.3g}"
    if need > _MEMORY_SHARE * avail:
        raise InputError(
            key,
            f"state space too large: {n} seats x {states} states x {m_max} actions need "
            f"{_gb(per_session)} per session ({_gb(need)} for {n_workers} worker(s)), more than the "
            f"{_gb(_MEMORY_SHARE * avail)} that may be used; reduce m, k or the number of firms",
        )
    if S * M * z_states >= 2**62:
        raise InputError(key, f"state space too large: {M}^{K} history states x {z_states} automaton states "
                              f"= {float(S) * z_states:.3g} exceed what the kernel can index; reduce m, k or the "
                              "number of firms")


def _is_learner(x) -> bool:

    return isinstance(x, QLearner)


def compile_lineup(market, learners=None, *, prefix: str = "learning", workers: int = 1,
                   available_memory: int | None = None, agreement: str = "joint",
                   seat_prefix: str | None = None, random_automata: str = "refuse") -> Lineup:
    """Resolve a line-up of learners (and automata) against a market, checking that the state space
    fits in memory before anything is allocated.

    Parameters
    ----------
    market : sim.Market
        A single-product market with 2 to 4 firms.
    learners : QLearner or sequence, optional
        One learner for every seat (default ``QLearner()``, the published baseline), or one strategy
        per seat: a :class:`~strategies.qlearning.QLearner` or an automaton from :mod:`strategies`
        (grim trigger, tit for tat, forgiving tit for tat, opportunist, ...), at least one of them a
        learner. Automata that act at random (a probability strictly between 0 and 1) are seated
        only with ``random_automata = "estimate"``.
    prefix : str
        Key path of the learners' parameters in error messages (a single learner for every seat).
    workers : int
        Sessions held in memory at once (for the memory check).
    available_memory : int, optional
        Bytes that may be used (default: what the operating system reports as available).
    agreement : str
        Collusive outcome the automata's levels refer to (see :func:`sim.stage_game`).
    seat_prefix : str, optional
        With one strategy per seat, the key path of seat ``i`` is ``seat_prefix[i+1]`` (default
        ``"strategies"``, as in an experiment file's ``[[strategies]]``).
    random_automata : {"refuse", "estimate"}
        ``"refuse"`` (default, for callers that rely on exact limit cycles): an automaton that acts
        at random raises InputError naming its seat. ``"estimate"``: it is seated; it draws from the
        session's stream and the limit analysis of the line-up is a simulated estimate
        (:attr:`Lineup.limit_exact` is False; see :func:`learn`, which always uses this).

    Returns
    -------
    Lineup
    """

    Options("refuse", "estimate").check("random_automata", random_automata)
    ms = market if isinstance(market, MarketSpec) else market.spec()
    n = ms.n_firms
    if getattr(ms, "multi_product", False):
        raise InputError("market.owner", "each learning firm sets one action: multi-product firms are not supported")
    if not 2 <= n <= 4:
        raise InputError("market.n_firms", f"learning needs 2 to 4 firms, got {n}")
    if learners is None:
        learners = QLearner()
    if _is_learner(learners):
        seats = [learners] * n
        keys = [prefix] * n
    else:
        if isinstance(learners, str | dict) or not hasattr(learners, "__len__"):
            raise InputError(prefix, f"must be a QLearner or one strategy per firm, got {learners!r}")
        seats = list(learners)
        sp = "strategies" if seat_prefix is None else seat_prefix
        if len(seats) != n:
            raise InputError(sp, f"the line-up has {len(seats)} seats but the market has {n} firms")
        keys = [f"{sp}[{i + 1}]" if sp else f"[{i + 1}]" for i in range(n)]
    is_l = [_is_learner(x) for x in seats]
    if not any(is_l):
        raise InputError("strategies" if seat_prefix is None else seat_prefix,
                         "the line-up has no learner; use `supergame simulate` for automata only")
    specs = {i: seats[i].spec(prefix=keys[i]) for i in range(n) if is_l[i]}

    # automata first: their action sets enter the state space
    automata = None
    random_seats: list[int] = []
    auto_values: dict[int, np.ndarray] = {}
    act_of_level = np.zeros((n, 1), dtype=np.int64)
    zn = np.ones(n, dtype=np.int64)
    z0 = np.zeros(n, dtype=np.int64)
    if not all(is_l):

        automata, auto_values, act_of_level, random_seats = _compile_automata(ms, seats, is_l, keys, agreement,
                                                                              random_automata == "refuse")
        for i in range(n):
            if not is_l[i]:
                zn[i] = int(automata.firms[i, SS.N_STATES])
                z0[i] = int(automata.firms[i, SS.INITIAL])
    radix = [int(specs[i]["m"]) if is_l[i] else int(auto_values[i].size) for i in range(n)]
    ks = [int(specs[i]["k"]) for i in range(n) if is_l[i]]
    z_states = int(np.prod(zn))
    _check_memory(radix, ks, max(1, int(workers)), prefix, available_memory, z_states)

    # the published grid of a learner without one is placed by the static-Nash and joint-profit actions
    stage = stage_game(ms) if any(is_l[i] and seats[i].get_params().get("grid") is None for i in range(n)) else None
    compiled = tuple(seats[i].compile(stage, i, keys[i]) if is_l[i] else None for i in range(n))
    grids = tuple(compiled[i].grid if is_l[i] else auto_values[i] for i in range(n))
    radix_a = np.array(radix, dtype=np.int64)
    place = np.ones(n, dtype=np.int64)
    for i in range(1, n):
        place[i] = place[i - 1] * radix_a[i - 1]
    M = int(np.prod(radix_a))
    K = max(ks)
    S = M**K
    mod = np.array([M ** compiled[i].k if is_l[i] else 1 for i in range(n)], dtype=np.int64)
    kind = np.array([LK.LEARNER if x else LK.AUTOMATON for x in is_l], dtype=np.int64)
    lidx = np.cumsum(is_l, dtype=np.int64) - 1
    lidx[~np.array(is_l)] = 0
    zplace = np.zeros(n, dtype=np.int64)
    acc = 1
    for i in range(n):
        if not is_l[i]:
            zplace[i] = acc
            acc *= int(zn[i])

    # every profile's actions: seat 0 varies fastest, matching place
    idx = (np.arange(M, dtype=np.int64)[:, None] // place) % radix_a
    actions = np.stack([grids[i][idx[:, i]] for i in range(n)], axis=1)
    _q, p, pi = ms.evaluate(actions)
    if not np.all(np.isfinite(pi)):
        raise InputError(prefix, "a profit on the action grid is not finite")
    values = np.zeros((n, int(radix_a.max())))
    for i in range(n):
        values[i, : radix[i]] = grids[i]
    mprice = np.zeros(M)
    if automata is not None:

        arrays = market_arrays(ms)
        for j in range(M):
            mprice[j] = evaluate_py(arrays, actions[j], 1.0, False)[3]
        a_states, a_probs = automata.states, automata.probs
        a_firms, a_levels = automata.firms, automata.levels
    else:
        a_states = np.zeros((n, 1, 9), dtype=np.int64)
        a_probs = np.zeros((n, 1, 4))
        a_firms = np.zeros((n, 5), dtype=np.int64)
        a_firms[:, 0] = 1
        a_levels = np.zeros((n, 1, n))

    st = stage_game(ms, agreement)
    alpha = np.array([c.alpha if c else 0.0 for c in compiled])
    beta = np.array([c.beta if c else 0.0 for c in compiled])
    delta = np.array([c.delta if c else 0.0 for c in compiled])
    n_l = int(sum(is_l))
    q0 = np.zeros((n_l, int(mod.max()), int(max(radix[i] for i in range(n) if is_l[i]))))
    for i, c in enumerate(compiled):
        if c is None:
            continue
        li = int(lidx[i])
        n_states = int(mod[i])
        m = int(radix_a[i])
        if isinstance(c.init, str):
            if c.init == "uniform":
                # E[profit | own action a, rivals uniform over their actions], discounted
                # (Calvano et al., 2020, eq. 8)
                table = pi[:, i].reshape(tuple(radix[::-1]))
                axes = tuple(j for j in range(n) if j != n - 1 - i)
                row = table.mean(axis=axes) / (1.0 - c.delta)
                q0[li, :n_states, :m] = row[None, :]
        else:
            init = c.init
            if init.ndim == 1:
                q0[li, :n_states, :m] = init[None, :]
            elif init.shape == (n_states, m):
                q0[li, :n_states, :m] = init
            else:
                raise InputError(f"{keys[i]}.init", f"must have shape ({n_states}, {m}) or ({m},) for this line-up, "
                                                   f"got {init.shape}")
    names = tuple("qlearning" if is_l[i] else getattr(seats[i], "name", type(seats[i]).__name__) for i in range(n))
    return Lineup(
        market=ms, learners=compiled, names=names, grids=grids, kind=kind, lidx=lidx, radix=radix_a, place=place,
        M=M, K=K, S=S, mod=mod, alpha=alpha, beta=beta, delta=delta,
        payoff=np.ascontiguousarray(pi, dtype=float), actions=np.ascontiguousarray(actions, dtype=float),
        prices=np.ascontiguousarray(p, dtype=float), mprice=mprice, q0=q0, automata=automata,
        a_states=a_states, a_probs=a_probs, a_firms=a_firms, a_levels=a_levels, act_of_level=act_of_level,
        values=values, zn=zn, zplace=zplace, z0=z0,
        nash_profits=np.asarray(st.nash.profits, float), collusive_profits=np.asarray(st.collusive.profits, float),
        nash_actions=np.asarray(st.nash.actions, float), collusive_actions=np.asarray(st.collusive.actions, float),
        nash_prices=np.asarray(st.nash.prices, float), collusive_prices=np.asarray(st.collusive.prices, float),
        random_seats=tuple(random_seats),
    )


def _compile_automata(ms, seats, is_l, keys, agreement, refuse_random=False):
    """Compile the automaton seats with the engine's compiler (learner seats get a placeholder that is
    never played) and read off each automaton's action values.

    Returns ``(compiled, values, act_of_level, random_seats)``: ``values[i]`` the distinct actions of
    automaton seat ``i`` (increasing), ``act_of_level[i, l]`` the index of level ``l``'s action among
    them, ``random_seats`` the automaton seats with a probability strictly between 0 and 1 (a
    forgiveness, a lapse or a cheat probability): they draw from the session's stream. With
    ``refuse_random`` such a seat raises InputError instead.
    """

    n = len(seats)
    for i in range(n):
        if not is_l[i] and not isinstance(seats[i], Automaton):
            raise InputError(keys[i], f"must be a QLearner or an automaton strategy, got {seats[i]!r}")
    _st, levels = stage_levels(ms, agreement)
    placeholder = [AlwaysCompete() if is_l[i] else seats[i] for i in range(n)]
    prefix = keys[0].rsplit("[", 1)[0] if "[" in keys[0] else "strategies"
    cl = compile_automata(placeholder, levels, prefix)
    L = cl.levels.shape[1]
    act_of_level = np.zeros((n, L), dtype=np.int64)
    values = {}
    random_seats: list[int] = []
    for i in range(n):
        if is_l[i]:
            continue
        ns = int(cl.firms[i, SS.N_STATES])
        p = cl.probs[i, :ns, SS.P_ALT_GOOD:]
        random = (p > 0) & (p < 1)
        if np.any(random):
            if refuse_random:
                s_bad = int(np.flatnonzero(random.any(axis=1))[0])
                raise InputError(keys[i], f"state {cl.state_names[i][s_bad]!r} of {cl.names[i]} acts at random "
                                          f"(probability {float(p[s_bad][random[s_bad]][0]):g}); here automata "
                                          "seated with learners must be deterministic, so that the limit path and "
                                          "the impulse response are exact (sim.learning.session.learn seats it, with a "
                                          "simulated estimate)")
            random_seats.append(i)
        # the actions the automaton can play: its states' levels, and its cheating level if it cheats
        used = np.zeros(L, dtype=bool)
        used[cl.states[i, :ns, SS.ACTION]] = True
        if np.any(cl.probs[i, :ns, SS.P_CHEAT] > 0):
            used[cl.firms[i, SS.CHEAT_LEVEL]] = True
        own = cl.levels[i, :, i]
        distinct = np.unique(own[used])
        values[i] = distinct
        for lev in range(L):
            if used[lev]:
                act_of_level[i, lev] = int(np.flatnonzero(distinct == own[lev])[0])
    return cl, values, act_of_level, random_seats


# ------------------------------------------------------------------------------------------------
# Statistics across sessions
# ------------------------------------------------------------------------------------------------


# The intervals follow the package's one convention (sim.simulation.results): normal approximation at the chosen
# level for means, the Wilson score interval for shares.


def _mean_ci(x, level: float = 0.95) -> dict:
    """Mean with its normal-approximation confidence interval (nan when fewer than two values)."""

    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return {"mean": math.nan, "se": math.nan, "low": math.nan, "high": math.nan, "n": 0}
    e = mean_estimate(x, level)
    return {"mean": e.value, "se": e.se, "low": e.low, "high": e.high, "n": int(n)}


def _share_ci(k: int, n: int, level: float = 0.95) -> dict:
    """Share with the Wilson score interval (Wilson, 1927, JASA 22)."""

    if n == 0:
        return {"share": math.nan, "low": math.nan, "high": math.nan, "count": 0, "n": 0}
    e = wilson_estimate(k, n, level)
    return {"share": e.value, "low": e.low, "high": e.high, "count": int(k), "n": int(n)}


def _quantiles(x) -> dict:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    qs = (0.05, 0.25, 0.5, 0.75, 0.95)
    if x.size == 0:
        return {f"q{int(q * 100):02d}": math.nan for q in qs}
    v = np.quantile(x, qs)
    return {f"q{int(q * 100):02d}": float(a) for q, a in zip(qs, v)}


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class LearningResult:
    """Outcomes of a set of learning sessions.

    Per-session arrays (``n`` sessions, ``f`` firms, ``T`` response periods):

    Attributes
    ----------
    lineup : Lineup
    settings : dict
        The run settings (sessions, seed, convergence, max_periods, deviator, deviation,
        response_periods, near, cell).
    converged : ndarray of bool, shape (n,)
    periods : ndarray of int64, shape (n,)
        Periods played, including the final ``convergence`` unchanged ones.
    transient : ndarray of int64, shape (n,)
        Periods of greedy play from the final state before the limit cycle (-1: not defined, see
        :attr:`limit_exact`).
    cycle_length : ndarray of int64, shape (n,)
        Length of the limit cycle (0: not defined, see :attr:`limit_exact`).
    cycles : list of ndarray of shape (min(length, CYCLE_STORE), f)
        Action indices along each session's limit cycle (empty when not defined).
    limit_actions, limit_prices, limit_profits : ndarray of shape (n, f)
        Means over the limit cycle; with automata that act at random, simulated means (see
        :attr:`limit_exact` and :func:`learn`).
    profit_gain : ndarray of shape (n,)
        ``(sum of limit profits - sum of Nash profits) / (sum of collusive - sum of Nash)``.
    firm_profit_gain : ndarray of shape (n, f)
    near_collusive, near_nash : ndarray of bool, shape (n,)
        Every firm's mean limit action within ``near`` times the Nash-to-collusive distance of its
        collusive (Nash) action.
    ir_prices, ir_profits, cf_prices, cf_profits : ndarray of shape (n, T + 2, f)
        Impulse response and the path without deviation, averaged over the points of the cycle;
        row 0 is the period before the deviation, row 1 the deviation.
    deviation_action : ndarray of int64, shape (n,)
        The deviator's forced action index (at the first point of the cycle).
    deviation_gain : ndarray of shape (n,)
        Discounted value of deviating minus not deviating, under the learned strategies (exact,
        infinite horizon), averaged over the points of the cycle; with automata that act at random,
        the mean realised difference over the simulated deviations (truncated horizon).
    deviation_pays, returned : ndarray of shape (n,)
        Share of the cycle's points where the deviation pays / after which play returns to the
        same cycle (with automata that act at random: share of simulated deviations with a positive
        realised gain / nan).
    return_periods : ndarray of shape (n,)
        Mean periods from the deviation until play is back on the cycle (nan if it never is, or
        when not defined).
    elapsed : float
        Wall-clock seconds.
    """

    lineup: Lineup
    settings: dict
    converged: np.ndarray
    periods: np.ndarray
    transient: np.ndarray
    cycle_length: np.ndarray
    cycles: list
    limit_actions: np.ndarray
    limit_prices: np.ndarray
    limit_profits: np.ndarray
    profit_gain: np.ndarray
    firm_profit_gain: np.ndarray
    near_collusive: np.ndarray
    near_nash: np.ndarray
    ir_prices: np.ndarray
    ir_profits: np.ndarray
    cf_prices: np.ndarray
    cf_profits: np.ndarray
    deviation_action: np.ndarray
    deviation_gain: np.ndarray
    deviation_pays: np.ndarray
    returned: np.ndarray
    return_periods: np.ndarray
    elapsed: float = 0.0
    _summary: dict = field(default_factory=dict, repr=False)

    @property
    def n_sessions(self) -> int:
        return int(self.converged.size)

    @property
    def limit_exact(self) -> bool:
        """True when the limit outcomes are exact (a deterministic line-up); False when they are the
        simulated estimate of a line-up with automata that act at random (see :func:`learn`)."""
        return self.lineup.limit_exact

    @property
    def confidence(self) -> float:
        """Level of the confidence intervals of :meth:`summary`."""
        return float(self.settings.get("confidence", 0.95))

    def summary(self) -> dict:
        """Statistics across sessions, with confidence intervals at the run's ``confidence`` level
        (95 % by default; normal approximation for means, Wilson for shares, as in
        :mod:`sim.simulation.results`). Limit outcomes and impulse responses are over converged sessions; when
        none converged, over all sessions (``over`` says which)."""
        if self._summary:
            return self._summary
        lu = self.lineup
        lvl = self.confidence
        n = self.n_sessions
        nc = int(self.converged.sum())
        sel = self.converged if nc > 0 else np.ones(n, dtype=bool)
        f = lu.n_seats
        lengths, counts = np.unique(self.cycle_length[sel], return_counts=True)
        edges = np.round(np.arange(-0.5, 1.5001, 0.05), 10)
        pg = self.profit_gain[sel]
        h, _ = np.histogram(np.clip(pg, edges[0], edges[-1]), bins=edges)
        ir = {
            "prices": _stack_ci(self.ir_prices[sel], lvl),
            "profits": _stack_ci(self.ir_profits[sel], lvl),
            "no_deviation_prices": self.cf_prices[sel].mean(axis=0).tolist() if sel.any() else [],
            "no_deviation_profits": self.cf_profits[sel].mean(axis=0).tolist() if sel.any() else [],
        }
        rivals = [j for j in range(f) if j != self.settings["deviator"]]
        pre = self.ir_prices[sel][:, 0, :]
        after = self.ir_prices[sel][:, 2, :] if self.ir_prices.shape[1] > 2 else pre
        out = {
            "sessions": n,
            "confidence": lvl,
            "over": "converged sessions" if nc > 0 else "all sessions (none converged)",
            "converged": _share_ci(nc, n, lvl),
            "periods": {**_mean_ci(self.periods[self.converged], lvl), **_quantiles(self.periods[self.converged])},
            "profit_gain": {**_mean_ci(pg, lvl), **_quantiles(pg)},
            "firm_profit_gain": [_mean_ci(self.firm_profit_gain[sel][:, i], lvl) for i in range(f)],
            "limit_prices": [_mean_ci(self.limit_prices[sel][:, i], lvl) for i in range(f)],
            "limit_profits": [_mean_ci(self.limit_profits[sel][:, i], lvl) for i in range(f)],
            "near_collusive": _share_ci(int(self.near_collusive[sel].sum()), int(sel.sum()), lvl),
            "near_nash": _share_ci(int(self.near_nash[sel].sum()), int(sel.sum()), lvl),
            "limit": _limit_description(lu, self.settings),
            "cycle_lengths": ({str(int(k)): int(c) for k, c in zip(lengths, counts)} if self.limit_exact
                              else None),
            "profit_gain_histogram": {"edges": edges.tolist(), "counts": h.tolist()},
            "impulse_response": ir,
            "rival_price_cut": _mean_ci((pre[:, rivals] - after[:, rivals]).mean(axis=1), lvl) if rivals else {},
            "deviation_gain": _mean_ci(self.deviation_gain[sel], lvl),
            "deviation_pays": _mean_ci(self.deviation_pays[sel], lvl),
            "returned": _mean_ci(self.returned[sel], lvl),
            "return_periods": _mean_ci(self.return_periods[sel], lvl),
            "benchmarks": {
                "nash_prices": lu.nash_prices.tolist(), "collusive_prices": lu.collusive_prices.tolist(),
                "nash_profits": lu.nash_profits.tolist(), "collusive_profits": lu.collusive_profits.tolist(),
                "nash_actions": lu.nash_actions.tolist(), "collusive_actions": lu.collusive_actions.tolist(),
            },
        }
        self._summary.update(out)
        return self._summary

    def to_dict(self, sessions: bool = True) -> dict:
        """Plain data: settings, grids, the summary and (optionally) every session's outcomes.

        Firms are numbered from 1 here as in every output (``settings.deviator`` is the deviating firm's
        number); the Python arguments and attributes count seats from 0."""
        lu = self.lineup
        settings = dict(self.settings)
        settings["deviator"] = int(settings["deviator"]) + 1
        out = {
            "settings": settings,
            "learners": [c.to_dict() if c is not None else {"strategy": lu.names[i], "actions": lu.grids[i].tolist(),
                                                            "acts_at_random": i in lu.random_seats}
                         for i, c in enumerate(lu.learners)],
            "seats": list(lu.names),
            "summary": self.summary(),
            "elapsed_seconds": self.elapsed,
        }
        exact = self.limit_exact
        if sessions:
            out["per_session"] = {
                "converged": self.converged.tolist(),
                "periods": self.periods.tolist(),
                "limit_method": "exact" if exact else "estimate",
                "cycle_length": self.cycle_length.tolist() if exact else None,
                "transient": self.transient.tolist() if exact else None,
                "profit_gain": self.profit_gain.tolist(),
                "limit_prices": self.limit_prices.tolist(),
                "limit_profits": self.limit_profits.tolist(),
                "cycle_prices": [
                    [[float(lu.grids[i][a[i]]) for i in range(lu.n_seats)] for a in c] for c in self.cycles
                ] if exact and not lu.market.quantity_setting else None,
                "cycle_actions": [[[float(lu.grids[i][a[i]]) for i in range(lu.n_seats)] for a in c]
                                  for c in self.cycles] if exact else None,
                "deviation_gain": self.deviation_gain.tolist(),
                "deviation_action": [float(lu.grids[self.settings["deviator"]][a]) if a >= 0 else None
                                     for a in self.deviation_action],
            }
        return out


def _stack_ci(x: np.ndarray, level: float = 0.95) -> dict:
    """Mean and normal-approximation interval at ``level`` per row and firm of an array of shape (n, T, f)."""

    if x.shape[0] == 0:
        return {"mean": [], "low": [], "high": []}
    mean = x.mean(axis=0)
    if x.shape[0] < 2:
        nan = np.full_like(mean, np.nan)
        return {"mean": mean.tolist(), "low": nan.tolist(), "high": nan.tolist()}
    se = x.std(axis=0, ddof=1) / math.sqrt(x.shape[0])
    h = normal_quantile(level) * se
    return {"mean": mean.tolist(), "low": (mean - h).tolist(), "high": (mean + h).tolist()}


# ------------------------------------------------------------------------------------------------
# Public entry point
# ------------------------------------------------------------------------------------------------


def _validate_run(**values) -> dict:
    out = {}
    for name, value in values.items():
        out[name] = RUN_CONSTRAINTS[name].check(name, value)
    return out


def learn(market, learners=None, *, sessions: int = 100, seed: int = 0, convergence: int = 100_000,
          max_periods: int = 1_000_000_000, deviator: int = 0, deviation="best_response",
          response_periods: int = 15, near: float = 0.1, workers: int | None = None,
          progress: bool | None = None, cell: int = 0, confidence: float = 0.95,
          limit_periods: int = LIMIT_PERIODS) -> LearningResult:
    """Run independent learning sessions and analyse what the learners converged to.

    Parameters
    ----------
    market : sim.Market
        Single-product market with 2 to 4 firms (logit Bertrand in the published baseline).
    learners : QLearner or list, optional
        The same learner on every seat (default ``QLearner()``), or one strategy per seat: learners
        and automata of :mod:`strategies` (see :func:`compile_lineup`).
    sessions : int
        Number of independent sessions.
    seed : int
        The user's seed; session ``j`` draws from ``stream_states(seed, (cell,), j, j + 1)``.
    convergence : int
        A session has converged once no learner's greedy action in any state has changed for this many
        consecutive periods (Calvano et al., 2020: 100,000).
    max_periods : int
        Cap on a session's length; a session reaching it is reported as not converged.
    deviator : int
        Seat (0-based) forced to deviate in the impulse response.
    deviation : "best_response" or float
        Its forced action: the static best response on its grid to the rivals' actions of the
        deviation period, or a number (the nearest grid point is used).
    response_periods : int
        Periods of greedy play recorded after the deviation.
    near : float
        Tolerance of "at or near" the collusive (and the Nash) outcome, as a share of each firm's
        distance between its Nash and collusive actions.
    workers : int, optional
        Sessions run at once, in threads (the kernel releases the GIL). Default: the usable cores.
        Results do not depend on it.
    progress : bool, optional
        Show a progress bar over sessions (default: when stderr is a terminal).
    cell : int
        Family of random streams (sweeps give each cell its own).
    confidence : float in (0, 1)
        Level of the confidence intervals of the summary (normal approximation for means, Wilson for
        shares; see :mod:`sim.simulation.results`).
    limit_periods : int
        Only for line-ups with automata that act at random: periods of greedy play averaged by the
        limit estimate (see Notes).

    Returns
    -------
    LearningResult

    Notes
    -----
    *Deterministic line-ups* (learners, and automata without probabilities strictly between 0 and 1):
    greedy play from the final state is a deterministic path that ends in a cycle. The cycle is found
    exactly; limit outcomes are its means; the impulse response deviates from each of its points (at
    most ``IR_POINTS``) and the value of the deviation is exact over the infinite horizon.

    *Line-ups with automata that act at random* (forgiving tit for tat, opportunists, lapses): the
    automata draw from the session's stream during learning, in the kernel's fixed order (see
    :mod:`sim.learning.kernel`), and convergence is still judged on the learners' greedy strategies
    alone. Greedy play after learning is then a Markov chain with no exact cycle, and the limit
    analysis is a seeded estimate, drawn from the session's own stream continued after learning:
    ``LIMIT_BURN_IN`` periods of greedy play are discarded, the next ``limit_periods`` are averaged
    (limit actions, prices, profits, profit gain), and at ``IR_POINTS`` evenly spaced periods among
    them a deviation and the path without it are simulated from the same generator state (common
    random numbers); the impulse response is the mean over those deviations and the deviation gain
    the mean realised difference of discounted profits over the first ``H`` periods, ``H`` the
    smallest horizon with ``delta**H < VALUE_TOL`` (at most ``VALUE_CAP``). The result says so:
    :attr:`LearningResult.limit_exact` is False, cycle lengths and the return to the cycle are not
    defined (``cycle_length`` 0, ``returned`` nan), and :meth:`LearningResult.summary` carries a
    ``limit`` entry with ``method = "estimate"`` and these settings.
    """
    run = _validate_run(sessions=sessions, seed=seed, convergence=convergence, max_periods=max_periods,
                        deviator=deviator, response_periods=response_periods, near=near, workers=workers,
                        cell=cell, confidence=confidence, limit_periods=limit_periods)
    n_workers = run["workers"] or usable_cores()
    n_workers = min(n_workers, run["sessions"])
    lineup = compile_lineup(market, learners, workers=n_workers, random_automata="estimate")
    if run["deviator"] >= lineup.n_seats:
        raise InputError("deviator", f"must be a firm of the market (0 to {lineup.n_seats - 1}), got {run['deviator']}")
    dev_index = _deviation_index(lineup, run["deviator"], deviation)
    settings = {**run, "workers": n_workers, "deviation": deviation}
    return _run_sessions(lineup, settings, dev_index, progress)


def _deviator_discount(lineup: Lineup, seat: int) -> float:
    """The deviator's discount factor; an automaton deviator is valued with the first learner's."""
    if lineup.learners[seat] is not None:
        return float(lineup.delta[seat])
    return float(lineup.delta[lineup.learner_seats[0]])


def _deviation_index(lineup: Lineup, seat: int, deviation) -> int:
    if isinstance(deviation, str):
        if deviation != "best_response":
            raise InputError("deviation", f"must be 'best_response' or a number, got {deviation!r}")
        return -1
    x = Real(0, None).check("deviation", deviation)
    grid = lineup.grids[seat]
    return int(np.argmin(np.abs(grid - x)))


def _value_horizon(d: float) -> int:
    """Periods over which a simulated deviation's value is summed: the smallest ``H`` with
    ``d**H < VALUE_TOL``, at most ``VALUE_CAP`` (1 for a myopic deviator)."""
    if d <= 0.0:
        return 1
    return int(min(VALUE_CAP, max(1, math.floor(math.log(VALUE_TOL) / math.log(d)) + 1)))


def _limit_description(lineup: Lineup, settings: dict) -> dict:
    """How the limit outcomes of a result were obtained (the ``limit`` entry of the summary)."""
    if lineup.limit_exact:
        return {"method": "exact",
                "what": "the limit cycle of greedy play from each session's final state, found exactly; the "
                        "impulse response deviates from each point of the cycle and the value of the deviation "
                        "is exact over the infinite horizon"}
    seat = settings["deviator"]
    d = _deviator_discount(lineup, seat)
    H = _value_horizon(d)
    top = float(np.max(np.abs(lineup.payoff[:, seat])))
    bound = 2.0 * d**H * top / (1.0 - d) if d > 0 else 0.0
    return {
        "method": "estimate",
        "random_firms": [i + 1 for i in lineup.random_seats],
        "burn_in": LIMIT_BURN_IN,
        "periods": int(settings["limit_periods"]),
        "deviations": min(IR_POINTS, int(settings["limit_periods"])),
        "value_periods": H,
        "value_truncation_bound": bound,
        "what": (f"ESTIMATE, not an exact cycle: firm(s) {', '.join(str(i + 1) for i in lineup.random_seats)} act "
                 "at random, so greedy play after learning has no exact limit cycle. Per session, from the final "
                 f"state and the session's own random stream continued after learning: {LIMIT_BURN_IN} periods of "
                 f"greedy play discarded, the next {int(settings['limit_periods'])} averaged (limit prices, profits, "
                 f"profit gain); {min(IR_POINTS, int(settings['limit_periods']))} deviations simulated at evenly "
                 "spaced periods among them, each against the path without it from the same random numbers; the "
                 f"deviation gain sums discounted profits over {H} periods (truncation error below {bound:.2g}). "
                 "Cycle lengths and the return to the cycle are not defined."),
    }


def _run_sessions(lineup: Lineup, settings: dict, dev_index: int, progress: bool | None) -> LearningResult:
    """Driver: per-session streams, buffers, a thread pool over sessions, a progress bar."""

    n = settings["sessions"]
    f = lineup.n_seats
    T2 = settings["response_periods"] + 2
    states = stream_states(settings["seed"], (settings["cell"],), 0, n)
    status = np.zeros(n, dtype=np.int64)
    periods = np.zeros(n, dtype=np.int64)
    cyc = np.full((n, CYCLE_STORE), -1, dtype=np.int64)
    lim_a = np.zeros((n, f))
    lim_p = np.zeros((n, f))
    lim_pi = np.zeros((n, f))
    ir_p = np.zeros((n, T2, f))
    ir_pi = np.zeros((n, T2, f))
    cf_p = np.zeros((n, T2, f))
    cf_pi = np.zeros((n, T2, f))
    info = np.zeros((n, 8))
    g0 = lineup.initial_greedy()
    seat = settings["deviator"]
    d_dev = _deviator_discount(lineup, seat)
    lu = lineup
    extra = lu.kernel_args()
    exact = lu.limit_exact
    horizon = _value_horizon(d_dev)

    def one(j: int) -> int:
        rng = states[j].copy()
        Q = lu.q0.copy()
        greedy = g0.copy()
        z = lu.z0.copy()
        s = K._initial_state(rng, lu.radix, lu.place, lu.M, lu.K)
        st, t, s = K._learn(lu.kind, lu.lidx, lu.radix, lu.place, lu.S, lu.K, lu.mod, lu.alpha, lu.beta, lu.delta,
                            lu.payoff, Q, greedy, rng, s, settings["convergence"], settings["max_periods"], z, *extra)
        status[j] = st
        periods[j] = t
        x = lu.system_state(s, z)
        if exact:
            K._analyse(x, lu.game(greedy, t), lu.actions, lu.prices, seat, dev_index, d_dev, IR_POINTS, cyc[j],
                       lim_a[j], lim_p[j], lim_pi[j], ir_p[j], ir_pi[j], cf_p[j], cf_pi[j], info[j])
        else:
            # the session's stream goes on from where learning left it
            K._estimate(x, lu.game(greedy, t, rng), lu.actions, lu.prices, seat, dev_index, d_dev, IR_POINTS,
                        LIMIT_BURN_IN, settings["limit_periods"], horizon, lim_a[j], lim_p[j], lim_pi[j], ir_p[j],
                        ir_pi[j], cf_p[j], cf_pi[j], info[j])
        return j

    show = sys.stderr.isatty() if progress is None else bool(progress)
    t0 = time.perf_counter()
    bar = None
    if show:

        bar = tqdm(total=n, desc="sessions", unit="session", file=sys.stderr, leave=False)
    try:
        if settings["workers"] <= 1:
            for j in range(n):
                one(j)
                if bar is not None:
                    bar.update(1)
        else:
            with ThreadPoolExecutor(max_workers=settings["workers"]) as pool:
                futures = [pool.submit(one, j) for j in range(n)]
                try:
                    for fut in as_completed(futures):
                        fut.result()
                        if bar is not None:
                            bar.update(1)
                except BaseException:
                    for fut in futures:
                        fut.cancel()
                    raise
    finally:
        if bar is not None:
            bar.close()
    elapsed = time.perf_counter() - t0

    lam = info[:, 1].astype(np.int64)
    cycles = [lu.decode(cyc[j, : min(lam[j], CYCLE_STORE)]) for j in range(n)]
    nash, coll = lu.nash_profits, lu.collusive_profits
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = (lim_pi.sum(axis=1) - nash.sum()) / (coll.sum() - nash.sum())
        firm_gain = (lim_pi - nash) / (coll - nash)
    dist = np.abs(lu.collusive_actions - lu.nash_actions)
    tol = settings["near"] * dist
    near_c = np.all(np.abs(lim_a - lu.collusive_actions) <= tol + 1e-12, axis=1)
    near_n = np.all(np.abs(lim_a - lu.nash_actions) <= tol + 1e-12, axis=1)
    return LearningResult(
        lineup=lu, settings=settings, converged=status == K.STATUS_CONVERGED, periods=periods,
        transient=info[:, 0].astype(np.int64), cycle_length=lam, cycles=cycles, limit_actions=lim_a,
        limit_prices=lim_p, limit_profits=lim_pi, profit_gain=gain, firm_profit_gain=firm_gain,
        near_collusive=near_c, near_nash=near_n, ir_prices=ir_p, ir_profits=ir_pi, cf_prices=cf_p,
        cf_profits=cf_pi, deviation_action=info[:, 7].astype(np.int64), deviation_gain=info[:, 3],
        deviation_pays=info[:, 4], returned=info[:, 5], return_periods=info[:, 6], elapsed=elapsed,
    )


# ------------------------------------------------------------------------------------------------
# Experiment-file tables
# ------------------------------------------------------------------------------------------------

#: parameters of a Q-learner in [learning] and in a ``strategy = "qlearning"`` entry
LEARNER_PARAMS = ("alpha", "beta", "delta", "m", "xi", "grid", "k", "init")
#: keys of the tables a learning experiment reads, in the order error messages list them
LEARNING_KEYS = (*LEARNER_PARAMS, "convergence", "max_periods", "near", "limit_periods")
IMPULSE_KEYS = ("firm", "action", "periods")
RUN_KEYS = ("sessions", "seed", "workers")
EXPERIMENT_KEYS = ("name", "kind", "description")


def learner_from_entry(entry: dict, base: dict, key: str, skip=("strategy",), validate: bool = True):
    """A :class:`~strategies.qlearning.QLearner` from an experiment-file entry with
    ``strategy = "qlearning"``: the parameters ``base`` (the [learning] table's) overridden by the
    entry's own.

    Parameters
    ----------
    entry : dict
        The entry (``strategy = "qlearning"``, learner parameters, and the keys in ``skip``).
    base : dict
        Default learner parameters (keys of :data:`LEARNER_PARAMS`).
    key : str
        Key path of the entry in error messages, e.g. ``"strategies[2]"``.
    skip : tuple of str
        Keys of the entry that are not learner parameters (read by the caller).
    validate : bool
        Check the parameters now (errors name ``key.parameter``).

    Raises
    ------
    InputError
        ``key.name`` for an unknown parameter or a bad value.
    """

    params = dict(base)
    for name, v in entry.items():
        if name in skip:
            continue
        if name not in LEARNER_PARAMS:
            raise InputError(f"{key}.{name}", f"unknown parameter of qlearning; allowed: {', '.join(LEARNER_PARAMS)}")
        params[name] = v
    strat = QLearner(**params)
    if validate:
        strat.spec(prefix=key)
    return strat


def _lineup_from_entries(entries, base: dict, n_firms: int) -> list:
    """One strategy per firm from ``[[strategies]]``: ``strategy = "qlearning"`` entries take the
    [learning] parameters, overridden by their own; any other name is an automaton of the engine's
    registry (see ``supergame simulate``)."""

    if not isinstance(entries, list) or not entries:
        raise InputError("strategies", "must be a non-empty list of [[strategies]] entries")
    out = []
    total = 0
    for k, t in enumerate(entries):
        key = f"strategies[{k + 1}]"
        if not isinstance(t, dict):
            raise InputError(key, f"must be a table with a 'strategy' key, got {t!r}")
        seats = check_seats(f"{key}.seats", t.get("seats", 1))
        if t.get("strategy") == QLearner.name:
            strat = learner_from_entry(t, base, key, skip=("strategy", "seats"))
        else:
            strat = strategy_from_dict(t, key)
        total += seats
        if total <= n_firms:  # no clones beyond the market's firms (refused below)
            out.extend(strat.clone() for _ in range(seats))
    if total != n_firms:
        raise InputError("strategies", f"the line-up has {total} seats but the market has {n_firms} firms; give "
                                       "one strategy per firm (use seats to repeat one)")
    if not any(isinstance(x, QLearner) for x in out):
        raise InputError("strategies", "the line-up has no learner (strategy = 'qlearning'); use `supergame "
                                       "simulate` for automata only")
    return out


def learning_from_dict(doc: dict, overrides: dict | None = None) -> dict:
    """Validated settings of a learning experiment from its tables.

    Reads ``[experiment]`` (``kind``, if given, must be ``"learn"``), ``[market]``
    (:func:`sim.market_from_dict`), ``[learning]`` (the learners' parameters, ``convergence``,
    ``max_periods``, ``near``, ``limit_periods``), ``[impulse]`` (``firm`` counted from 1, ``action``
    -- ``"best_response"`` or a number -- and ``periods``), ``[run]`` (``sessions``, ``seed``,
    ``workers``) and an optional ``[[strategies]]`` line-up (``strategy = "qlearning"`` entries take
    the [learning] parameters, overridden by their own; any other name is an automaton). Unknown keys
    are refused (:func:`sim.core.tables.refuse_unknown`), and the line-up is compiled, so that a state
    space too large for the memory is refused here, before any work.

    Parameters
    ----------
    doc : dict
        The experiment document (a dict of tables).
    overrides : dict, optional
        ``"table.key" -> (value, name)``: the value replaces the table's (a market key, or a key of
        [learning], [impulse] or [run]), and an error about it names ``name`` instead of the key path
        (a command line gives its flags this way, e.g. ``{"learning.alpha": (0.2, "--alpha")}``).

    Returns
    -------
    dict
        ``market`` (:class:`sim.Market`), ``learner`` (a QLearner for every seat, or one strategy per
        seat) and ``settings`` (keyword arguments of :func:`learn`; ``deviator`` counted from 0).

    Raises
    ------
    InputError
        With the key path (or the override's name) of the first bad value.
    """
    overrides = dict(overrides or {})
    try:
        return _read_tables(doc, overrides)
    except InputError as exc:
        for path, (_value, name) in overrides.items():
            if exc.key == path or exc.key.startswith((path + ".", path + "[")):
                raise InputError(name, exc.message) from None
        raise


def _read_tables(doc: dict, overrides: dict) -> dict:

    if not isinstance(doc, dict):
        raise InputError("experiment", f"must be a document of tables, got {doc!r}")
    readers = {"market": None, "learning": LEARNING_KEYS, "impulse": IMPULSE_KEYS, "run": RUN_KEYS}
    for path in overrides:
        table, _, key = path.partition(".")
        allowed = readers.get(table, ())
        if table not in readers or not key or (allowed is not None and key not in allowed):
            raise ValueError(f"cannot override {path!r}")
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", EXPERIMENT_KEYS)
    if "kind" in exp and exp["kind"] != "learn":
        raise InputError("experiment.kind", f"this command runs kind = 'learn' experiments, got {exp['kind']!r}")

    def table(name: str) -> dict:
        if name == "market":
            tab = doc.get("market", {})
            if not isinstance(tab, dict):
                raise InputError("market", f"must be a table, got {tab!r}")
            tab = dict(tab)
        else:
            tab = dict(refuse_unknown(doc.get(name, {}), name, readers[name]))
        for path, (value, _name) in overrides.items():
            t, _, key = path.partition(".")
            if t == name:
                tab[key] = value
        return tab

    if "market" not in doc and not any(p.startswith("market.") for p in overrides):
        raise InputError("market", "missing: the [market] table describes the market")
    market = market_from_dict(table("market"))
    n_firms = market.spec().n_firms
    lt, it, rt = table("learning"), table("impulse"), table("run")

    base = {k: lt[k] for k in LEARNER_PARAMS if k in lt}
    learner = QLearner(**base)
    learner.spec(prefix="learning")
    if "strategies" in doc:
        learner = _lineup_from_entries(doc["strategies"], base, n_firms)

    def get(tab: dict, name: str, key: str, constraint, default):
        return constraint.check(f"{name}.{key}", tab.get(key, default))

    rc = RUN_CONSTRAINTS
    settings = {
        "convergence": get(lt, "learning", "convergence", rc["convergence"], 100_000),
        "max_periods": get(lt, "learning", "max_periods", rc["max_periods"], 1_000_000_000),
        "near": get(lt, "learning", "near", rc["near"], 0.1),
        "limit_periods": get(lt, "learning", "limit_periods", rc["limit_periods"], LIMIT_PERIODS),
        "sessions": get(rt, "run", "sessions", rc["sessions"], 100),
        "seed": get(rt, "run", "seed", rc["seed"], 0),
        "workers": get(rt, "run", "workers", rc["workers"], None),
        "response_periods": get(it, "impulse", "periods", rc["response_periods"], 15),
    }
    firm = get(it, "impulse", "firm", Integer(1, n_firms), 1)
    settings["deviator"] = firm - 1  # learn() counts seats from 0; every output counts firms from 1
    action = it.get("action", "best_response")
    if isinstance(action, str) and action != "best_response":
        try:
            action = float(action)
        except ValueError:
            raise InputError("impulse.action", f"must be 'best_response' or a number, got {action!r}") from None
    if not isinstance(action, str):
        action = Real(0, None).check("impulse.action", action)
    settings["deviation"] = action
    # the line-up and its memory, checked before any work (the run repeats this, cheaply)
    workers = settings["workers"] or usable_cores()
    compile_lineup(market, learner, workers=min(workers, settings["sessions"]), random_automata="estimate")
    return {"market": market, "learner": learner, "settings": settings}




# ------------------------------------------------------------------------------------------------
# Reference and benchmark
# ------------------------------------------------------------------------------------------------


def reference_session(lineup: Lineup, session: int = 0, *, seed: int = 0, convergence: int = 100_000,
                      max_periods: int = 10_000, cell: int = 0) -> dict:
    """The plain-Python twin of one session (:func:`sim.learning.twin.reference_session`), with the
    session's own random stream. Slow: for tests and benchmarks on short sessions."""

    state = stream_states(seed, (cell,), session, session + 1)[0]
    return _ref(lineup, state, convergence, max_periods)


def kernel_session(lineup: Lineup, session: int = 0, *, seed: int = 0, convergence: int = 100_000,
                   max_periods: int = 10_000, cell: int = 0) -> dict:
    """One session through the kernel, returning the same fields as :func:`reference_session`
    (``rng``: the generator state after the last period)."""

    rng = stream_states(seed, (cell,), session, session + 1)[0].copy()
    Q = lineup.q0.copy()
    greedy = lineup.initial_greedy()
    z = lineup.z0.copy()
    lu = lineup
    s = K._initial_state(rng, lu.radix, lu.place, lu.M, lu.K)
    st, t, s = K._learn(lu.kind, lu.lidx, lu.radix, lu.place, lu.S, lu.K, lu.mod, lu.alpha, lu.beta, lu.delta,
                        lu.payoff, Q, greedy, rng, s, convergence, max_periods, z, *lu.kernel_args())
    return {"status": int(st), "periods": int(t), "state": int(s), "Q": Q, "greedy": greedy, "z": z, "rng": rng}


def _baseline_market():

    # Calvano et al. (2020), baseline: a_i = 2, a_0 = 0, c = 1, mu = 1/4
    return Market(LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)


def benchmark(market=None, learners=None, *, sessions: int = 4, reference_periods: int = 100_000,
              kernel_periods: int = 20_000_000, repeat: int = 1, seed: int = 0) -> dict:
    """Throughput of the learning kernel and of its plain-Python reference, measured in the same run.

    Three timings, on the published baseline unless ``market`` and ``learners`` are given, all on one
    core:

    * the kernel on whole sessions (``sessions`` of them, each to convergence): the realistic
      workload, exploration phase and all;
    * the kernel on the reference's workload: the first ``reference_periods`` periods of as many
      sessions as make ``kernel_periods`` periods;
    * the reference on the first ``reference_periods`` periods of session 0, whose Q-matrix is
      checked to equal the kernel's.

    ``ratio`` compares the kernel and the reference on the same workload. Kernel timings are the best
    of ``repeat`` runs.

    Returns
    -------
    dict of plain numbers and a ``workload`` description.
    """
    market = _baseline_market() if market is None else market
    lineup = compile_lineup(market, learners)
    never = 2**62
    t0 = time.perf_counter()
    kernel_session(lineup, seed=seed, convergence=never, max_periods=1000)
    t_first = time.perf_counter() - t0

    def best(fn):
        out, tbest = None, math.inf
        for _ in range(max(1, repeat)):
            t0 = time.perf_counter()
            out = fn()
            tbest = min(tbest, time.perf_counter() - t0)
        return out, tbest

    whole, t_whole = best(lambda: sum(kernel_session(lineup, j, seed=seed, convergence=100_000,
                                                     max_periods=10**9)["periods"] for j in range(sessions)))
    reps = max(1, kernel_periods // reference_periods)
    _, t_same = best(lambda: [kernel_session(lineup, j, seed=seed, convergence=never, max_periods=reference_periods)
                              for j in range(reps)])
    t0 = time.perf_counter()
    ref = reference_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    t_ref = time.perf_counter() - t0
    ker = kernel_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    out = {
        "workload": f"{lineup.n_seats} Q-learners, {int(lineup.radix[0])} actions each, memory {lineup.K}",
        "first_call_seconds": t_first,
        "kernel_sessions": sessions,
        "kernel_session_periods": int(whole),
        "kernel_session_seconds": t_whole,
        "kernel_session_periods_per_second": whole / t_whole,
        "kernel_periods": reps * reference_periods,
        "kernel_seconds": t_same,
        "kernel_periods_per_second": reps * reference_periods / t_same,
        "reference_periods": reference_periods,
        "reference_seconds": t_ref,
        "reference_periods_per_second": reference_periods / t_ref,
        "reference_identical_to_kernel": bool(np.array_equal(ref["Q"], ker["Q"])),
    }
    out["ratio"] = out["kernel_periods_per_second"] / out["reference_periods_per_second"]
    return out


def time_sessions(sessions: int = 1000, workers: int = 2, seed: int = 0, cold: bool = True) -> dict:
    """Wall time of ``sessions`` baseline sessions in a fresh process, compilation included.

    With ``cold`` the process gets an empty numba cache directory, so every kernel is compiled from
    scratch inside the timed run (interpreter start and imports are timed too).
    """

    code = ("import json, time; t0 = time.perf_counter(); from sim.learning.session import learn, _baseline_market; "
            f"r = learn(_baseline_market(), sessions={int(sessions)}, seed={int(seed)}, workers={int(workers)}, "
            "progress=False); s = r.summary(); "
            "print(json.dumps({'converged': int(r.converged.sum()), 'profit_gain': s['profit_gain']['mean'], "
            "'in_process_seconds': time.perf_counter() - t0}))")
    env = dict(os.environ)
    with tempfile.TemporaryDirectory() as cache:
        if cold:
            env["NUMBA_CACHE_DIR"] = cache
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=False)
        wall = time.perf_counter() - t0
    if proc.returncode != 0:
        last = proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "no output"
        raise RuntimeError(f"timed learning run failed: {last}")
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out.update({"sessions": sessions, "workers": workers, "cold_cache": cold, "wall_seconds": wall})
    return out
