"""The entrants of a tournament: a label and a strategy each, read from a line-up or from ``[[entrants]]`` entries.

An entrant's strategy is an automaton of :mod:`strategies` (grim trigger, Nash reversion for T periods, tit for tat,
...) with its parameters, or a learning firm (:class:`strategies.qlearning.QLearner`) with its own. Labels are the
entrants' names in every table and figure, so they must be unique.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.learning.tables import LEARNER_PARAMS, learner_from_entry
from strategies import Automaton, strategy_from_dict
from strategies.qlearning import SEAT_NAMES, QLearner

__all__ = ["Entrant", "as_entrants", "check_entrants", "entrants_from_tables", "rule_description"]


@dataclass(frozen=True, eq=False)
class Entrant:
    """A labelled strategy.

    Parameters
    ----------
    label : str
        The entrant's unique name.
    strategy : strategies.Automaton or strategies.qlearning.QLearner
    """

    label: str
    strategy: object

    @property
    def learns(self) -> bool:
        """Whether the entrant is a learning firm."""
        return isinstance(self.strategy, QLearner)

    @property
    def name(self) -> str:
        """The strategy's registry name (``grim_trigger``, ...), or a learner's family name (``qlearning``, ``ucb``,
        ``thompson``, ``fixed``: :data:`strategies.qlearning.SEAT_NAMES`)."""
        if self.learns:
            return SEAT_NAMES.get(self.strategy.family, "qlearning")
        return getattr(self.strategy, "name", type(self.strategy).__name__)

    def to_dict(self) -> dict:
        """The entrant as an ``[[entrants]]`` entry: ``label``, ``strategy`` and the parameters.

        Returns
        -------
        dict
        """
        if self.learns:
            params = {k: (v.tolist() if isinstance(v, np.ndarray) else v)
                      for k, v in self.strategy.get_params().items() if v is not None}
            return {"label": self.label, "strategy": "qlearning", **params}
        return {"label": self.label, **self.strategy.to_dict()}


def entrants_from_tables(tables, learning: dict | None = None, prefix: str = "entrants") -> list[Entrant]:
    """Entrants from an experiment file's ``[[entrants]]`` entries.

    ``strategy = "qlearning"`` entries take the learner parameters of ``learning`` (the ``[learning]`` table),
    overridden by their own (:func:`sim.learning.session.learner_from_entry`, the reader of learning line-ups); any
    other name is looked up in the strategy registry.

    Parameters
    ----------
    tables : list of dict
        Each with ``label``, ``strategy`` and the strategy's parameters.
    learning : dict, optional
        The ``[learning]`` table.
    prefix : str
        Key path of the entries, for errors.

    Returns
    -------
    list of Entrant
    """

    if not isinstance(tables, list) or isinstance(tables, str):
        raise InputError(prefix, "must be an array of tables ([[entrants]] entries)")
    base = {k: v for k, v in (learning or {}).items() if k in LEARNER_PARAMS}
    out = []
    for k, t in enumerate(tables):
        key = f"{prefix}[{k + 1}]"
        if not isinstance(t, dict):
            raise InputError(key, f"must be a table with 'label' and 'strategy', got {t!r}")
        if "label" not in t:
            raise InputError(f"{key}.label", "missing (a unique name for the entrant)")
        if "seats" in t:
            raise InputError(f"{key}.seats", "not used in tournaments: every entrant meets every group of entrants")
        body = {kk: v for kk, v in t.items() if kk != "label"}
        if body.get("strategy") == QLearner.name:
            strat = learner_from_entry(body, base, key, skip=("strategy",), validate=False)
        else:
            strat = strategy_from_dict(body, key)
        out.append(Entrant(t["label"], strat))
    return out


def as_entrants(entrants) -> list[Entrant]:
    """Entrants from any of the accepted forms.

    Parameters
    ----------
    entrants : list of Entrant, of ``(label, strategy)`` pairs or of ``[[entrants]]`` tables, or dict
        A dict maps labels to strategies.

    Returns
    -------
    list of Entrant
    """
    if isinstance(entrants, dict):
        entrants = [Entrant(k, v) for k, v in entrants.items()]
    if not isinstance(entrants, list | tuple):
        raise InputError("entrants", f"must be a list of entrants, got {entrants!r}")
    if entrants and all(isinstance(e, dict) for e in entrants):
        return entrants_from_tables(list(entrants))
    out = []
    for k, e in enumerate(entrants):
        if isinstance(e, Entrant):
            out.append(e)
        elif isinstance(e, tuple) and len(e) == 2:
            out.append(Entrant(*e))
        else:
            raise InputError(f"entrants[{k + 1}]", f"must be an Entrant, a (label, strategy) pair or a table, "
                                                   f"got {e!r}")
    return out


def check_entrants(entrants: list[Entrant]) -> None:
    """Refuse fewer than two entrants, missing or repeated labels and invalid strategy parameters.

    Parameters
    ----------
    entrants : list of Entrant

    Returns
    -------
    None
    """

    if len(entrants) < 2:
        raise InputError("entrants", f"a tournament needs at least 2 entrants, got {len(entrants)}")
    seen: dict = {}
    for k, e in enumerate(entrants):
        key = f"entrants[{k + 1}]"
        if not isinstance(e.label, str) or not e.label.strip():
            raise InputError(f"{key}.label", f"must be a non-empty string, got {e.label!r}")
        if e.label in seen:
            raise InputError(f"{key}.label", f"duplicate label {e.label!r} (also entrants[{seen[e.label] + 1}]); "
                                             "every entrant needs its own label")
        seen[e.label] = k
        if isinstance(e.strategy, QLearner):
            e.strategy.spec(prefix=key)
        elif isinstance(e.strategy, Automaton):
            e.strategy._check_params(key)
        else:
            raise InputError(f"{key}.strategy", f"must be an automaton strategy or a QLearner, got {e.strategy!r}")


#: readable names of the shipped rules (a plugin's rule is named after its registry name)
_RULE_NAMES = {
    "grim_trigger": "grim trigger",
    "finite_punishment": "Nash reversion",
    "tit_for_tat": "tit for tat",
    "forgiving_tit_for_tat": "forgiving tit for tat",
    "win_stay_lose_shift": "win-stay lose-shift",
    "stick_and_carrot": "stick and carrot",
    "trigger_price": "trigger price",
    "always_compete": "always compete (static Nash)",
    "always_collude": "always collude",
    "opportunist": "opportunist",
    "automaton": "user-defined automaton",
    "qlearning": "Q-learning firm",
    "ucb": "UCB bandit firm",
    "thompson": "Thompson-sampling bandit firm",
    "fixed": "fixed learned policy",
}


def rule_description(entrant: Entrant) -> str:
    """The entrant's rule in words, with the parameters that differ from the rule's defaults.

    Parameters
    ----------
    entrant : Entrant

    Returns
    -------
    str
        For example ``"Nash reversion for 3 periods"`` or ``"forgiving tit for tat (forgiveness 0.3)"``.
    """
    strat = entrant.strategy
    name = entrant.name
    params = {k: v for k, v in strat.get_params().items() if k != "states" and v is not None}
    try:
        default = type(strat)().get_params()
    except (InputError, TypeError):  # a rule without defaults: every parameter is shown
        default = {}
    shown = {k: v for k, v in params.items() if k not in default or _differs(default[k], v)}
    text = _RULE_NAMES.get(name, name.replace("_", " "))
    if name == "finite_punishment":
        T = params.get("length", 1)
        text = f"Nash reversion for {T} period{'s' if T != 1 else ''}"
        shown.pop("length", None)
    if not shown:
        return text
    words = ", ".join(f"{k.replace('_', ' ')} {_value(v)}" for k, v in shown.items())
    return f"{text} ({words})"


def _differs(a, b) -> bool:
    try:
        return bool(np.any(np.asarray(a) != np.asarray(b))) or np.shape(a) != np.shape(b)
    except (TypeError, ValueError):
        return a != b


def _value(v) -> str:
    if isinstance(v, np.ndarray):
        v = v.tolist()
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return str(v)
