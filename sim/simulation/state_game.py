"""A line-up whose collusive action depends on the demand state, ready for the kernel.

The demand state (:class:`sim.theory.demand_states.DemandStates`) is observed at the start of every period, before
the firms act. Each state is a market of its own (:func:`sim.theory.demand_states.markets_by_state`), and the
agreement names a collusive action per state: the line-up's automata keep their states and transitions, and every
level they name is resolved in the period's state (:func:`strategies.state_levels.levels_by_state`) -- the
collusive level is the state's agreed action, the Nash level the state's static Nash, the deviation level the
state's best one-shot deviation against the state's agreed action, which is also what an implementation error
plays. Where the collusive actions come from (:func:`state_collusive_actions`):

* ``"agreement"`` -- the experiment's agreement (``[collusion]``) in each state's market: full collusion state by
  state;
* ``"best"`` -- the most collusive state-contingent path sustainable at the run's discount factor under grim
  trigger (:func:`sim.theory.state_path.best_state_path`), whose prices fall in the states where cheating pays
  most (Rotemberg and Saloner, 1986, "A supergame-theoretic model of price wars during booms", AER 76(3));
* ``"given"`` -- actions given per state.

The draws: replication ``r`` draws its path of states from the stream family ``(key..., 1)`` in the order of
:func:`sim.theory.draws.draw_state_path` (one uniform per period; a cycle draws nothing) before it is played, so
the kernel's own draws (family ``key``) are those of the line-up without states and no number depends on the
number of workers or threads.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from sim.core.errors import InputError
from sim.core.rng import next_double, stream_states
from sim.models.stagecore import evaluate_py, market_arrays
from sim.simulation.game import Game, stage_levels
from sim.theory.demand_states import DemandStates, state_thresholds
from sim.theory.state_path import best_state_path
from strategies.state_levels import levels_by_state

__all__ = ["COLLUSIVE_PATHS", "StateGame", "compile_state_game", "draw_state_paths", "state_collusive_actions"]

#: where the collusive action of each state comes from (``demand_states.collusive_path``); ``"same"`` keeps the
#: line-up's actions in every state (:mod:`sim.simulation.states_run`)
COLLUSIVE_PATHS = ("same", "agreement", "best", "given")


@dataclass
class StateGame:
    """Per-state markets and level profiles of a compiled game (the kernel's :class:`~sim.simulation.kernel.
    DemandInputs` without the path).

    Parameters
    ----------
    states : DemandStates
        How the demand state moves.
    scalars : float64 ndarray of shape (n_states, 4)
        Scalar demand parameters per state.
    vector, cost, capacity : float64 ndarray of shape (n_states, n_products)
        Per-product demand parameters, marginal costs and capacities per state.
    levels : float64 ndarray of shape (n_states, n_firms, L, n_products)
        Every level of every firm in every state.
    tremble : float64 ndarray of shape (n_states, n_products)
        The actions of an implementation error per state (the state's deviation profile).
    collusive : float64 ndarray of shape (n_states, n_products)
        The agreed action of each product in each state.
    nash : float64 ndarray of shape (n_states, n_products)
        The static Nash action of each product in each state.
    agreed_price : float64 ndarray of shape (n_states,)
        The market price of the agreed actions in each state (without a demand shock).
    nash_price : float64 ndarray of shape (n_states,)
        The market price of static Nash in each state.
    full_price : float64 ndarray of shape (n_states,)
        The market price of the experiment's agreement in each state's market (full collusion).
    full_collusion_delta : float
        The critical discount factor of full collusion in every state under grim trigger
        (:func:`sim.theory.demand_states.state_thresholds`; nan when not below one or with a given agreement).
    source : str
        One of :data:`COLLUSIVE_PATHS` (not ``"same"``).
    """

    states: DemandStates
    scalars: np.ndarray
    vector: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    levels: np.ndarray
    tremble: np.ndarray
    collusive: np.ndarray
    nash: np.ndarray
    agreed_price: np.ndarray
    nash_price: np.ndarray
    full_price: np.ndarray
    full_collusion_delta: float
    source: str


def state_collusive_actions(source: str, states: DemandStates, markets, delta: float, agreement: str = "joint",
                            actions=None, given=None) -> np.ndarray | None:
    """The agreed action of each product in each state.

    Parameters
    ----------
    source : {"agreement", "best", "given"}
        See the module notes.
    states : DemandStates
    markets : list of Market, length n_states
    delta : float in (0, 1)
        The discount factor of the best path.
    agreement : str
        The experiment's agreement (``"agreement"`` and ``"best"``).
    actions : array_like of shape (n_products,), optional
        The agreed actions with ``agreement = "given"``.
    given : list, length n_states
        With ``"given"``: per state one number (every product) or one number per product.

    Returns
    -------
    ndarray of shape (n_states, n_products), or None
        None with ``"agreement"`` (each state's own agreement is solved with its stage game).
    """
    S = states.n_states
    P = markets[0].spec().n_products
    if source == "agreement":
        return None
    if source == "best":
        if agreement == "given":
            raise InputError("demand_states.collusive_path", "'best' follows the path from static Nash to the "
                                                             "agreement of each state; with collusion.agreement = "
                                                             "'given' give collusive_actions per state instead")
        return np.asarray(best_state_path(states, markets, delta, agreement).actions, dtype=float).reshape(S, P)
    key = "demand_states.collusive_actions"
    if not isinstance(given, list) or len(given) != S:
        n = len(given) if isinstance(given, list) else type(given).__name__
        raise InputError(key, f"must list one collusive action per state ({S}), got {n}")
    out = np.empty((S, P))
    for d, a in enumerate(given):
        if isinstance(a, bool) or not isinstance(a, int | float | list):
            raise InputError(f"{key}[{d + 1}]", f"must be a number or one number per product ({P}), got {a!r}")
        row = np.full(P, float(a)) if not isinstance(a, list) else np.asarray(a, dtype=float)
        if row.shape != (P,) or not np.all(np.isfinite(row)) or np.any(row < 0):
            raise InputError(f"{key}[{d + 1}]", f"must be a non-negative number or one per product ({P}), got {a!r}")
        out[d] = row
    return out


def compile_state_game(game: Game, states: DemandStates, markets, source: str, collusive=None,
                       agreement: str = "joint", actions=None) -> StateGame:
    """Resolve a compiled game's levels in every state's market.

    Parameters
    ----------
    game : Game
        The line-up compiled against the experiment's market.
    states : DemandStates
    markets : list of Market, length n_states
        One market per state (same firms and products, same model).
    source : {"agreement", "best", "given"}
        Where the collusive actions come from.
    collusive : ndarray of shape (n_states, n_products), optional
        The agreed actions per state (:func:`state_collusive_actions`); None with ``"agreement"``.
    agreement : str
        The experiment's agreement (with ``"agreement"``).
    actions : array_like of shape (n_products,), optional
        Its actions with ``agreement = "given"``.

    Returns
    -------
    StateGame
    """
    base = game.arrays
    if base.mixed.size:
        raise InputError("demand_states.collusive_path", "state-contingent play is not available in markets with a "
                                                         "mixed static equilibrium")
    arrays, lev, full = [], [], []
    for d, m in enumerate(markets):
        ms = m.spec(f"demand_states.markets[{d}]")
        arr = market_arrays(ms)
        if arr.code != base.code or not np.array_equal(arr.owner, base.owner) or \
                arr.quantity_setting != base.quantity_setting or arr.mixed.size:
            raise InputError("demand_states.parameter", f"state {d + 1}'s market must be the experiment's market "
                                                        f"with another parameter value")
        _, agreed = stage_levels(ms, agreement, actions)
        lv = agreed if collusive is None else stage_levels(ms, "given", collusive[d])[1]
        full.append(evaluate_py(arr, agreed.profiles["collusive"], want_cs=False)[3])
        arrays.append(arr)
        lev.append(lv)
    levels = levels_by_state(game.lineup, lev)
    full_delta = math.nan if agreement == "given" else float(state_thresholds(states, markets, agreement).market)
    coll = np.stack([np.asarray(v.profiles["collusive"], dtype=float) for v in lev])
    nash = np.stack([np.asarray(v.profiles["nash"], dtype=float) for v in lev])
    return StateGame(
        states, np.stack([a.scalars for a in arrays]), np.stack([a.vector for a in arrays]),
        np.stack([a.cost for a in arrays]), np.stack([a.capacity for a in arrays]), levels,
        np.stack([np.asarray(v.profiles["deviation"], dtype=float) for v in lev]), coll, nash,
        np.array([evaluate_py(a, coll[d], want_cs=False)[3] for d, a in enumerate(arrays)]),
        np.array([evaluate_py(a, nash[d], want_cs=False)[3] for d, a in enumerate(arrays)]), np.array(full), full_delta,
        source)


@njit(cache=True)
def _draw_paths(rng, n_periods, initial_cum, rows_cum, out):  # pragma: no cover - compiled; twin draw_state_path
    last = rows_cum.shape[0] - 1
    for r in range(rng.shape[0]):
        s = rng[r].copy()
        u = next_double(s)
        k = 0
        while k < last and u >= initial_cum[k]:
            k += 1
        out[r, 0] = k
        for t in range(1, n_periods):
            u = next_double(s)
            j = 0
            while j < last and u >= rows_cum[k, j]:
                j += 1
            k = j
            out[r, t] = k


def draw_state_paths(states: DemandStates, n_periods: int, replications: int, seed: int, key=(0,)) -> np.ndarray:
    """Every replication's path of demand states, compiled, draw for draw as
    :func:`sim.theory.draws.draw_state_path` on the stream family ``(key..., 1)``.

    Parameters
    ----------
    states : DemandStates
    n_periods : int
    replications : int
    seed : int
    key : tuple of int
        The cell's stream key.

    Returns
    -------
    int64 ndarray of shape (replications, n_periods)
    """
    out = np.empty((replications, n_periods), dtype=np.int64)
    if states.kind == "cycle":
        out[:] = (int(np.argmax(states.initial)) + np.arange(n_periods)) % states.n_states
        return out
    rng = stream_states(seed, (*key, 1), 0, replications)
    _draw_paths(rng, n_periods, np.cumsum(states.initial), np.cumsum(states.transition, axis=1), out)
    return out
