"""Catalogue rows of the swept or given parameters (see :mod:`sim.evidence.catalogue`, which turns each tuple into an
``Entry``: label, unit, definition, method with its source): the unit and label of an axis.
"""

from __future__ import annotations

__all__ = ["PARAMETER_ROWS"]

#: key path -> (label, unit, definition, method)
PARAMETER_ROWS: dict[str, tuple] = {
    "run.delta": ("discount factor delta", "", "The firms' common discount factor.", "given"),
    "run.periods": ("periods", "periods", "Length of a replication.", "given"),
    "run.replications": ("replications", "count", "Independent replications.", "given"),
    "run.seed": ("seed", "", "The experiment's random seed.", "given"),
    "run.continuation": ("continuation probability", "probability", "Chance that the game goes on.", "given"),
    "run.sessions": ("learning sessions", "count", "Independent sessions.", "given"),
    "monitoring.sigma": ("standard deviation of the demand shock sigma", "", "Noise of the price signal.",
                         "given"),
    "monitoring.perception_error": ("perception error", "probability",
                                    "Chance that a firm misreads a rival's conduct.", "given"),
    "monitoring.implementation_error": ("implementation error", "probability",
                                        "Chance that a firm's action is replaced by cheating.", "given"),
    "market.n_firms": ("number of firms", "", "Firms in the market.", "given"),
    "market.cost": ("marginal cost", "currency units per unit", "Marginal cost of production.", "given"),
    "market.intercept": ("demand intercept", "price", "Choke price of linear demand.", "given"),
    "market.slope": ("demand slope", "price per unit", "Slope of linear inverse demand.", "given"),
    "market.mu": ("logit differentiation mu", "", "Horizontal differentiation of logit demand.", "given"),
    "market.substitution": ("substitutability", "", "Substitutability of differentiated products.", "given"),
    "market.elasticity": ("demand elasticity", "", "Absolute elasticity of isoelastic demand.", "given"),
    "strategies": ("strategy", "", "The strategy played by the seats of a line-up entry.", "given"),
    "assess.growth": ("demand growth per period", "share per period", "Growth rate of demand.", "given"),
    "learning.update": ("update rule of the learners", "",
                        "Which values a learner updates after a period: asynchronous (the price it played) or "
                        "synchronous (every price, from what it would have earned against the rivals' prices).",
                        "given; the rules of Asker, Fershtman and Pakes (2022, AEA Papers and Proceedings 112)"),
    "learning.delta": ("discount factor of the learners", "",
                       "The weight a learner gives future profits in its Q-values (0: only this period's profit).",
                       "given; the Q-learning update of Watkins and Dayan (1992, Machine Learning 8)"),
    "learning.family": ("learner family", "",
                        "How a learner chooses its price: Q-learning, an upper-confidence-bound bandit or a "
                        "Thompson-sampling bandit over the price grid, or a fixed policy (the greedy prices of a "
                        "saved learner, played without learning or exploring).",
                        "given; UCB1 (Auer, Cesa-Bianchi and Fischer, 2002, Machine Learning 47), Thompson "
                        "sampling with a normal prior (Agrawal and Goyal, 2013)"),
    "learning.noise": ("noise on the observed profit", "share of the reward scale",
                       "Standard deviation of the normal error on the reward a bandit observes each period (its "
                       "profit scaled to [0, 1] between zero, or its lowest profit on the grid when that is "
                       "negative, and its largest profit on the grid); the lower, the higher the signal-to-noise "
                       "ratio.",
                       "given; the setting of Hansen, Misra and Pai (2021, Marketing Science 40(1))"),
    "learning.exploration": ("exploration scale of a bandit", "",
                             "UCB's exploration constant c, or the standard deviation of a Thompson-sampling "
                             "learner's normal prior.", "given"),
}
