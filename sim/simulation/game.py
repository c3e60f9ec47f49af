"""A market and a line-up ready for the simulation kernel: the stage game solved once, line-ups compiled.

Callers that play many small matches in one market (tournaments, sweeps) solve the stage game once
(:func:`stage_levels`) and compile each line-up in microseconds (:func:`compile_game`);
:func:`prepare_game` does both.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.models.market import MarketSpec
from sim.models.monitoring import Monitoring, monitoring_from_dict
from sim.models.stagecore import MarketArrays, market_arrays, market_owner
from sim.theory.equilibrium import stage_game
from sim.theory.thresholds import stick_and_carrot
from strategies.base import Automaton, CompiledLineup, StageLevels, compile_lineup
from strategies.registry import lineup_from_tables

__all__ = ["Game", "as_monitoring", "compile_game", "prepare_game", "stage_levels"]


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

    ``levels`` holds the collusive, Nash and deviation profiles of the stage game and computes the
    stick-and-carrot punishment profile on first use. Every profile the stage game reports is attainable
    and evaluates to the profits reported with it (homogeneous Bertrand with continuous prices undercuts
    by the market's price step, see :mod:`sim.models.market`), so the line-up plays them as they are and
    its payoffs match the analytic ones.

    Parameters
    ----------
    market : Market or MarketSpec
        The market.
    agreement : str
        The collusive outcome the level ``"collusive"`` stands for (see
        :func:`sim.theory.equilibrium.collusive_outcome`).
    actions : array_like of shape (n_products,), optional
        The collusive actions with ``agreement = "given"``.

    Returns
    -------
    stage : StageGame
        The solved stage game.
    levels : StageLevels
        Its named profiles, for :func:`strategies.base.compile_lineup`.
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

    Parameters
    ----------
    market : MarketSpec
        The market.
    arrays : MarketArrays
        The market in the numba stage core's layout.
    lineup : CompiledLineup
        The compiled line-up.
    monitoring : dict
        Validated monitoring parameters (``signal``, ``noise``, ``sigma``, ``perception_error``,
        ``implementation_error``, ``noise_code``).
    stage : StageGame
        The solved stage game.
    levels : StageLevels
        Its named profiles.
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
        """Number of firms."""
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
    """A :class:`Monitoring` from None (perfect monitoring), a table or a Monitoring.

    Parameters
    ----------
    monitoring : Monitoring, dict or None
        The monitoring as given.

    Returns
    -------
    Monitoring
    """
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

    Parameters
    ----------
    stage : StageGame
        The solved stage game (:func:`stage_levels`).
    levels : StageLevels
        Its named profiles (:func:`stage_levels`).
    lineup : Automaton, list of Automaton or list of dict
        One strategy per firm (seat order), experiment-file entries, or one strategy for every firm.
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    prefix : str
        Key path of the line-up, for error messages.
    strict : bool
        Whether to refuse a perception error that no strategy could feel.

    Returns
    -------
    Game
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
    """Solve the stage game and compile the line-up (validated; raises InputError).

    Parameters
    ----------
    market : Market or MarketSpec
        The market.
    lineup : Automaton, list of Automaton or list of dict
        One strategy per firm (seat order), experiment-file entries, or one strategy for every firm.
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    agreement : str
        The collusive outcome the level ``"collusive"`` stands for.
    actions : array_like of shape (n_products,), optional
        The collusive actions with ``agreement = "given"``.
    strict : bool
        Whether to refuse a perception error that no strategy could feel (see :func:`compile_game`).

    Returns
    -------
    Game
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    st, levels = stage_levels(ms, agreement, actions)
    return compile_game(st, levels, lineup, monitoring, strict=strict)
