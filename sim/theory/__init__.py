"""Theory of the repeated game: static equilibria, critical discount factors and equilibrium payoff sets.

Modules
-------
discretize
    Finite stage games on action grids built from a market (payoff arrays, best-response payoffs,
    pure-action minmax, pure static equilibria).
payoff_sets
    The set of subgame-perfect equilibrium payoffs at a discount factor, bracketed between an outer
    and an inner approximation.
practice
    What a practitioner reads from the sets: optimal penal codes, the lowest discount factor that
    sustains an agreement under any punishment, the frontier of sustainable profits, grid refinement.
"""
