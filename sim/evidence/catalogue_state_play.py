"""Catalogue entries of a simulated line-up in a market whose demand state moves (the ``[demand_states]`` table of
the simulate kind, :mod:`sim.simulation.states_run`): stem -> (label, unit, definition, method, interval)."""

from __future__ import annotations

__all__ = ["STATE_PLAY_ENTRIES"]

_MEAN = "Student's t interval across independent replications (mean +- t s / sqrt(n), t with n - 1 degrees of freedom)"
_DRAWN = ("one seeded uniform per period picks the state (i.i.d. probabilities or the row of the Markov chain; a "
          "cycle draws nothing), as in sim.theory.draws.draw_state_path")
_SCALED = ("each period's profit of the simulated path times its state's factor, times (1 + g)^t with a growth rate "
           "g; exact because every state scales every profit of the line-up by one factor (checked on the market)")

_PLAYED = ("each period played in its demand state's market with the state's level profiles (sim.simulation."
           "state_game), pooled over the periods of the state in every replication")

STATE_PLAY_ENTRIES = {
    "state_play.frequency": ("share of periods in the state", "0 to 1",
                             "Share of the periods played in which the demand is in this state.", _DRAWN,
                             "standard error across replications (each replication's share one observation)"),
    "state_play.expected": ("long-run share of the state", "0 to 1",
                            "The state's probability (i.i.d.), its stationary probability (Markov chain) or its "
                            "share of the cycle.", "stationary distribution pi = pi P of the chain (e.g. Norris, "
                                                   "1997, Markov Chains, section 1.7)"),
    "state_play.factor": ("profit factor of the state", "multiple",
                          "Every profit the line-up can earn in this state as a multiple of the experiment's market.",
                          "the market evaluated at every combination of the firms' levels, per state"),
    "state_play.profit_by_state": ("mean profit per period in the state", "{money}",
                                   "Mean profit of a firm over the periods spent in this state.", _SCALED),
    "state_play.profit": ("profit per replication with demand states", "{currency}",
                          "Mean total profit of a firm in a replication when demand moves between the states.",
                          _SCALED, _MEAN),
    "state_play.discounted_profit": ("discounted profit with demand states", "{currency}, discounted sum",
                                     "Mean discounted profit of a firm in a replication when demand moves between "
                                     "the states.", _SCALED, _MEAN),
    # a line-up whose collusive action depends on the state (demand_states.collusive_path)
    "state_play.agreed_price": ("agreed price in the demand state", "price",
                                "Market price of the actions agreed for this demand state.",
                                "the stage game of the state's market at the agreed actions (the most collusive "
                                "sustainable path: sim.theory.state_path.best_state_path, after Rotemberg and "
                                "Saloner, 1986, AER 76(3))"),
    "state_play.nash_price": ("static Nash price in the demand state", "price",
                              "Market price of the static Nash equilibrium of this demand state's market.",
                              "static Nash equilibrium of the state's market"),
    "state_play.price": ("simulated price in the demand state", "price",
                         "Mean market price over the simulated periods spent in this demand state.", _PLAYED),
    "state_play.full_collusion_delta": ("critical discount factor of full collusion in every demand state", "",
                                        "Smallest discount factor at which grim trigger sustains the agreement in "
                                        "every demand state; below it the best sustainable path caps the agreement "
                                        "where cheating pays most.",
                                        "sim.theory.demand_states.state_thresholds: the gain from cheating in each "
                                        "state against the expected discounted loss (Rotemberg and Saloner, 1986, "
                                        "AER 76(3))"),
    "state_play.collusive_share": ("collusive share in the demand state", "0 to 1",
                                   "Share of the simulated periods in this demand state in which every firm "
                                   "colluded.", _PLAYED),
}
