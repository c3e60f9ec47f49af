"""A user-defined automaton: an experiment file's ``strategy = "automaton"`` with a table of states.

The table's keys are those of :mod:`strategies.table`; the table is validated when the line-up is
compiled, with errors naming their key path (``strategies[2].states.punish.good``).
"""

from __future__ import annotations

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Integer, Options, optional
from strategies.base import Automaton
from strategies.table import Level, StateTableConstraint

__all__ = ["TableAutomaton"]


class TableAutomaton(Automaton):
    """A user-defined automaton given as a table of states (see :mod:`strategies.base` for the keys).

    Parameters
    ----------
    states : dict
        State name -> state keys (``action``, ``watch``, ``good``, ``bad``, ...). The first state is the
        initial one unless ``initial`` says otherwise.
    initial : str, optional
        Name of the initial state.
    collude : level
        Level whose states count as colluding unless a state says ``collusive = true/false``.
    cheat_action : level
        Level played in a state's ``cheat`` periods (default ``"deviation"``).
    start : int >= 0
        First period (0-based) in which the states' ``cheat`` probabilities apply.

    Examples
    --------
    >>> TableAutomaton(states={
    ...     "collude": {"action": "collusive", "watch": "all", "bad": "punish"},
    ...     "punish": {"action": "nash", "next": "collude"},
    ... }).table().names
    ['collude', 'punish']
    """

    name = "automaton"
    summary = "a user-defined table of states, actions and transitions"
    _constraints = {"states": StateTableConstraint(), "initial": optional(Options()), "collude": Level(),
                    "cheat_action": Level(), "start": Integer(0, None)}

    def __init__(self, states=None, initial=None, collude="collusive", cheat_action="deviation", start=0):
        self.states_table = states
        self.initial_state = initial
        self.collude = collude
        self.cheat_action = cheat_action
        self.start = start

    # the constructor names ``states`` and ``initial`` collide with the method names of the base class,
    # so the values live under other attribute names
    def get_params(self):
        """Constructor arguments as a dict (values as stored, not validated).

        Returns
        -------
        dict
            ``states``, ``initial``, ``collude``, ``cheat_action`` and ``start``.
        """
        return {"states": self.states_table, "initial": self.initial_state, "collude": self.collude,
                "cheat_action": self.cheat_action, "start": self.start}

    def set_params(self, **params):
        """Set constructor arguments in place; an unknown name raises :class:`InputError`.

        Parameters
        ----------
        **params
            Constructor arguments by name.

        Returns
        -------
        TableAutomaton
            The strategy itself.
        """
        names = self._param_names()
        for k, v in params.items():
            if k not in names:
                raise InputError(k, f"unknown parameter of {type(self).__name__}; allowed: {', '.join(names)}")
            setattr(self, {"states": "states_table", "initial": "initial_state"}.get(k, k), v)
        return self

    def _check_params(self, prefix="", n=None):
        # the state table's own keys are checked when the table is validated (strategies.table)
        key = f"{prefix}." if prefix else ""
        out = {"states": StateTableConstraint().check(f"{key}states", self.states_table)}
        if self.initial_state is not None and not isinstance(self.initial_state, str):
            raise InputError(f"{key}initial", f"must be a state name, got {self.initial_state!r}")
        out["initial"] = self.initial_state
        out["collude"] = Level().check(f"{key}collude", self.collude)
        out["cheat_action"] = Level().check(f"{key}cheat_action", self.cheat_action)
        out["start"] = Integer(0, None).check(f"{key}start", self.start)
        return out

    @doc_sections(Automaton.states)
    def states(self, p, ctx=None):
        """The table as given."""
        return p["states"]

    @doc_sections(Automaton.initial)
    def initial(self, p):
        """The ``initial`` state (None: the table's first)."""
        return p["initial"]

    @doc_sections(Automaton.cheat)
    def cheat(self, p):
        """``cheat_action`` from period ``start`` on; the window never closes."""
        return p["cheat_action"], p["start"], None
