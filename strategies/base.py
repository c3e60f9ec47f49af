"""Automaton strategies: the base class, the market's levels they resolve against, and their compilation.

A strategy is a :class:`~sim.core.params.Parametrized` object whose :meth:`Automaton.states` returns its
state table as plain data (format and validation in :mod:`strategies.table`). Levels (``"collusive"``,
``"nash"``, numbers) are resolved against the market's stage game (:class:`StageLevels`) when a line-up
is compiled (:func:`compile_lineup`) to the arrays the kernels play (layout in :mod:`strategies.step`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

import strategies.step as S
from sim.core.errors import InputError
from sim.core.params import Parametrized
from strategies.table import JUDGES, LEVEL_NAMES, WATCHES, AutomatonTable, Level, validate_table

__all__ = [
    "LEVEL_NAMES",
    "Automaton",
    "CompiledLineup",
    "FirmContext",
    "Level",
    "StageLevels",
    "check_compiled",
    "compile_lineup",
    "validate_table",
]


# --------------------------------------------------------------------------------------------------
# Strategy base class
# --------------------------------------------------------------------------------------------------


class Automaton(Parametrized):
    """Base class of automaton strategies.

    Subclasses declare ``name`` (the registry key used in experiment files), ``summary`` (one line),
    ``_constraints`` for their parameters, and implement :meth:`states` (and, if needed,
    :meth:`initial`, :meth:`cheat`). ``__init__`` only stores its arguments.
    """

    name: str = ""
    summary: str = ""
    #: the parameter holding the collusive level (used to mark collusive states)
    _collude_param: str | None = "collude"

    def states(self, p: dict, ctx: FirmContext | None = None) -> dict:  # pragma: no cover - interface
        """The state table (format in :mod:`strategies.table`), built from the validated parameters.

        Parameters
        ----------
        p : dict
            The validated parameters (``self._check_params()``).
        ctx : FirmContext, optional
            The market's levels and the firm's seat, when compiling against a market; strategies whose
            table does not depend on the market ignore it.

        Returns
        -------
        dict
            State name -> state keys.
        """
        raise NotImplementedError

    def initial(self, p: dict) -> str | None:
        """Name of the initial state.

        Parameters
        ----------
        p : dict
            The validated parameters.

        Returns
        -------
        str or None
            None for the table's first state (the default).
        """
        return None

    def cheat(self, p: dict) -> tuple[Any, int, int | None]:
        """The cheating level and the periods in which the states' ``cheat`` probabilities apply.

        Parameters
        ----------
        p : dict
            The validated parameters.

        Returns
        -------
        level : level
            Played when cheating (default ``"deviation"``, the best one-shot deviation).
        start : int
            First period (0-based) of the window (default 0).
        stop : int or None
            Period from which the window is closed (default None: never).
        """
        return "deviation", 0, None

    def table(self, prefix: str = "strategy", ctx: FirmContext | None = None) -> AutomatonTable:
        """Validate the parameters and return the automaton as a validated table.

        Parameters
        ----------
        prefix : str
            Key path of the strategy, for error messages (e.g. ``strategies[2]``).
        ctx : FirmContext, optional
            The market's levels and the firm's seat (see :meth:`states`).

        Returns
        -------
        AutomatonTable
        """
        p = self._check_params(prefix)
        lvl, start, stop = self.cheat(p)
        coll = p.get(self._collude_param, "collusive") if self._collude_param else "collusive"
        try:
            states = self.states(p, ctx)
        except InputError as exc:
            raise exc.with_prefix(prefix) if not exc.key.startswith(prefix) else exc from None
        return validate_table(states, self.initial(p), lvl, start, stop, coll, prefix)

    def to_dict(self) -> dict:
        """The strategy as an experiment-file entry.

        Returns
        -------
        dict
            ``strategy`` (the registry name) and the parameters that are set, as plain data.
        """
        out = {"strategy": self.name}
        for k, v in self.get_params().items():
            if v is not None:
                out[k] = v.tolist() if isinstance(v, np.ndarray) else (list(v) if isinstance(v, tuple) else v)
        return out


# --------------------------------------------------------------------------------------------------
# Level resolution and compilation
# --------------------------------------------------------------------------------------------------


@dataclass
class StageLevels:
    """Named action profiles of a market's stage game, for resolving strategy levels.

    Parameters
    ----------
    profiles : dict of str to ndarray of shape (n_products,)
        ``collusive``, ``nash``, ``deviation`` (each product's best one-shot deviation against the
        agreement) and, when it can be computed, ``punishment`` (the stick-and-carrot punishment
        profile). A missing entry is computed on first use by ``lazy``.
    owner : int64 ndarray of shape (n_products,)
        Firm owning each product.
    n_firms : int
        Number of firms.
    quantity_setting : bool
        True when actions are quantities (Cournot), False for prices.
    capacity : ndarray of shape (n_products,)
        Capacity of each product (``inf``: none).
    firm_profits : dict of str to ndarray of shape (n_firms,)
        ``collusive``, ``nash`` and ``deviation`` per-period profits per firm.
    lazy : dict of str to callable
        Computes a missing profile (or raises InputError when it does not exist).
    cache : dict
        Side results of the lazy computations (e.g. the stick-and-carrot solution), for reuse.
    """

    profiles: dict
    owner: np.ndarray
    n_firms: int
    quantity_setting: bool
    capacity: np.ndarray
    firm_profits: dict
    lazy: dict = field(default_factory=dict)
    cache: dict = field(default_factory=dict)

    @property
    def n_products(self) -> int:
        """Number of products."""
        return int(self.owner.shape[0])

    def profile(self, name: str, key: str) -> np.ndarray:
        """The action profile of a named level, computed on first use when it is lazy.

        Parameters
        ----------
        name : str
            One of :data:`~strategies.table.LEVEL_NAMES`.
        key : str
            Key path naming where the level was asked for, for error messages.

        Returns
        -------
        ndarray of shape (n_products,)
        """
        if name not in self.profiles:
            if name not in self.lazy:  # pragma: no cover - every name has a source
                raise InputError(key, f"level {name!r} is not available for this market")
            self.profiles[name] = self.lazy[name](key)
        return self.profiles[name]

    def resolve(self, key: str, level: Any) -> np.ndarray:
        """The action profile of a (validated) level.

        Parameters
        ----------
        key : str
            Key path of the level, for error messages.
        level : str, float or tuple of float
            A named level, one number for every product, or one number per product.

        Returns
        -------
        ndarray of shape (n_products,)
        """
        if isinstance(level, str):
            return self.profile(level, key)
        if isinstance(level, float):
            prof = np.full(self.n_products, level)
        else:
            if len(level) != self.n_products:
                raise InputError(key, f"must have one value per product ({self.n_products}), got {len(level)}")
            prof = np.array(level, dtype=float)
        if self.quantity_setting:
            over = np.flatnonzero(prof > self.capacity)
            if over.size:
                k = int(over[0])
                raise InputError(key, f"quantity {prof[k]:g} exceeds the capacity {self.capacity[k]:g} of product "
                                      f"{k + 1}")
        return prof


@dataclass(frozen=True)
class FirmContext:
    """What a strategy may look at when it builds its table: the market's levels and its seat.

    Parameters
    ----------
    levels : StageLevels
        The market's named profiles and per-firm profits.
    firm : int
        The seat (0-based) the strategy plays.
    """

    levels: StageLevels
    firm: int


@dataclass(frozen=True)
class CompiledLineup:
    """A line-up compiled to the arrays the kernels play (layout in :mod:`strategies.step`).

    Parameters
    ----------
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of each firm's states.
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of each firm's states.
    firms : int64 ndarray of shape (n_firms, N_FIRM_INT)
        Per-firm fields.
    levels : float64 ndarray of shape (n_firms, L, n_products)
        Action profile of each firm's levels (nan beyond the firm's own levels).
    names : tuple of str
        Registry name of each firm's strategy.
    state_names : tuple of tuple of str
        Each firm's state names.
    tables : tuple of AutomatonTable
        Each firm's validated table.
    strategies : tuple of Automaton
        The strategies, in seat order.
    watches_conduct : bool
        Whether any firm watches conduct (perception errors only act on those).
    """

    states: np.ndarray
    probs: np.ndarray
    firms: np.ndarray
    levels: np.ndarray
    names: tuple
    state_names: tuple
    tables: tuple
    strategies: tuple
    watches_conduct: bool

    @property
    def n_firms(self) -> int:
        """Number of firms."""
        return int(self.firms.shape[0])


class _FirmLevels:
    """The levels one firm's table uses, in order of first use; the named levels come first, so that
    their indices are the same for every firm."""

    def __init__(self, levels: StageLevels, prefix: str):
        self.stage = levels
        self.used: list = []
        self.profiles: list = []
        for name in ("collusive", "nash", "deviation"):
            self.index(name, prefix)

    def index(self, level, key: str) -> int:
        for k, lv in enumerate(self.used):
            if lv == level:
                return k
        prof = self.stage.resolve(key, level)
        if not np.all(np.isfinite(prof)):
            raise InputError(key, f"level {level!r} is not defined for this market")
        self.used.append(level)
        self.profiles.append(prof)
        return len(self.used) - 1


def _tables(lineup: Sequence, levels: StageLevels, prefix: str) -> list:
    if not isinstance(lineup, Sequence) or isinstance(lineup, str):
        raise InputError(prefix, f"must be a list of strategies, got {lineup!r}")
    n = levels.n_firms
    if len(lineup) != n:
        raise InputError(prefix, f"the line-up has {len(lineup)} seat{'s' if len(lineup) != 1 else ''} but the "
                                 f"market has {n} firms; give one strategy per firm")
    tables = []
    for i, strat in enumerate(lineup):
        if not isinstance(strat, Automaton):
            raise InputError(f"{prefix}[{i + 1}]", f"must be an automaton strategy, got {strat!r}")
        tables.append(strat.table(f"{prefix}[{i + 1}]", FirmContext(levels, i)))
    return tables


def _level_indices(tables: list, firm_levels: list, prefix: str) -> list:
    """Per firm: the (action, expected) level index of each state, and the cheating level's index."""
    out = []
    for i, t in enumerate(tables):
        pk = f"{prefix}[{i + 1}]"
        fl = firm_levels[i]
        rows = []
        for row in t.rows:
            sk = f"{pk}.states.{row.name}"
            a = fl.index(row.action, f"{sk}.action")
            e = fl.index(row.expect, f"{sk}.expect") if row.watch in ("all", "rivals") else -1
            rows.append((a, e))
        out.append((rows, fl.index(t.cheat_level, f"{pk}.cheat_action")))
    return out


def compile_lineup(lineup: Sequence, levels: StageLevels, prefix: str = "strategies") -> CompiledLineup:
    """Compile one strategy per firm (seat order) against the stage game's levels.

    Parameters
    ----------
    lineup : sequence of Automaton, length n_firms
        The strategies, in seat order.
    levels : StageLevels
        The market's named profiles.
    prefix : str
        Key prefix of error messages; entry ``i`` is named ``prefix[i+1]``.

    Returns
    -------
    CompiledLineup
    """
    tables = _tables(lineup, levels, prefix)
    n = len(tables)
    firm_levels = [_FirmLevels(levels, f"{prefix}[{i + 1}]") for i in range(n)]
    indices = _level_indices(tables, firm_levels, prefix)
    S_max = max(len(t.rows) for t in tables)
    st = np.zeros((n, S_max, S.N_STATE_INT), dtype=np.int64)
    pr = np.zeros((n, S_max, S.N_STATE_FLT), dtype=np.float64)
    fi = np.zeros((n, S.N_FIRM_INT), dtype=np.int64)
    lv = np.full((n, max(len(fl.profiles) for fl in firm_levels), levels.n_products), np.nan)
    for i, t in enumerate(tables):
        for k, prof in enumerate(firm_levels[i].profiles):
            lv[i, k] = prof
        rows, cl = indices[i]
        for s, row in enumerate(t.rows):
            a, e = rows[s]
            st[i, s] = (a, e, JUDGES[row.judge], WATCHES[row.watch], row.good, row.bad, row.forgive_to,
                        row.lapse_to, int(row.collusive))
            # the array slots are ordered (ALT_GOOD, ALT_BAD): forgiveness acts on bad signals
            st[i, s, S.ALT_GOOD] = row.lapse_to
            st[i, s, S.ALT_BAD] = row.forgive_to
            pr[i, s, S.THRESHOLD] = row.threshold if math.isfinite(row.threshold) else 0.0
            pr[i, s, S.P_ALT_GOOD] = row.lapse
            pr[i, s, S.P_ALT_BAD] = row.forgive
            pr[i, s, S.P_CHEAT] = row.cheat
        fi[i] = (len(t.rows), t.initial, cl, t.cheat_from, S.FOREVER if t.cheat_until is None else t.cheat_until)
    check_compiled(st, pr, fi, lv)
    return CompiledLineup(st, pr, fi, lv, tuple(s.name for s in lineup), tuple(tuple(t.names) for t in tables),
                          tuple(tables), tuple(lineup), any(t.watches_conduct for t in tables))


def check_compiled(states: np.ndarray, probs: np.ndarray, firms: np.ndarray, levels: np.ndarray) -> None:
    """Structural checks of compiled arrays: dtypes, shapes, state and level indices in range, probabilities
    in [0, 1]. Run once per compile, never inside the kernel; a failure raises ValueError.

    Parameters
    ----------
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of each firm's states.
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of each firm's states.
    firms : int64 ndarray of shape (n_firms, N_FIRM_INT)
        Per-firm fields.
    levels : float64 ndarray of shape (n_firms, L, n_products)
        Action profile of each firm's levels.
    """
    if states.dtype != np.int64 or firms.dtype != np.int64 or probs.dtype != np.float64 or levels.dtype != np.float64:
        raise ValueError("compiled line-up arrays have the wrong dtypes")
    n, s_max, _ = states.shape
    if probs.shape[:2] != (n, s_max) or firms.shape[0] != n or levels.shape[0] != n:
        raise ValueError("compiled line-up arrays disagree on the number of firms or states")
    for i in range(n):
        ns = int(firms[i, S.N_STATES])
        if not 1 <= ns <= s_max or not 0 <= firms[i, S.INITIAL] < ns:
            raise ValueError(f"firm {i + 1}: bad state count or initial state")
        sub = states[i, :ns]
        for f in (S.GOOD, S.BAD, S.ALT_GOOD, S.ALT_BAD):
            if sub[:, f].min() < 0 or sub[:, f].max() >= ns:
                raise ValueError(f"firm {i + 1}: a transition points to a state that does not exist")
        n_lv = int(np.sum(np.isfinite(levels[i, :, 0])))
        if sub[:, S.ACTION].min() < 0 or sub[:, S.ACTION].max() >= n_lv or sub[:, S.EXPECT].max() >= n_lv:
            raise ValueError(f"firm {i + 1}: an action level does not exist")
        if not 0 <= firms[i, S.CHEAT_LEVEL] < n_lv:
            raise ValueError(f"firm {i + 1}: the cheating level does not exist")
        p = probs[i, :ns, 1:]
        if np.any(~(p >= 0)) or np.any(p > 1):
            raise ValueError(f"firm {i + 1}: a probability is outside [0, 1]")
