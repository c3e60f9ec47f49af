"""A line-up of learners (and automata) resolved against a market: the arrays the learning kernels play.

:func:`compile_lineup` checks the line-up (2 to 4 single-product firms, at least one learner, automata that act at
random only when asked for), refuses a state space that does not fit in memory before anything is allocated, and
compiles it into the groups of :mod:`sim.learning.inputs` held by a :class:`Lineup`.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Any

import numpy as np

import strategies.step as SS
from sim.core.errors import InputError
from sim.core.params import Options
from sim.learning.bandits import reward_bounds
from sim.learning.fixed import fixed_q, with_fixed_policies, with_sources
from sim.learning.inputs import (
    AUTOMATON,
    FAMILY_CODES,
    LEARNER,
    AutomatonInputs,
    Play,
    SeatInputs,
    SessionState,
    StageInputs,
    new_triggers,
)
from sim.models.market import MarketSpec
from sim.models.stagecore import evaluate_py, market_arrays
from sim.simulation.engine import stage_levels
from sim.theory.equilibrium import stage_game
from strategies import AlwaysCompete, Automaton
from strategies import compile_lineup as compile_automata
from strategies.qlearning import SEAT_NAMES, QLearner

__all__ = ["Lineup", "available_memory", "compile_lineup"]

#: share of the available memory a run may take for its Q-matrices
MEMORY_SHARE = 0.8


@dataclass(frozen=True, eq=False)
class Lineup:
    """A line-up of learners (and, optionally, automata) resolved against a market.

    Attributes
    ----------
    market : sim.MarketSpec
    learners : tuple
        One entry per seat: the seat's :class:`~strategies.qlearning.CompiledLearner`, or None for an automaton.
    names : tuple of str
        Name of each seat: a learner's family (:data:`strategies.qlearning.SEAT_NAMES`: ``"qlearning"``, ``"ucb"``,
        ``"thompson"``, ``"fixed"``) or the automaton's registry name.
    grids : tuple of ndarray
        Actions of each seat (a learner's grid; an automaton's distinct action values, increasing).
    seats : sim.learning.inputs.SeatInputs
        Per seat: kind, learner number, actions, place in a profile, memory, automaton states, parameters.
    stage : sim.learning.inputs.StageInputs
        The stage game on the grid: ``M`` profiles, ``S`` history states, longest memory ``K``, every profile's
        profits, actions and prices.
    automata : sim.learning.inputs.AutomatonInputs
        The automata's compiled arrays (placeholders without automata).
    engine_lineup : strategies.CompiledLineup or None
        The engine's compiled automata (rows of learner seats are placeholders, never played); None without
        automata.
    q0 : ndarray of float64, shape (n_learners, max(mod), max(radix))
        Initial Q-values (entries beyond a learner's states or actions are unused); compiled for alternating moves,
        one state row (the same values hold in every state), for :mod:`sim.learning.alternating` only.
    z0 : ndarray of int64, shape (n,)
        Initial automaton states.
    nash_profits, collusive_profits, nash_actions, collusive_actions, nash_prices, collusive_prices : ndarray
        Of shape (n,): the continuous static-Nash and joint-profit benchmarks.
    random_seats : tuple of int
        Automaton seats that act at random (a forgiveness, lapse or cheat probability strictly between 0 and 1).
        They draw from the session's stream; with any of them greedy play after learning is a Markov chain and
        the limit analysis is a simulated estimate (:attr:`limit_exact` is False).
    reward : ndarray of float64, shape (M, n), optional
        What each seat's learner is rewarded with at each profile, when it is not the seat's own profit: after a
        merger of learners' products, the merged firm's profit (:func:`sim.learning.merger.merged_lineup`). None:
        every learner is rewarded with its own product's profit (``stage.payoff``).
    """

    market: Any
    learners: tuple
    names: tuple
    grids: tuple
    seats: SeatInputs
    stage: StageInputs
    automata: AutomatonInputs
    engine_lineup: Any
    q0: np.ndarray
    z0: np.ndarray
    nash_profits: np.ndarray
    collusive_profits: np.ndarray
    nash_actions: np.ndarray
    collusive_actions: np.ndarray
    nash_prices: np.ndarray
    collusive_prices: np.ndarray
    random_seats: tuple = ()
    reward: np.ndarray | None = None

    @property
    def n_seats(self) -> int:
        """Number of seats (one per firm)."""
        return int(self.seats.radix.size)

    @property
    def learner_seats(self) -> list[int]:
        """The seats held by learners, increasing."""
        return [i for i, c in enumerate(self.learners) if c is not None]

    @property
    def has_automata(self) -> bool:
        """Whether an automaton holds a seat."""
        return self.engine_lineup is not None

    @property
    def limit_exact(self) -> bool:
        """Whether greedy play after learning is deterministic, so that the limit cycle, the impulse
        response and the value of a deviation are exact (no automaton acts at random)."""
        return not self.random_seats

    @property
    def place(self) -> np.ndarray:
        """Place value of each seat in a profile number, shape (n,)."""
        return self.seats.place

    @property
    def payoff(self) -> np.ndarray:
        """Profit of each seat at each profile, shape (M, n)."""
        return self.stage.payoff

    @property
    def learning_stage(self) -> StageInputs:
        """The stage game the learners learn on: :attr:`stage` with the learners' rewards as profits (the same
        object without :attr:`reward`). The limit analysis reads :attr:`stage`: the products' own profits."""
        if self.reward is None:
            return self.stage
        return self.stage._replace(payoff=self.reward)

    def punishing(self, z: np.ndarray) -> np.ndarray:
        """Which automaton seats are in a non-collusive state (punishing) in automaton states ``z``.

        Parameters
        ----------
        z : ndarray of int64, shape (n,)
            Automaton states (entries of learner seats are ignored).

        Returns
        -------
        ndarray of bool, shape (n,)
            False for learner seats.
        """
        out = np.zeros(self.n_seats, dtype=bool)
        if self.has_automata:
            for i in range(self.n_seats):
                if self.learners[i] is None:
                    out[i] = self.automata.states[i, int(z[i]), SS.COLLUSIVE] == 0
        return out

    def initial_greedy(self) -> np.ndarray:
        """The greedy actions of the initial Q-values.

        Returns
        -------
        ndarray of int64, shape (n_learners, max(mod))
            First argmax of every row of ``q0`` restricted to each learner's actions.
        """
        g = np.zeros(self.q0.shape[:2], dtype=np.int64)
        for i in self.learner_seats:
            li = int(self.seats.lidx[i])
            g[li] = np.argmax(self.q0[li, :, : self.seats.radix[i]], axis=1)
        return g

    def session_state(self, rng, greedy: np.ndarray | None = None) -> SessionState:
        """The state a session starts from: copies of the initial Q-values, greedy actions and automaton states, and
        an empty record of the automata's punishments.

        Parameters
        ----------
        rng : ndarray of uint64, shape (4,)
            The session's generator state (held, not copied: the kernel advances it).
        greedy : ndarray of int64, shape (n_learners, max(mod)), optional
            :meth:`initial_greedy`, when already computed (copied).

        Returns
        -------
        sim.learning.inputs.SessionState
        """
        g = self.initial_greedy() if greedy is None else greedy.copy()
        n_l, m_max = self.q0.shape[0], self.q0.shape[2]
        return SessionState(self.q0.copy(), g, self.z0.copy(), rng, np.zeros(2, dtype=np.int64),
                            new_triggers(self.n_seats), np.zeros((n_l, m_max), dtype=np.int64), np.zeros((n_l, m_max)))

    def decode(self, prof) -> np.ndarray:
        """Action indices of profile numbers.

        Parameters
        ----------
        prof : int or array_like of int

        Returns
        -------
        ndarray of int64, shape (..., n)
        """
        prof = np.asarray(prof, dtype=np.int64)
        return (prof[..., None] // self.seats.place) % self.seats.radix

    def play(self, greedy: np.ndarray, t_end: int, rng: np.ndarray | None = None) -> Play:
        """Greedy play of learned strategies, as the kernels of :mod:`sim.learning.limits` take it.

        Parameters
        ----------
        greedy : ndarray of int64, shape (n_learners, max(mod))
            The learned greedy actions.
        t_end : int
            The period the automata see (the end of learning).
        rng : ndarray of uint64, shape (4,), optional
            The generator the automata draw from (advanced in place by the kernel); the default, a state that is
            never used, suits deterministic line-ups.

        Returns
        -------
        sim.learning.inputs.Play
        """
        if rng is None:
            rng = np.zeros(4, dtype=np.uint64)
        return Play(self.seats, self.stage, self.automata, greedy, int(t_end), rng)

    def system_state(self, s: int, z) -> int:
        """History state and automaton states as one integer.

        Parameters
        ----------
        s : int
            History state.
        z : array_like of int, shape (n,)
            Automaton states (entries of learner seats are ignored: their place value is 0).

        Returns
        -------
        int
            ``s + S * sum_i z[i] * zplace[i]``.
        """
        zplace = self.seats.zplace
        return int(s) + self.stage.S * int(sum(int(z[i]) * int(zplace[i]) for i in range(self.n_seats)))


def available_memory() -> int:
    """Bytes of memory available to this process (Linux ``MemAvailable``, else physical memory).

    Returns
    -------
    int
    """
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
                  z_states: int = 1, states: int | None = None) -> None:
    """Refuse a state space that cannot be held, before anything is allocated (``states``: the learners' states
    when they are not the histories of the simultaneous protocol, as under alternating moves)."""
    n = len(radix)
    M = math.prod(radix)
    K = max(ks)
    S = M**K if states is None else states
    n_states = S
    m_max = max(radix)
    # the memory k sets the histories of the simultaneous protocol; the grid alone the states of alternating moves
    name = "k" if states is None else "m"
    key = f"{prefix}.{name}" if prefix else name
    per_session = n * n_states * m_max * 8 + n * n_states * 8  # Q-values and greedy actions
    if states is not None:
        # alternating moves: the limit analysis marks each of the 2 M (mover, price pair) states it visits
        per_session += 4 * M * 8 + 8
    tables = 4 * M * n * 8
    need = per_session * (n_workers + 1) + tables
    avail = available_memory() if available is None else available
    shown = str(n_states) if n_states < 10**9 else f"{float(n_states):.3g}"
    if need > MEMORY_SHARE * avail:
        raise InputError(
            key,
            f"state space too large: {n} seats x {shown} states x {m_max} actions need "
            f"{_gb(per_session)} per session ({_gb(need)} for {n_workers} worker(s)), more than the "
            f"{_gb(MEMORY_SHARE * avail)} that may be used; "
            + ("reduce m, k or the number of firms" if states is None else "reduce the number of prices"),
        )
    if S * M * z_states >= 2**62:
        raise InputError(key, f"state space too large: {M}^{K} history states x {z_states} automaton states "
                              f"= {float(S) * z_states:.3g} exceed what the kernel can index; reduce m, k or the "
                              "number of firms")


def _is_learner(x) -> bool:
    return isinstance(x, QLearner)


def _seats_and_keys(learners, n: int, prefix: str, seat_prefix: str | None) -> tuple[list, list]:
    """One strategy and one error key path per seat."""
    if learners is None:
        learners = QLearner()
    if _is_learner(learners):
        return [learners] * n, [prefix] * n
    if isinstance(learners, str | dict) or not hasattr(learners, "__len__"):
        raise InputError(prefix, f"must be a QLearner or one strategy per firm, got {learners!r}")
    seats = list(learners)
    sp = "strategies" if seat_prefix is None else seat_prefix
    if len(seats) != n:
        raise InputError(sp, f"the line-up has {len(seats)} seats but the market has {n} firms")
    if not any(_is_learner(x) for x in seats):
        raise InputError(sp, "the line-up has no learner; use `supergame simulate` for automata only")
    return seats, [f"{sp}[{i + 1}]" if sp else f"[{i + 1}]" for i in range(n)]


def compile_lineup(market, learners=None, *, prefix: str = "learning", workers: int = 1,
                   available_memory: int | None = None, agreement: str = "joint",
                   seat_prefix: str | None = None, random_automata: str = "refuse",
                   alternating: bool = False) -> Lineup:
    """Resolve a line-up of learners (and automata) against a market, checking that the state space
    fits in memory before anything is allocated.

    Parameters
    ----------
    market : sim.Market or sim.MarketSpec
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
        (:attr:`Lineup.limit_exact` is False; see :func:`sim.learning.session.learn`, which always uses this).
    alternating : bool
        For alternating moves (:mod:`sim.learning.alternating`), whose learners' state is the rival's current price:
        the memory check counts their tables (``m`` states of ``m`` prices per learner), and the initial values are
        kept for one state (the same in every state), not for every history of the simultaneous protocol.

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
    seats, keys = _seats_and_keys(learners, n, prefix, seat_prefix)
    # a fixed policy takes its grid and memory from its file (sim.learning.fixed)
    seats, policies = with_fixed_policies(seats, keys, market.to_dict() if hasattr(market, "to_dict") else None)
    is_l = [_is_learner(x) for x in seats]
    specs = {i: seats[i].spec(prefix=keys[i]) for i in range(n) if is_l[i]}
    # automata first: their action sets enter the state space
    auto = _automaton_part(ms, seats, is_l, keys, agreement, random_automata == "refuse")
    radix = [int(specs[i]["m"]) if is_l[i] else int(auto["values"][i].size) for i in range(n)]
    ks = [int(specs[i]["k"]) if specs[i]["family"] in ("q", "fixed") else 0 for i in range(n) if is_l[i]]
    _check_memory(radix, ks, max(1, int(workers)), prefix, available_memory, int(np.prod(auto["zn"])),
                  states=max(radix) if alternating else None)
    # the published grid of a learner without one is placed by the static-Nash and joint-profit actions
    stage = stage_game(ms) if any(is_l[i] and seats[i].get_params().get("grid") is None for i in range(n)) else None
    compiled = with_sources(tuple(seats[i].compile(stage, i, keys[i]) if is_l[i] else None for i in range(n)), policies)
    grids = tuple(compiled[i].grid if is_l[i] else auto["values"][i] for i in range(n))
    seat_in = _seat_inputs(compiled, radix, auto["zn"])
    M = int(np.prod(seat_in.radix))
    # the history of one period is kept even when every learner is a bandit (memory 0)
    stage_in = _stage_inputs(ms, grids, seat_in, M, max(1, *ks), auto["engine"] is not None, prefix)
    seat_in = _with_reward_bounds(seat_in, stage_in.payoff, compiled)
    st = stage_game(ms, agreement)
    names = tuple(SEAT_NAMES[compiled[i].family] if is_l[i] else getattr(seats[i], "name", type(seats[i]).__name__)
                  for i in range(n))
    return Lineup(
        market=ms, learners=compiled, names=names, grids=grids, seats=seat_in, stage=stage_in,
        automata=auto["inputs"], engine_lineup=auto["engine"],
        # under alternating moves a fixed policy is refused (sim.learning.alternating.check_alternating): its
        # policy has the simultaneous protocol's states, which the one row kept cannot hold
        q0=(_initial_q(compiled, seat_in, stage_in.payoff, keys, 1) if alternating else
            fixed_q(_initial_q(compiled, seat_in, stage_in.payoff, keys), policies, seat_in, grids, keys)),
        z0=auto["z0"],
        nash_profits=np.asarray(st.nash.profits, float), collusive_profits=np.asarray(st.collusive.profits, float),
        nash_actions=np.asarray(st.nash.actions, float), collusive_actions=np.asarray(st.collusive.actions, float),
        nash_prices=np.asarray(st.nash.prices, float), collusive_prices=np.asarray(st.collusive.prices, float),
        random_seats=tuple(auto["random_seats"]),
    )


def _seat_inputs(compiled: tuple, radix: list, zn: np.ndarray) -> SeatInputs:
    """The per-seat arrays: kinds, learner numbers, place values (seat 0 varies fastest), memories."""
    n = len(compiled)
    is_l = [c is not None for c in compiled]
    radix_a = np.array(radix, dtype=np.int64)
    place = np.ones(n, dtype=np.int64)
    for i in range(1, n):
        place[i] = place[i - 1] * radix_a[i - 1]
    M = int(np.prod(radix_a))
    mod = np.array([M ** compiled[i].k if is_l[i] else 1 for i in range(n)], dtype=np.int64)
    kind = np.array([LEARNER if x else AUTOMATON for x in is_l], dtype=np.int64)
    lidx = np.cumsum(is_l, dtype=np.int64) - 1
    lidx[~np.array(is_l)] = 0
    zplace = np.zeros(n, dtype=np.int64)
    acc = 1
    for i in range(n):
        if not is_l[i]:
            zplace[i] = acc
            acc *= int(zn[i])
    return SeatInputs(kind=kind, lidx=lidx, radix=radix_a, place=place, mod=mod, zn=zn, zplace=zplace,
                      owner=np.arange(n, dtype=np.int64),
                      alpha=np.array([c.alpha if c else 0.0 for c in compiled]),
                      beta=np.array([c.beta if c else 0.0 for c in compiled]),
                      delta=np.array([c.delta if c else 0.0 for c in compiled]),
                      share=np.array([c.share if c else 0.0 for c in compiled]),
                      family=np.array([FAMILY_CODES[c.family] if c else 0 for c in compiled], dtype=np.int64),
                      explore=np.array([c.exploration if c else 0.0 for c in compiled]),
                      noise=np.array([c.noise if c else 0.0 for c in compiled]),
                      reward_lo=np.zeros(n), reward_span=np.ones(n))


def _with_reward_bounds(seats: SeatInputs, payoff: np.ndarray, compiled: tuple) -> SeatInputs:
    """The bandit seats' reward scales, from the profits on the grid (:func:`sim.learning.bandits.reward_bounds`)."""
    lo, span = seats.reward_lo.copy(), seats.reward_span.copy()
    for i, c in enumerate(compiled):
        if c is not None and c.family != "q":
            lo[i], span[i] = reward_bounds(payoff, i)
    return seats._replace(reward_lo=lo, reward_span=span)


def _stage_inputs(ms, grids: tuple, seats: SeatInputs, M: int, K: int, automata: bool, prefix: str) -> StageInputs:
    """Every profile's actions, prices and profits (and the market price, for automata that watch it)."""
    n = len(grids)
    idx = (np.arange(M, dtype=np.int64)[:, None] // seats.place) % seats.radix
    actions = np.stack([grids[i][idx[:, i]] for i in range(n)], axis=1)
    _q, p, pi = ms.evaluate(actions)
    if not np.all(np.isfinite(pi)):
        raise InputError(prefix, "a profit on the action grid is not finite")
    values = np.zeros((n, int(seats.radix.max())))
    for i in range(n):
        values[i, : seats.radix[i]] = grids[i]
    mprice = np.zeros(M)
    if automata:
        arrays = market_arrays(ms)
        for j in range(M):
            mprice[j] = evaluate_py(arrays, actions[j], 1.0, False)[3]
    return StageInputs(M=M, S=M**K, K=K, payoff=np.ascontiguousarray(pi, dtype=float),
                       actions=np.ascontiguousarray(actions, dtype=float), prices=np.ascontiguousarray(p, dtype=float),
                       mprice=mprice, values=values, quantity_setting=bool(ms.quantity_setting))


def _initial_q(compiled: tuple, seats: SeatInputs, pi: np.ndarray, keys: list, rows: int | None = None) -> np.ndarray:
    """Initial Q-values of every learner: uniform, zeros or the given array (for ``rows`` states only when given:
    alternating moves read one)."""
    n = len(compiled)
    radix = [int(r) for r in seats.radix]
    n_l = sum(c is not None for c in compiled)
    q0 = np.zeros((n_l, int(seats.mod.max()) if rows is None else rows,
                   int(max(radix[i] for i in range(n) if compiled[i] is not None))))
    for i, c in enumerate(compiled):
        if c is None:
            continue
        if rows is not None and not isinstance(c.init, str):
            continue  # given values: refused under alternating moves (sim.learning.alternating.check_alternating)
        li = int(seats.lidx[i])
        n_states = int(seats.mod[i]) if rows is None else rows
        m = radix[i]
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
    return q0


def _automaton_part(ms, seats, is_l, keys, agreement, refuse_random) -> dict:
    """The automaton seats compiled (placeholders without them): ``engine`` (the engine's compiled line-up or
    None), ``inputs`` (:class:`AutomatonInputs`), ``values`` (seat -> its distinct actions), ``zn``, ``z0`` and
    ``random_seats``."""
    n = len(seats)
    zn = np.ones(n, dtype=np.int64)
    z0 = np.zeros(n, dtype=np.int64)
    if all(is_l):
        firms = np.zeros((n, 5), dtype=np.int64)
        firms[:, 0] = 1
        inputs = AutomatonInputs(np.zeros((n, 1, 9), dtype=np.int64), np.zeros((n, 1, 4)), firms,
                                 np.zeros((n, 1, n)), np.zeros((n, 1), dtype=np.int64))
        return {"engine": None, "inputs": inputs, "values": {}, "zn": zn, "z0": z0, "random_seats": []}
    engine, values, act_of_level, random_seats = _compile_automata(ms, seats, is_l, keys, agreement, refuse_random)
    for i in range(n):
        if not is_l[i]:
            zn[i] = int(engine.firms[i, SS.N_STATES])
            z0[i] = int(engine.firms[i, SS.INITIAL])
    inputs = AutomatonInputs(engine.states, engine.probs, engine.firms, engine.levels, act_of_level)
    return {"engine": engine, "inputs": inputs, "values": values, "zn": zn, "z0": z0, "random_seats": random_seats}


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
