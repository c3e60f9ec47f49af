"""Automaton strategies: states, an action per state, a next state per signal; compiled to arrays.

A strategy is a :class:`~sim.core.params.Parametrized` object whose :meth:`Automaton.states` returns its
state table as plain data (the same structure an experiment file gives for ``strategy = "automaton"``):

.. code-block:: python

    {
        "collude": {"action": "collusive", "watch": "all", "good": "collude", "bad": "punish"},
        "punish": {"action": "nash"},                 # no watch: stays here (absorbing)
    }

State keys
----------
action : level
    What the firm plays: a named level (``"collusive"``, ``"nash"``, ``"deviation"``, ``"punishment"``),
    a number (the same quantity or price for every product), or a list of one number per product.
watch : {"nothing", "all", "rivals", "price", "profit"}
    The signal that drives the transition (see :mod:`strategies.step`); default ``"nothing"``.
expect : level
    The profile the firm expects when it watches conduct (default: the state's action).
judge : {"restraint", "punishment"}
    ``restraint``: others comply when no more aggressive than expected (default). ``punishment``: they
    comply when at least as aggressive (the punishment was carried out).
threshold : float
    Trigger price (``watch = "price"``) or aspiration profit (``watch = "profit"``).
good, bad, next : state name
    Next state after a good or a bad signal (``next`` sets both; default: stay).
forgive, forgive_to : float in [0, 1], state name
    After a bad signal go to ``forgive_to`` (default: ``good``) instead, with probability ``forgive``.
lapse, lapse_to : float in [0, 1], state name
    After a good signal go to ``lapse_to`` (default: ``bad``) instead, with probability ``lapse``.
cheat : float in [0, 1]
    Probability per period of playing the strategy's cheating level instead of ``action``.
collusive : bool
    Whether the state counts as colluding in the persistence metrics (default: ``action`` is the
    strategy's collusive level).

Levels are resolved against the market's stage game when the line-up is compiled
(:func:`compile_lineup`); see :class:`StageLevels`.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

import strategies.step as S
from sim.core.errors import InputError
from sim.core.params import Constraint, Parametrized

__all__ = [
    "LEVEL_NAMES",
    "Automaton",
    "CompiledLineup",
    "FirmContext",
    "Level",
    "StageLevels",
    "compile_lineup",
    "validate_table",
]

LEVEL_NAMES = ("collusive", "nash", "deviation", "punishment")
WATCHES = {
    "nothing": S.WATCH_NOTHING,
    "all": S.WATCH_ALL,
    "rivals": S.WATCH_RIVALS,
    "price": S.WATCH_PRICE,
    "profit": S.WATCH_PROFIT,
}
JUDGES = {"restraint": S.JUDGE_RESTRAINT, "punishment": S.JUDGE_PUNISHMENT}
STATE_KEYS = ("action", "watch", "expect", "judge", "threshold", "good", "bad", "next", "forgive",
              "forgive_to", "lapse", "lapse_to", "cheat", "collusive")
MAX_STATES = 10_000


def _fmt(v: Any) -> str:
    return repr(v.tolist() if isinstance(v, np.ndarray) else v)


# --------------------------------------------------------------------------------------------------
# Constraints used by strategies
# --------------------------------------------------------------------------------------------------


def check_level(key: str, value: Any):
    """Normalise a level: a name from :data:`LEVEL_NAMES`, a float >= 0, or a tuple of floats >= 0."""
    if isinstance(value, str):
        if value not in LEVEL_NAMES:
            raise InputError(key, f"must be one of {', '.join(map(repr, LEVEL_NAMES))}, a number or a list of "
                                  f"numbers, got {value!r}")
        return value
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        x = float(value)
        if not math.isfinite(x) or x < 0:
            raise InputError(key, f"must be a finite number >= 0, got {_fmt(value)}")
        return x
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if isinstance(value, Sequence) and not isinstance(value, str) and len(value) > 0:
        out = []
        for k, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)) or v < 0:
                raise InputError(key, f"value {k + 1} must be a finite number >= 0, got {_fmt(v)}")
            out.append(float(v))
        return tuple(out)
    raise InputError(key, f"must be one of {', '.join(map(repr, LEVEL_NAMES))}, a number or a list of numbers, "
                          f"got {_fmt(value)}")


class Level(Constraint):
    """An action level: a named level of the stage game, a number, or one number per product."""

    def describe(self) -> str:
        return f"one of {', '.join(map(repr, LEVEL_NAMES))}, a number or a list of numbers"

    def check(self, key: str, value: Any):
        return check_level(key, value)

    def example_bad(self) -> Any:
        return "cheapest"


class Either(Constraint):
    """The first of several constraints that accepts the value."""

    def __init__(self, *options: Constraint):
        self.options = options

    def describe(self) -> str:
        return " or ".join(o.describe() for o in self.options)

    def check(self, key: str, value: Any):
        for o in self.options:
            try:
                return o.check(key, value)
            except InputError:
                continue
        raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")

    def example_bad(self) -> Any:
        return [object()]


class StateTableConstraint(Constraint):
    """A state table: a non-empty dict from state names to dicts of state keys."""

    def describe(self) -> str:
        return "a table of states (state name -> action, watch, good, bad, ...)"

    def check(self, key: str, value: Any):
        if not isinstance(value, dict) or not value:
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        return value

    def example_bad(self) -> Any:
        return {}


# --------------------------------------------------------------------------------------------------
# The validated table
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StateRow:
    """One validated state (levels still unresolved)."""

    name: str
    action: Any
    watch: str
    expect: Any
    judge: str
    threshold: float
    good: int
    bad: int
    forgive: float
    forgive_to: int
    lapse: float
    lapse_to: int
    cheat: float
    collusive: bool


@dataclass(frozen=True)
class AutomatonTable:
    """A validated automaton: the state rows, the initial state and the cheating settings."""

    rows: tuple
    initial: int
    cheat_level: Any
    cheat_from: int
    cheat_until: int | None

    @property
    def names(self) -> list[str]:
        return [r.name for r in self.rows]

    @property
    def watches_conduct(self) -> bool:
        return any(r.watch in ("all", "rivals") for r in self.rows)


def _prob(key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (0.0 <= float(value) <= 1.0):
        raise InputError(key, f"must be a probability in [0, 1], got {_fmt(value)}")
    return float(value)


def validate_table(states: Any, initial: Any = None, cheat_level: Any = "deviation", cheat_from: Any = 0,
                   cheat_until: Any = None, collusive_level: Any = "collusive",
                   prefix: str = "strategy") -> AutomatonTable:
    """Check a state table and return its validated form.

    Errors name the key path, e.g. ``strategies[2].states.punish.good``. A transition to a state that
    does not exist, a probability outside [0, 1], a missing threshold or an unknown key are refused.
    """
    key = f"{prefix}.states"
    StateTableConstraint().check(key, states)
    if len(states) > MAX_STATES:
        raise InputError(key, f"at most {MAX_STATES} states, got {len(states)}")
    names = list(states)
    index = {}
    for n in names:
        if not isinstance(n, str) or not n:
            raise InputError(key, f"state names must be non-empty strings, got {n!r}")
        index[n] = len(index)

    def target(k: str, v: Any) -> int:
        if not isinstance(v, str) or v not in index:
            raise InputError(k, f"names a state that does not exist: {v!r}; states: {', '.join(names)}")
        return index[v]

    coll_level = check_level(f"{prefix}.collude", collusive_level)
    rows = []
    for n in names:
        st = states[n]
        sk = f"{key}.{n}"
        if not isinstance(st, dict):
            raise InputError(sk, f"must be a table of state keys ({', '.join(STATE_KEYS)}), got {_fmt(st)}")
        for k in st:
            if k not in STATE_KEYS:
                raise InputError(f"{sk}.{k}", f"unknown state key; allowed: {', '.join(STATE_KEYS)}")
        if "action" not in st:
            raise InputError(f"{sk}.action", "missing (the level this state plays)")
        action = check_level(f"{sk}.action", st["action"])
        watch = st.get("watch", "nothing")
        if watch not in WATCHES:
            raise InputError(f"{sk}.watch", f"must be one of {', '.join(map(repr, WATCHES))}, got {_fmt(watch)}")
        expect = check_level(f"{sk}.expect", st["expect"]) if "expect" in st else action
        if "expect" in st and watch not in ("all", "rivals"):
            raise InputError(f"{sk}.expect", f"only used when the state watches conduct ('all' or 'rivals'), "
                                             f"not {watch!r}")
        judge = st.get("judge", "restraint")
        if judge not in JUDGES:
            raise InputError(f"{sk}.judge", f"must be one of {', '.join(map(repr, JUDGES))}, got {_fmt(judge)}")
        threshold = math.nan
        if watch in ("price", "profit"):
            if "threshold" not in st:
                what = "trigger price" if watch == "price" else "aspiration profit"
                raise InputError(f"{sk}.threshold", f"missing (the {what} of watch = {watch!r})")
            t = st["threshold"]
            if isinstance(t, bool) or not isinstance(t, numbers.Real) or not math.isfinite(float(t)):
                raise InputError(f"{sk}.threshold", f"must be a finite number, got {_fmt(t)}")
            threshold = float(t)
        elif "threshold" in st:
            raise InputError(f"{sk}.threshold", f"only used with watch = 'price' or 'profit', not {watch!r}")
        if "next" in st and ("good" in st or "bad" in st):
            raise InputError(f"{sk}.next", "give either next or good/bad, not both")
        self_i = index[n]
        if "next" in st:
            good = bad = target(f"{sk}.next", st["next"])
        else:
            good = target(f"{sk}.good", st["good"]) if "good" in st else self_i
            bad = target(f"{sk}.bad", st["bad"]) if "bad" in st else good
        forgive = _prob(f"{sk}.forgive", st.get("forgive", 0.0))
        forgive_to = target(f"{sk}.forgive_to", st["forgive_to"]) if "forgive_to" in st else good
        lapse = _prob(f"{sk}.lapse", st.get("lapse", 0.0))
        lapse_to = target(f"{sk}.lapse_to", st["lapse_to"]) if "lapse_to" in st else bad
        cheat = _prob(f"{sk}.cheat", st.get("cheat", 0.0))
        if "collusive" in st:
            c = st["collusive"]
            if not isinstance(c, bool | np.bool_):
                raise InputError(f"{sk}.collusive", f"must be true or false, got {_fmt(c)}")
            collusive = bool(c)
        else:
            collusive = action == coll_level
        rows.append(StateRow(n, action, watch, expect, judge, threshold, good, bad, forgive, forgive_to, lapse,
                             lapse_to, cheat, collusive))
    if initial is None:
        init = 0
    else:
        init = target(f"{prefix}.initial", initial)
    cl = check_level(f"{prefix}.cheat_action", cheat_level)
    cf = _int(f"{prefix}.start", cheat_from, 0)
    cu = None if cheat_until is None else _int(f"{prefix}.stop", cheat_until, cf + 1)
    return AutomatonTable(tuple(rows), init, cl, cf, cu)


def _int(key: str, v: Any, low: int) -> int:
    if isinstance(v, bool) or not isinstance(v, numbers.Real) or not float(v).is_integer() or v < low:
        raise InputError(key, f"must be an integer >= {low}, got {_fmt(v)}")
    return int(v)


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
        """The state table, built from the validated parameters ``p`` (``ctx``: the market and seat,
        when compiling; strategies whose table does not depend on the market ignore it)."""
        raise NotImplementedError

    def initial(self, p: dict) -> str | None:
        """Name of the initial state (default: the first)."""
        return None

    def cheat(self, p: dict) -> tuple[Any, int, int | None]:
        """Cheating level and the window ``[start, stop)`` of periods in which state ``cheat``
        probabilities apply (default: the best deviation, from period 0 on)."""
        return "deviation", 0, None

    def table(self, prefix: str = "strategy", ctx: FirmContext | None = None) -> AutomatonTable:
        """Validate the parameters and return the automaton as a validated table."""
        p = self._check_params(prefix)
        lvl, start, stop = self.cheat(p)
        coll = p.get(self._collude_param, "collusive") if self._collude_param else "collusive"
        try:
            states = self.states(p, ctx)
        except InputError as exc:
            raise exc.with_prefix(prefix) if not exc.key.startswith(prefix) else exc from None
        return validate_table(states, self.initial(p), lvl, start, stop, coll, prefix)

    def to_dict(self) -> dict:
        """The strategy as an experiment-file entry (``strategy = name`` plus parameters)."""
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

    Attributes
    ----------
    profiles : dict of str to ndarray of shape (n_products,)
        ``collusive``, ``nash``, ``deviation`` (each product's best one-shot deviation against the
        agreement) and, when it can be computed, ``punishment`` (the stick-and-carrot punishment
        profile). A missing entry is computed on first use by ``lazy``.
    owner : int64 ndarray of shape (n_products,)
    n_firms : int
    quantity_setting : bool
    capacity : ndarray of shape (n_products,)
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
        return int(self.owner.shape[0])

    def profile(self, name: str, key: str) -> np.ndarray:
        if name not in self.profiles:
            if name not in self.lazy:  # pragma: no cover - every name has a source
                raise InputError(key, f"level {name!r} is not available for this market")
            self.profiles[name] = self.lazy[name](key)
        return self.profiles[name]

    def resolve(self, key: str, level: Any) -> np.ndarray:
        """The action profile of a (validated) level."""
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
    """What a strategy may look at when it builds its table: the market's levels and its seat."""

    levels: StageLevels
    firm: int


@dataclass(frozen=True)
class CompiledLineup:
    """A line-up compiled to the arrays the kernels play (layout in :mod:`strategies.step`).

    Attributes
    ----------
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
    firms : int64 ndarray of shape (n_firms, N_FIRM_INT)
    levels : float64 ndarray of shape (n_firms, L, n_products)
    names : tuple of str
        Registry name of each firm's strategy.
    state_names : tuple of tuple of str
    tables : tuple of AutomatonTable
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
        return int(self.firms.shape[0])


def compile_lineup(lineup: Sequence, levels: StageLevels, prefix: str = "strategies") -> CompiledLineup:
    """Compile one strategy per firm (seat order) against the stage game's levels.

    Parameters
    ----------
    lineup : sequence of Automaton, length n_firms
    levels : StageLevels
    prefix : str
        Key prefix of error messages; entry ``i`` is named ``prefix[i+1]``.
    """
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
    S_max = max(len(t.rows) for t in tables)
    per_firm_levels = []
    for i in range(len(tables)):
        pk = f"{prefix}[{i + 1}]"
        table_levels: list = []
        profs: list = []

        def idx(level, key, table_levels=table_levels, profs=profs):
            for k, lv in enumerate(table_levels):
                if lv == level:
                    return k
            prof = levels.resolve(key, level)
            if not np.all(np.isfinite(prof)):
                raise InputError(key, f"level {level!r} is not defined for this market")
            table_levels.append(level)
            profs.append(prof)
            return len(table_levels) - 1

        # named levels first so that their indices are the same for every firm
        for name in ("collusive", "nash", "deviation"):
            idx(name, pk)
        per_firm_levels.append((table_levels, profs, idx))
    L_max = 0
    st = np.zeros((n, S_max, S.N_STATE_INT), dtype=np.int64)
    pr = np.zeros((n, S_max, S.N_STATE_FLT), dtype=np.float64)
    fi = np.zeros((n, S.N_FIRM_INT), dtype=np.int64)
    rows_idx = []
    for i, t in enumerate(tables):
        pk = f"{prefix}[{i + 1}]"
        _, profs, idx = per_firm_levels[i]
        r_i = []
        for row in t.rows:
            sk = f"{pk}.states.{row.name}"
            a = idx(row.action, f"{sk}.action")
            watching = row.watch in ("all", "rivals")
            e = idx(row.expect, f"{sk}.expect") if watching else -1
            r_i.append((a, e))
        cl = idx(t.cheat_level, f"{pk}.cheat_action")
        rows_idx.append((r_i, cl))
        L_max = max(L_max, len(profs))
    lv = np.full((n, L_max, levels.n_products), np.nan)
    for i, t in enumerate(tables):
        _, profs, _ = per_firm_levels[i]
        for k, prof in enumerate(profs):
            lv[i, k] = prof
        r_i, cl = rows_idx[i]
        for s, row in enumerate(t.rows):
            a, e = r_i[s]
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
    """Structural checks of compiled arrays (raises ValueError): dtypes, shapes, state and level
    indices in range, probabilities in [0, 1]. Run once per compile, never inside the kernel."""
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
