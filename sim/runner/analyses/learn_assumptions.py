"""The assumptions a learn run's report states: those of every learn run, and those of the learners and protocols its
cells actually use (a cell's document says which), so that a run of bandits is not described as Q-learning and a run
without demand shocks lists none."""

from __future__ import annotations

__all__ = ["COMMON", "cell_assumptions"]

#: stated for every learn run
COMMON = (
    "A session counts as converged once no learner's greedy strategy (its price in each state it can see) changed "
    "for the stated number of periods (Calvano, Calzolari, Denicolo and Pastorello, 2020); a session that reaches "
    "its cap first is reported as not converged, and the statistics are over converged sessions (over every "
    "session when none converged, as the report then says).",
    "Limit outcomes are those of greedy play after learning, from each session's final state; statistics are across "
    "independent sessions (95 % intervals: Student's t for means, Wilson for shares) and measure "
    "simulation error only.",
    "Learned outcomes depend on the algorithm's settings (learning rate, exploration, grid, memory); they show what "
    "such algorithms can learn in this model, not what a particular pricing software does.",
)

_Q = ("Q-learners: tabular Q-learning (Watkins and Dayan, 1992) on a finite grid of actions, each state the actions of "
      "the last periods it remembers, with epsilon-greedy exploration decaying as exp(-beta t), as in Calvano, "
      "Calzolari, Denicolo and Pastorello (2020).")
_SIMULTANEOUS = "Every firm sets its price every period, all at the same time (simultaneous moves)."
_ALTERNATING = ("With learning.timing = 'alternating', two Q-learners set their prices in turn and each price holds "
                "for two periods (Klein, 2021, RAND Journal of Economics 52(3)); no impulse response is computed for "
                "them.")
_UPDATE = {
    "asynchronous": ("With learning.update = 'asynchronous' (the default), a Q-learner updates the value of the "
                     "action it played only: the asynchronous rule of Calvano, Calzolari, Denicolo and Pastorello "
                     "(2020)."),
    "synchronous": ("With learning.update = 'synchronous', a Q-learner updates the value of every action from the "
                    "profit it would have earned against the rivals' actual actions (Asker, Fershtman and Pakes, "
                    "2022, AEA Papers and Proceedings 112). Whether asynchronous learners' higher prices are "
                    "collusion or an artefact of how they explore is debated (Calvano, Calzolari, Denicolo and "
                    "Pastorello, 2021, CEPR Discussion Paper 16393, 'Algorithmic collusion, genuine and spurious': "
                    "genuine with random exploration, as here)."),
    "mixed": ("With learning.update = 'mixed', a Q-learner updates the action it played and each other action with "
              "probability learning.counterfactual_share, from the profit it would have earned (after Asker, "
              "Fershtman and Pakes, 2022)."),
}
_FAMILY = {
    "ucb": ("UCB bandits: each firm treats its price grid as the arms of a bandit, keeps no state (it ignores its "
            "rivals), tries every price once and then plays the largest index mean + c sqrt(2 ln t / n) (UCB1: Auer, "
            "Cesa-Bianchi and Fischer, 2002), learning from its profit scaled to [0, 1] by the largest profit on the "
            "grid, plus a normal error of learning.noise where given; the misspecified learners of Hansen, Misra "
            "and Pai (2021, Marketing Science 40(1)). Without that error UCB1 draws nothing, so sessions of UCB "
            "bandits and automata that draw nothing are copies of one another. The limit outcomes are those of each "
            "bandit's greedy price (its largest mean reward), which UCB1 would keep leaving now and then to explore."),
    "thompson": ("Thompson-sampling bandits: each firm treats its price grid as the arms of a bandit, keeps no state, "
                 "and each period plays the price with the largest draw from a normal posterior of its mean reward "
                 "(Agrawal and Goyal, 2013), learning from its profit scaled to [0, 1] by the largest profit on the "
                 "grid, plus a normal error of learning.noise where given (after Hansen, Misra and Pai, 2021). The "
                 "limit outcomes are those of each bandit's greedy price (its largest posterior mean)."),
    "fixed": ("Fixed policies: a seat plays, in every state, the greedy action of a learner saved by an earlier run "
              "(learning.policy_from), without learning or exploring."),
}
_AUTOMATA = ("Automata seats play the fixed rules of the strategy library (the same as in the simulate command), "
             "perfectly observing last period's prices next to learners; the report records their punishments "
             "during learning.")
_SHOCK = ("With learning.demand_sigma above 0, one mean-one demand shock a period scales every firm's realised profit, "
          "which is what the learners learn from; learners that condition on past prices do not react to a draw in "
          "the limit, whose profits are expected profits. Calvano, Calzolari, Denicolo and Pastorello (2021) adapt "
          "Green and Porter (1984): what their learners observe, a low price, is moved by the shock as well as by a "
          "rival's conduct, so their punishments follow bad draws too; learners that see the rivals' prices exactly, "
          "as here, are not in that setting (learning.observe = 'own_profit' is the closer one).")
_OBSERVE = {
    "noisy_prices": ("With learning.observe = 'noisy_prices', a learner sees its own last price exactly and each "
                     "rival's with a normal error of learning.price_noise grid steps, rounded to the grid (imperfect "
                     "monitoring after Stigler, 1964, and Green and Porter, 1984); the limit outcomes are those of "
                     "greedy play without error from the prices played last, and play with error after learning "
                     "(10,000 periods a session, no learning or exploration) is reported beside them."),
    "own_profit": ("With learning.observe = 'own_profit', a learner sees only its own last price and whether its "
                   "profit fell more than learning.signal_band below the profit at the symmetric prices, so a "
                   "rival's undercut and a bad demand draw look alike (after Green and Porter, 1984)."),
}
_EVENT = ("The sessions continue saved learners after an event ([event]): each goes on from its saved state and "
          "random stream, the convergence counter restarts at the event, and the cap counts the periods after it.")
_CONTINUED = ("The sessions continue saved learners (learning.continue_from): each goes on from its saved state and "
              "random stream, so the run's seed and Q initialisation are not used; the report names what changed "
              "since the save.")


def _seats(doc: dict) -> list[dict]:
    """Every seat's settings: ``[learning]`` under each ``[[strategies]]`` entry's own keys (one learner on every
    seat without a line-up)."""
    lt = doc.get("learning") or {}
    line = doc.get("strategies") or [{"strategy": "qlearning"}]
    return [{**lt, **s} if s.get("strategy", "qlearning") == "qlearning" else dict(s) for s in line]


def cell_assumptions(doc: dict) -> list[str]:
    """The assumptions of the learners and protocols of one cell's document, in a fixed order.

    Parameters
    ----------
    doc : dict
        A cell's document (the experiment's tables with the swept values set).

    Returns
    -------
    list of str
    """
    lt = doc.get("learning") or {}
    seats = _seats(doc)
    learners = [s for s in seats if s.get("strategy", "qlearning") == "qlearning"]
    families = [s.get("family", "q") for s in learners]
    out = []
    if "q" in families:
        out.append(_Q)
        for rule in dict.fromkeys(s.get("update", "asynchronous") for s in learners if s.get("family", "q") == "q"):
            out.append(_UPDATE.get(rule, f"Q-learners use the update rule {rule!r}."))
    out += [_FAMILY[f] for f in dict.fromkeys(families) if f in _FAMILY]
    if len(learners) < len(seats):
        out.append(_AUTOMATA)
    out.append(_ALTERNATING if lt.get("timing") == "alternating" else _SIMULTANEOUS)
    if float(lt.get("demand_sigma") or 0.0) > 0.0:
        out.append(_SHOCK)
    if lt.get("observe") in _OBSERVE:
        out.append(_OBSERVE[lt["observe"]])
    if "event" in doc:
        out.append(_EVENT)
    elif lt.get("continue_from"):
        out.append(_CONTINUED)
    return out
