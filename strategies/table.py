"""The state table of an automaton strategy and its validation.

A strategy's :meth:`~strategies.base.Automaton.states` returns its state table as plain data (the same
structure an experiment file gives for ``strategy = "automaton"``):

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

:func:`validate_table` checks a table and returns an :class:`AutomatonTable` whose levels are still
names or numbers; :func:`strategies.base.compile_lineup` resolves them against a market.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

import strategies.step as S
from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Constraint

__all__ = ["JUDGES", "LEVEL_NAMES", "MAX_STATES", "STATE_KEYS", "WATCHES", "AutomatonTable", "Either", "Level",
           "StateRow", "StateTableConstraint", "check_level", "validate_table"]

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
    """Normalise a level: a name from :data:`LEVEL_NAMES`, a float >= 0, or a tuple of floats >= 0.

    Parameters
    ----------
    key : str
        Key path of the value, for the error message.
    value : str, float or sequence of float
        The level as given.

    Returns
    -------
    str, float or tuple of float
        The name, the number as a float, or one float per product.
    """
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

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return f"one of {', '.join(map(repr, LEVEL_NAMES))}, a number or a list of numbers"

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any):
        """The level (a name, a float or a tuple of floats), normalised by :func:`check_level`."""
        return check_level(key, value)

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """A name that is no level."""
        return "cheapest"


class Either(Constraint):
    """The first of several constraints that accepts the value.

    Parameters
    ----------
    *options : Constraint
        The constraints, tried in order.
    """

    def __init__(self, *options: Constraint):
        self.options = options

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return " or ".join(o.describe() for o in self.options)

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any):
        """The value as normalised by the first option that accepts it."""
        for o in self.options:
            try:
                return o.check(key, value)
            except InputError:
                continue
        raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """A value no option accepts."""
        return [object()]


class StateTableConstraint(Constraint):
    """A state table: a non-empty dict from state names to dicts of state keys."""

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "a table of states (state name -> action, watch, good, bad, ...)"

    @doc_sections(Constraint.check)
    def check(self, key: str, value: Any):
        """The table itself, when it is a non-empty dict (its states are checked by :func:`validate_table`)."""
        if not isinstance(value, dict) or not value:
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        return value

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        """An empty table."""
        return {}


# --------------------------------------------------------------------------------------------------
# The validated table
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StateRow:
    """One validated state (levels still unresolved; state references as indices into the table).

    Parameters
    ----------
    name : str
        The state's name.
    action : str, float or tuple of float
        The level played.
    watch : str
        The signal (a key of :data:`WATCHES`).
    expect : str, float or tuple of float
        The level expected from everyone (conduct signals).
    judge : str
        ``"restraint"`` or ``"punishment"``.
    threshold : float
        Trigger price or aspiration profit (nan when the state watches neither).
    good : int
        Next state after a good signal.
    bad : int
        Next state after a bad signal.
    forgive : float
        Probability of going to ``forgive_to`` instead of ``bad``.
    forgive_to : int
        The state forgiveness leads to.
    lapse : float
        Probability of going to ``lapse_to`` instead of ``good``.
    lapse_to : int
        The state a lapse leads to.
    cheat : float
        Probability per period of playing the cheating level.
    collusive : bool
        Whether the state counts as colluding.
    """

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
    """A validated automaton: the state rows, the initial state and the cheating settings.

    Parameters
    ----------
    rows : tuple of StateRow
        The states, in table order.
    initial : int
        Index of the initial state.
    cheat_level : str, float or tuple of float
        The level played when cheating.
    cheat_from : int
        First period (0-based) in which the states' cheat probabilities apply.
    cheat_until : int or None
        Period from which they no longer apply (None: never ends).
    """

    rows: tuple
    initial: int
    cheat_level: Any
    cheat_from: int
    cheat_until: int | None

    @property
    def names(self) -> list[str]:
        """The state names, in table order."""
        return [r.name for r in self.rows]

    @property
    def watches_conduct(self) -> bool:
        """Whether some state watches the firms' conduct (``all`` or ``rivals``)."""
        return any(r.watch in ("all", "rivals") for r in self.rows)


def _prob(key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (0.0 <= float(value) <= 1.0):
        raise InputError(key, f"must be a probability in [0, 1], got {_fmt(value)}")
    return float(value)


def _int(key: str, v: Any, low: int) -> int:
    if isinstance(v, bool) or not isinstance(v, numbers.Real) or not float(v).is_integer() or v < low:
        raise InputError(key, f"must be an integer >= {low}, got {_fmt(v)}")
    return int(v)


def _threshold(sk: str, st: dict, watch: str) -> float:
    if watch in ("price", "profit"):
        if "threshold" not in st:
            what = "trigger price" if watch == "price" else "aspiration profit"
            raise InputError(f"{sk}.threshold", f"missing (the {what} of watch = {watch!r})")
        t = st["threshold"]
        if isinstance(t, bool) or not isinstance(t, numbers.Real) or not math.isfinite(float(t)):
            raise InputError(f"{sk}.threshold", f"must be a finite number, got {_fmt(t)}")
        return float(t)
    if "threshold" in st:
        raise InputError(f"{sk}.threshold", f"only used with watch = 'price' or 'profit', not {watch!r}")
    return math.nan


def _transitions(sk: str, st: dict, self_i: int, target) -> tuple:
    """(good, bad, forgive, forgive_to, lapse, lapse_to) of one state."""
    if "next" in st and ("good" in st or "bad" in st):
        raise InputError(f"{sk}.next", "give either next or good/bad, not both")
    if "next" in st:
        good = bad = target(f"{sk}.next", st["next"])
    else:
        good = target(f"{sk}.good", st["good"]) if "good" in st else self_i
        bad = target(f"{sk}.bad", st["bad"]) if "bad" in st else good
    forgive = _prob(f"{sk}.forgive", st.get("forgive", 0.0))
    forgive_to = target(f"{sk}.forgive_to", st["forgive_to"]) if "forgive_to" in st else good
    lapse = _prob(f"{sk}.lapse", st.get("lapse", 0.0))
    lapse_to = target(f"{sk}.lapse_to", st["lapse_to"]) if "lapse_to" in st else bad
    return good, bad, forgive, forgive_to, lapse, lapse_to


def _state_row(name: str, st: Any, sk: str, self_i: int, target, coll_level) -> StateRow:
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
    threshold = _threshold(sk, st, watch)
    good, bad, forgive, forgive_to, lapse, lapse_to = _transitions(sk, st, self_i, target)
    cheat = _prob(f"{sk}.cheat", st.get("cheat", 0.0))
    if "collusive" in st:
        c = st["collusive"]
        if not isinstance(c, bool | np.bool_):
            raise InputError(f"{sk}.collusive", f"must be true or false, got {_fmt(c)}")
        collusive = bool(c)
    else:
        collusive = action == coll_level
    return StateRow(name, action, watch, expect, judge, threshold, good, bad, forgive, forgive_to, lapse, lapse_to,
                    cheat, collusive)


def validate_table(states: Any, initial: Any = None, cheat_level: Any = "deviation", cheat_from: Any = 0,
                   cheat_until: Any = None, collusive_level: Any = "collusive",
                   prefix: str = "strategy") -> AutomatonTable:
    """Check a state table and return its validated form.

    Errors name the key path, e.g. ``strategies[2].states.punish.good``. A transition to a state that
    does not exist, a probability outside [0, 1], a missing threshold or an unknown key are refused.

    Parameters
    ----------
    states : dict
        State name -> state keys (see the module notes); the first state is the initial one unless
        ``initial`` says otherwise.
    initial : str, optional
        Name of the initial state.
    cheat_level : level
        The level played in a state's ``cheat`` periods.
    cheat_from : int
        First period (0-based) in which the ``cheat`` probabilities apply.
    cheat_until : int, optional
        Period from which they no longer apply (default: never ends).
    collusive_level : level
        States playing this level count as colluding unless they say ``collusive``.
    prefix : str
        Key path of the strategy, for error messages.

    Returns
    -------
    AutomatonTable
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
    rows = [_state_row(n, states[n], f"{key}.{n}", index[n], target, coll_level) for n in names]
    init = 0 if initial is None else target(f"{prefix}.initial", initial)
    cl = check_level(f"{prefix}.cheat_action", cheat_level)
    cf = _int(f"{prefix}.start", cheat_from, 0)
    cu = None if cheat_until is None else _int(f"{prefix}.stop", cheat_until, cf + 1)
    return AutomatonTable(tuple(rows), init, cl, cf, cu)
