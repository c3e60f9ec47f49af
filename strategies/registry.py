"""Strategy registry: names used in experiment files and on the command line -> classes.

Other components register their strategies with :func:`register` (a class decorator) or, to keep
imports lazy, by adding ``name -> "module:Class"`` to :data:`LAZY`.
"""

from __future__ import annotations

import importlib
import numbers
from collections.abc import Sequence

import strategies.automata as automata
from sim.core.errors import InputError
from strategies.base import Automaton
from strategies.custom import TableAutomaton
from strategies.qlearning import QLearner

__all__ = ["LAZY", "MAX_SEATS", "STRATEGIES", "check_seats", "lineup_from_tables", "register", "strategy_class",
           "strategy_from_dict"]

#: largest ``seats`` of one line-up entry (the market's number of firms is checked on the whole line-up)
MAX_SEATS = 100_000

#: registry name -> strategy class
STRATEGIES: dict[str, type] = {}
#: registry name -> "module:Class", imported on first use
LAZY: dict[str, str] = {}


def register(strategy_type: type) -> type:
    """Add a strategy class to the registry under its ``name`` (usable as a decorator).

    Parameters
    ----------
    strategy_type : type
        A strategy class with a registry ``name``.

    Returns
    -------
    type
        ``strategy_type`` itself.
    """
    if not getattr(strategy_type, "name", ""):
        raise ValueError(f"{strategy_type.__name__} has no registry name")
    STRATEGIES[strategy_type.name] = strategy_type
    return strategy_type


for _cls in (automata.GrimTrigger, automata.FinitePunishment, automata.TitForTat, automata.ForgivingTitForTat,
             automata.WinStayLoseShift, automata.StickAndCarrot, automata.TriggerPrice, automata.AlwaysCompete,
             automata.AlwaysCollude, automata.Opportunist, TableAutomaton):
    register(_cls)


#: learner name -> learner class (the learning algorithms a line-up may seat with ``strategy = NAME``)
LEARNERS: dict[str, type] = {QLearner.name: QLearner}


def known_names() -> list[str]:
    """Every registry name, the lazily imported ones included.

    Returns
    -------
    list of str
        Sorted.
    """
    return sorted(set(STRATEGIES) | set(LAZY))


def strategy_class(name, key: str = "strategy") -> type:
    """The class registered under ``name``; an unknown name raises InputError listing the known ones.

    Parameters
    ----------
    name : str
        Registry name.
    key : str
        Key path of the name, for the error message.

    Returns
    -------
    type
    """
    if isinstance(name, str) and name not in STRATEGIES and name in LAZY:
        mod, _, attr = LAZY[name].partition(":")
        register(getattr(importlib.import_module(mod), attr))
    if not isinstance(name, str) or name not in STRATEGIES:
        raise InputError(key, f"unknown strategy {name!r}; known: {', '.join(known_names())}")
    return STRATEGIES[name]


def strategy_from_dict(table: dict, prefix: str = "strategy") -> Automaton:
    """Build a strategy from an experiment-file entry: ``strategy = name`` plus its parameters.

    Unknown parameter names raise InputError naming ``prefix.key`` and the allowed names. ``seats`` is
    not a strategy parameter (see :func:`lineup_from_tables`).

    Parameters
    ----------
    table : dict
        ``strategy`` (a registry name) and the strategy's parameters.
    prefix : str
        Key path of the entry, for error messages.

    Returns
    -------
    Automaton
        The strategy, its parameters validated.
    """
    if not isinstance(table, dict):
        raise InputError(prefix, f"must be a table with a 'strategy' key, got {table!r}")
    if "strategy" not in table:
        raise InputError(f"{prefix}.strategy", f"missing; known strategies: {', '.join(known_names())}")
    cls = strategy_class(table["strategy"], f"{prefix}.strategy")
    names = cls._param_names()
    params = {}
    for k, v in table.items():
        if k in ("strategy", "seats"):
            continue
        if k not in names:
            allowed = ", ".join(names) if names else "none"
            raise InputError(f"{prefix}.{k}", f"unknown parameter of {cls.name}; allowed: {allowed}")
        params[k] = v
    strat = cls(**params)
    if isinstance(strat, Automaton):
        strat._check_params(prefix)
    return strat


def check_seats(key: str, seats, n_firms: int | None = None) -> int:
    """The ``seats`` of a line-up entry: an integer in ``[1, MAX_SEATS]``, or ``"all"``: every firm of the
    market (so that the number of firms can be swept alone). Every reader of line-ups (simulations, learning
    sessions) uses this, and then compares the total with the market's firms.

    Parameters
    ----------
    key : str
        Key path of the value, for the error message.
    seats : int or "all"
        The value as given.
    n_firms : int, optional
        The market's number of firms (what ``"all"`` stands for).

    Returns
    -------
    int
    """
    if seats == "all":
        if n_firms is None:
            raise InputError(key, "'all' seats every firm of the market, which is not known here")
        return int(n_firms)
    if isinstance(seats, bool) or not isinstance(seats, numbers.Integral) or not 1 <= seats <= MAX_SEATS:
        raise InputError(key, f"must be an integer in [1, {MAX_SEATS}] or 'all', got {seats!r}")
    return int(seats)


def lineup_from_tables(tables, n_firms: int | None = None, prefix: str = "strategies") -> list:
    """Expand ``[[strategies]]`` entries (each with an optional ``seats``, default 1) into one strategy
    per firm, in seat order. With ``n_firms`` the total number of seats must match it.

    Parameters
    ----------
    tables : list of dict
        The entries (see :func:`strategy_from_dict`), each with an optional ``seats``.
    n_firms : int, optional
        The market's number of firms.
    prefix : str
        Key path of the list, for error messages; entry ``k`` is ``prefix[k+1]``.

    Returns
    -------
    list of Automaton
        One strategy per seat (clones for repeated seats).
    """
    if not isinstance(tables, Sequence) or isinstance(tables, str | dict) or not tables:
        raise InputError(prefix, "must be a non-empty list of [[strategies]] entries")
    out = []
    total = 0
    for k, t in enumerate(tables):
        key = f"{prefix}[{k + 1}]"
        strat = strategy_from_dict(t, key)
        seats = check_seats(f"{key}.seats", t.get("seats", 1), n_firms)
        total += seats
        if n_firms is None or total <= n_firms:  # no clones beyond the market's firms (refused below)
            out.extend(strat.clone() for _ in range(seats))
    if n_firms is not None and total != n_firms:
        raise InputError(prefix, f"the line-up has {total} seat{'s' if total != 1 else ''} but the market "
                                 f"has {n_firms} firms; give one strategy per firm (use seats to repeat one)")
    return out
