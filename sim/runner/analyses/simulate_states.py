"""The ``[demand_states]`` table of the simulate kind when the collusive action depends on the state.

Two keys of the table choose it (the rest is the table of :mod:`sim.simulation.states_run`: ``kind``, the state
probabilities, transition or cycle, ``labels``, ``growth``, ``parameter`` and ``values``):

* ``collusive_path`` -- ``"same"`` (the default: the line-up plays the same actions in every state, and each state
  must scale every profit by one factor), ``"agreement"`` (the experiment's agreement in each state's market),
  ``"best"`` (the most collusive state-contingent path sustainable at ``run.delta`` under grim trigger) or
  ``"given"``;
* ``collusive_actions`` -- with ``"given"`` (which it implies): one entry per state, a number for every product or
  one number per product.

The line-up's automata keep their states and transitions; what their levels stand for is resolved in each state's
market (:mod:`sim.simulation.state_game`).
"""

from __future__ import annotations

from sim.core.errors import InputError
from sim.core.params import Options
from sim.simulation.state_game import COLLUSIVE_PATHS, compile_state_game, state_collusive_actions
from sim.theory.demand_states import DemandStates, markets_by_state

__all__ = ["CONTINGENT_KEYS", "CONTINGENT_WORDS", "contingent_names", "contingent_states", "put_contingent",
           "wants_contingent"]

#: the keys of ``[demand_states]`` that make the collusive action depend on the state
CONTINGENT_KEYS = ("collusive_path", "collusive_actions")
#: how the setup lines name each ``collusive_path``
CONTINGENT_WORDS = {"agreement": "the agreement of each state's market",
                    "best": "the most collusive state-contingent path sustainable at run.delta",
                    "given": "the collusive actions given per state"}


def wants_contingent(table) -> bool:
    """Whether a ``[demand_states]`` table asks for a collusive action that depends on the state.

    Parameters
    ----------
    table : object
        The table as given.

    Returns
    -------
    bool
    """
    return isinstance(table, dict) and (table.get("collusive_path", "same") != "same" or "collusive_actions" in table)


def contingent_states(doc: dict, out: dict) -> dict:
    """Validate the table and compile the line-up in every state's market.

    Parameters
    ----------
    doc : dict
        The experiment document (its ``[demand_states]`` table is read).
    out : dict
        The prepared cell so far (``market``, ``game``, ``run``, ``agreement``, ``actions``).

    Returns
    -------
    dict
        ``states``, ``parameter``, ``values``, ``factors`` (None), ``game`` (a
        :class:`~sim.simulation.state_game.StateGame`) and ``deviation_game`` (the deviation check's line-up in the
        same states, or None).
    """
    if "enforcement" in doc:
        raise InputError("demand_states.collusive_path", "is not simulated together with [enforcement] yet: give one "
                                                         "of the two")
    d = dict(doc["demand_states"])
    source = d.pop("collusive_path", "given" if "collusive_actions" in d else "same")
    source = Options(*COLLUSIVE_PATHS[1:]).check("demand_states.collusive_path", source)
    given = d.pop("collusive_actions", None)
    if given is not None and source != "given":
        raise InputError("demand_states.collusive_actions", f"is read only with collusive_path = 'given', got "
                                                            f"collusive_path = {source!r}")
    if given is None and source == "given":
        raise InputError("demand_states.collusive_actions", "missing: one collusive action per state")
    parameter, values = d.pop("parameter", None), d.pop("values", None)
    states = DemandStates.from_dict(d, "demand_states")
    if not isinstance(parameter, str):
        raise InputError("demand_states.parameter", f"missing: the market parameter that moves with the state "
                                                    f"(e.g. 'intercept'), got {parameter!r}")
    if not isinstance(values, list) or len(values) != states.n_states:
        raise InputError("demand_states.values", f"must list one value per state ({states.n_states}), got {values!r}")
    markets = markets_by_state(out["market"], parameter, values)
    coll = state_collusive_actions(source, states, markets, out["run"]["delta"], out["agreement"], out["actions"],
                                   given)
    game = compile_state_game(out["game"], states, markets, source, coll, out["agreement"], out["actions"])
    dev = out.get("deviation")
    # the deviator's automaton resolved in the same states: its cheating level is each state's best reply
    dev_game = None if dev is None else compile_state_game(dev["game"], states, markets, source, coll,
                                                           out["agreement"], out["actions"])
    return {"states": states, "parameter": parameter, "values": [float(v) for v in values], "factors": None,
            "game": game, "deviation_game": dev_game}


def contingent_names(n_states: int) -> list[str]:
    """The metric names a state-contingent line-up adds, per state.

    Parameters
    ----------
    n_states : int

    Returns
    -------
    list of str
    """
    out = ["state_play.full_collusion_delta"]
    for k in range(1, n_states + 1):
        out += [f"state_play.agreed_price[{k}]", f"state_play.nash_price[{k}]", f"state_play.price[{k}]",
                f"state_play.collusive_share[{k}]"]
    return out


def put_contingent(m: dict, sp) -> None:
    """Write the per-state prices and collusion of a state-contingent line-up into the cell's metrics.

    Parameters
    ----------
    m : dict
        The metrics (added to).
    sp : StatePlay
        With ``contingent`` set.
    """
    c = sp.contingent
    m["state_play.full_collusion_delta"] = float(c.full_collusion_delta)
    for k in range(len(sp.labels)):
        m[f"state_play.agreed_price[{k + 1}]"] = float(c.agreed_price[k])
        m[f"state_play.nash_price[{k + 1}]"] = float(c.nash_price[k])
        m[f"state_play.price[{k + 1}]"] = float(c.price[k])
        m[f"state_play.collusive_share[{k + 1}]"] = float(c.collusive_share[k])
