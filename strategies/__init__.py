"""Pluggable strategies: finite automata that compile to plain arrays (and, elsewhere, learners).

Public names: the shipped automata (:mod:`strategies.automata`), the user-defined table automaton
(:mod:`strategies.custom`), the base class and compiler (:mod:`strategies.base`), the state-table
format (:mod:`strategies.table`) and the registry (:mod:`strategies.registry`). The compiled array
layout and the numba functions that step an automaton are documented in :mod:`strategies.step`.
"""

from strategies.automata import (
    AlwaysCollude,
    AlwaysCompete,
    FinitePunishment,
    ForgivingTitForTat,
    GrimTrigger,
    Opportunist,
    StickAndCarrot,
    TitForTat,
    TriggerPrice,
    WinStayLoseShift,
)
from strategies.base import Automaton, CompiledLineup, StageLevels, compile_lineup
from strategies.custom import TableAutomaton
from strategies.registry import LAZY, STRATEGIES, lineup_from_tables, register, strategy_class, strategy_from_dict
from strategies.table import LEVEL_NAMES, validate_table

__all__ = [
    "LAZY",
    "LEVEL_NAMES",
    "STRATEGIES",
    "AlwaysCollude",
    "AlwaysCompete",
    "Automaton",
    "CompiledLineup",
    "FinitePunishment",
    "ForgivingTitForTat",
    "GrimTrigger",
    "Opportunist",
    "StageLevels",
    "StickAndCarrot",
    "TableAutomaton",
    "TitForTat",
    "TriggerPrice",
    "WinStayLoseShift",
    "compile_lineup",
    "lineup_from_tables",
    "register",
    "strategy_class",
    "strategy_from_dict",
    "validate_table",
]
