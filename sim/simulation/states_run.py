"""A simulated line-up in a market whose demand state moves: state frequencies and profits by state.

The demand state follows :class:`sim.theory.demand_states.DemandStates` (i.i.d. states, a Markov chain or a
deterministic cycle) and each state is the experiment's market with one parameter set to the state's value
(:func:`sim.theory.demand_states.markets_by_state`). The line-up's automata do not see the state: they play the
same actions in every state. That is simulated exactly, without touching the kernel, when the state scales the
whole profit function by a factor at every action the line-up can play and leaves the static Nash and the agreed
actions unchanged -- the market size of logit demand under price competition is the standard case (profits are
size times margin times share; Rotemberg and Saloner, 1986, "A supergame-theoretic model of price wars during
booms", AER 76(3), move demand this way). Then each period's recorded profit is the profit of the plain path times
the factor of the period's state (and ``(1 + g)^t`` with a growth rate ``g``). :func:`state_factors` verifies the
property on the market itself (every combination of the firms' levels, and the stage game of every state) and
refuses the table otherwise. A line-up whose collusive action depends on the state is played state by state by the
kernel itself (:mod:`sim.simulation.state_game`); :func:`contingent_play` summarises that run by state: the same
shares and profits, and the agreed and simulated prices and the share of collusive periods of each state.

The draws: replication ``r`` draws its state path from the stream family ``(key..., 1)`` in the order of
:func:`sim.theory.draws.draw_state_path` (the plain-Python reference of the compiled state draws of
:mod:`sim.simulation.events`), so the numbers never depend on workers or threads.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.records import Record
from sim.core.rng import ReferenceStream, stream_states
from sim.core.stats import Estimate, mean_estimate
from sim.models.stagecore import evaluate_py, market_arrays
from sim.simulation.driver import RawRun
from sim.simulation.game import Game, stage_levels
from sim.simulation.state_game import StateGame
from sim.theory.demand_states import DemandStates, stationary_distribution
from sim.theory.draws import draw_state_path

__all__ = ["MAX_PROFILES", "ContingentPlay", "StatePlay", "apply_states", "contingent_play", "state_factors"]

#: most level combinations checked for the scaling property
MAX_PROFILES = 4096
_RTOL = 1e-9


@dataclass(frozen=True, eq=False)
class ContingentPlay(Record):
    """What a line-up whose collusive action depends on the demand state agreed and played in each state.

    Parameters
    ----------
    source : str
        Where the agreed actions come from: ``"agreement"``, ``"best"`` or ``"given"``
        (:mod:`sim.simulation.state_game`).
    collusive_actions : ndarray of shape (n_states, n_products)
        The agreed action of each product in each state.
    nash_actions : ndarray of shape (n_states, n_products)
        The static Nash action of each product in each state.
    agreed_price : ndarray of shape (n_states,)
        The market price of the agreed actions in each state.
    nash_price : ndarray of shape (n_states,)
        The market price of static Nash in each state.
    full_price : ndarray of shape (n_states,)
        The market price of the experiment's agreement in each state (full collusion).
    price : ndarray of shape (n_states,)
        Simulated mean market price over the periods of each state (nan for a state never visited).
    collusive_share : ndarray of shape (n_states,)
        Share of the periods of each state in which every firm colluded (nan for a state never visited).
    full_collusion_delta : float
        The critical discount factor of full collusion in every state under grim trigger (nan when there is none
        below one, or with a given agreement).
    """

    source: str
    collusive_actions: np.ndarray
    nash_actions: np.ndarray
    agreed_price: np.ndarray
    nash_price: np.ndarray
    full_price: np.ndarray
    price: np.ndarray
    collusive_share: np.ndarray
    full_collusion_delta: float = math.nan


@dataclass(frozen=True, eq=False)
class StatePlay(Record):
    """State frequencies and profits by state of a simulated line-up.

    Parameters
    ----------
    labels : list of str
    kind : str
        ``"iid"``, ``"markov"`` or ``"cycle"``.
    parameter : str
        The market parameter that moves with the state.
    values : ndarray of shape (n_states,)
    factors : ndarray of shape (n_states,)
        Profit in each state as a multiple of the profit in the experiment's market.
    growth : float
    frequencies : ndarray of shape (n_states,)
        Share of the periods played in each state.
    frequency_se : ndarray of shape (n_states,)
        Standard errors across replications (each replication's share one observation).
    expected : ndarray of shape (n_states,)
        The probabilities (i.i.d.), the stationary distribution (Markov) or the shares of the cycle.
    profit_by_state : ndarray of shape (n_states, n_firms)
        Mean profit per period of each firm in the periods of each state (nan for a state never visited).
    profit : list of Estimate
        Per firm: total profit per replication with the states.
    discounted_profit : list of Estimate
        Per firm: discounted profit per replication with the states.
    contingent : ContingentPlay or None
        The agreed actions and prices per state when the line-up's collusive action depends on the state
        (``factors`` are then nan: each state is played in its own market).
    """

    labels: list
    kind: str
    parameter: str
    values: np.ndarray
    factors: np.ndarray
    growth: float
    frequencies: np.ndarray
    frequency_se: np.ndarray
    expected: np.ndarray
    profit_by_state: np.ndarray
    profit: list[Estimate]
    discounted_profit: list[Estimate]
    contingent: ContingentPlay | None = None


def _level_profiles(game: Game):
    """Every action profile the line-up can play: one level per firm, each firm's own products."""
    levels, owner = game.lineup.levels, game.arrays.owner
    n_firms, L = levels.shape[0], levels.shape[1]
    if L ** n_firms > MAX_PROFILES:
        raise InputError("demand_states", f"the line-up's {L} levels per firm make {L ** n_firms} profiles to check "
                                          f"(at most {MAX_PROFILES}); use fewer levels or firms")
    for combo in itertools.product(range(L), repeat=n_firms):
        yield np.array([levels[owner[k], combo[owner[k]], k] for k in range(owner.size)])


def state_factors(game: Game, markets, agreement: str, actions=None) -> np.ndarray:
    """The factor by which each state scales every profit the line-up can earn, verified on the markets.

    Parameters
    ----------
    game : Game
        The compiled line-up in the experiment's market.
    markets : list of Market
        One market per state (:func:`sim.theory.demand_states.markets_by_state`).
    agreement : str
    actions : array_like of shape (n_products,), optional
        The agreed actions with ``agreement = "given"``.

    Returns
    -------
    ndarray of shape (n_states,)

    Raises
    ------
    InputError
        ``demand_states.parameter`` when a state does not scale the profits by one factor or moves the static
        Nash or agreed actions (the line-up would need state-dependent actions).
    """
    base_arrays = game.arrays
    profiles = list(_level_profiles(game))
    base = np.array([evaluate_py(base_arrays, a, want_cs=False)[2] for a in profiles])
    ref = np.abs(base).max()
    out = np.empty(len(markets))
    for s, m in enumerate(markets):
        ms = m.spec()
        arr = market_arrays(ms)
        prof = np.array([evaluate_py(arr, a, want_cs=False)[2] for a in profiles])
        big = np.argmax(np.abs(base))
        f = float(prof.flat[big] / base.flat[big]) if ref > 0 else 1.0
        _, lv = stage_levels(ms, agreement, actions)
        same = all(np.allclose(lv.profiles[k], game.levels.profiles[k], rtol=1e-7, atol=1e-9)
                   for k in ("collusive", "nash"))
        if not (np.allclose(prof, f * base, rtol=_RTOL, atol=_RTOL * ref) and same and f > 0):
            raise InputError("demand_states.parameter", f"state {s + 1} does not scale every profit of the line-up "
                                                        "by one factor with the same static Nash and agreed actions; "
                                                        "the simulation would need strategies whose actions depend "
                                                        "on the state (use a size parameter, e.g. 'size' of logit "
                                                        "demand)")
        out[s] = f
    return out


def _expected(states: DemandStates) -> np.ndarray:
    if states.kind == "markov":
        return stationary_distribution(states.transition)
    return np.asarray(states.probabilities, dtype=float)


def apply_states(raw: RawRun, states: DemandStates, factors, parameter: str, values, delta: float, seed: int,
                 key=(), confidence: float = 0.95) -> StatePlay:
    """Scale each recorded period's profits by its state's factor.

    Parameters
    ----------
    raw : RawRun
        The line-up's run with every replication's path recorded.
    states : DemandStates
    factors : ndarray of shape (n_states,)
        From :func:`state_factors`.
    parameter : str
    values : array_like of shape (n_states,)
    delta : float in (0, 1)
    seed : int
    key : tuple of int
        The cell's stream key (the states use the family ``(key..., 1)``).
    confidence : float in (0, 1)

    Returns
    -------
    StatePlay
    """
    n_reps, n_periods = raw.n_reps, raw.path_collude.shape[1]
    if raw.n_paths != n_reps:
        raise ValueError("apply_states needs the path of every replication")
    rng = stream_states(seed, (*key, 1), 0, n_reps)
    path = np.stack([draw_state_path(ReferenceStream(rng[r]), states, n_periods) for r in range(n_reps)])
    running = raw.path_collude >= 0
    profit = np.where(running[:, :, None], raw.path_profit, 0.0) * np.asarray(factors)[path][:, :, None]
    return _state_play(path, profit, running, states, parameter, values, factors, delta, confidence)


def _state_play(path, profit, running, states: DemandStates, parameter, values, factors, delta, confidence,
                contingent=None) -> StatePlay:
    """Shares of periods, profits by state and per replication, from the paths of states and profits."""
    n_reps, n_periods = path.shape
    S = states.n_states
    w = delta ** np.arange(n_periods, dtype=float) * (1.0 + states.growth) ** np.arange(n_periods, dtype=float)
    g = (1.0 + states.growth) ** np.arange(n_periods, dtype=float)
    played = running.sum(axis=1).astype(float)
    shares = np.stack([((path == s) & running).sum(axis=1) / played for s in range(S)], axis=1)
    by_state = np.full((S, profit.shape[2]), math.nan)
    for s in range(S):
        mask = (path == s) & running
        if mask.any():
            by_state[s] = profit[mask].mean(axis=0)
    tot = np.einsum("rtf,t->rf", profit, g)
    disc = np.einsum("rtf,t->rf", profit, w)
    firms = range(profit.shape[2])
    return StatePlay(list(states.labels), states.kind, parameter, np.asarray(values, dtype=float),
                     np.asarray(factors, dtype=float), float(states.growth), shares.mean(axis=0),
                     shares.std(axis=0, ddof=1) / math.sqrt(n_reps) if n_reps > 1 else np.full(S, math.nan),
                     _expected(states), by_state,
                     [mean_estimate(tot[:, i], confidence) for i in firms],
                     [mean_estimate(disc[:, i], confidence) for i in firms], contingent)


def contingent_play(raw: RawRun, game: StateGame, parameter: str, values, delta: float,
                    confidence: float = 0.95) -> StatePlay:
    """State frequencies, profits, prices and collusion by state of a line-up played state by state.

    Parameters
    ----------
    raw : RawRun
        The run of :func:`sim.simulation.driver.run_game` with ``demand = game``, every replication's path
        recorded.
    game : StateGame
        The per-state markets and agreed actions.
    parameter : str
    values : array_like of shape (n_states,)
    delta : float in (0, 1)
    confidence : float in (0, 1)

    Returns
    -------
    StatePlay
        With ``contingent`` set and ``factors`` nan.
    """
    if raw.n_paths != raw.n_reps or raw.demand_path.shape[0] != raw.n_reps:
        raise ValueError("contingent_play needs the path of every replication and its demand states")
    states, path = game.states, raw.demand_path
    running = raw.path_collude >= 0
    S = states.n_states
    price, share = np.full(S, math.nan), np.full(S, math.nan)
    for d in range(S):
        mask = (path == d) & running
        if mask.any():
            price[d] = raw.path_market[:, :, 0][mask].mean()
            share[d] = (raw.path_collude[mask] == 1).mean()
    cp = ContingentPlay(game.source, game.collusive.copy(), game.nash.copy(), game.agreed_price.copy(),
                        game.nash_price.copy(), game.full_price.copy(), price, share, game.full_collusion_delta)
    profit = np.where(running[:, :, None], raw.path_profit, 0.0)
    return _state_play(path, profit, running, states, parameter, values, np.full(S, math.nan), delta, confidence,
                       cp)
