"""Tournaments of rules for sustaining collusion, and which rules spread among firms that imitate success.

Modules, in the order a tournament runs through them:

* :mod:`~sim.tournament.entrants` -- the entrants: a label and a strategy each;
* :mod:`~sim.tournament.plan` -- every group and seating validated and compiled (:func:`prepare_tournament`),
  the profit-gain benchmarks;
* :mod:`~sim.tournament.roundrobin` -- the driver that plays every match (:func:`tournament`,
  :func:`run_tournament`);
* :mod:`~sim.tournament.scoring` -- group payoffs, scores and places (:class:`TournamentResult`);
* :mod:`~sim.tournament.bootstrap` -- the stability of the places: numba kernel with grouped inputs and its
  plain-Python twin;
* :mod:`~sim.tournament.payoffs`, :mod:`~sim.tournament.replicator`, :mod:`~sim.tournament.moran`,
  :mod:`~sim.tournament.stability`, :mod:`~sim.tournament.evolution` -- payoffs against populations, replicator
  dynamics, the Moran process (kernel and twin), resistance to invasion, all at once (:func:`evolve`);
* :mod:`~sim.tournament.experiment`, :mod:`~sim.tournament.floor` -- experiment files, and the lowest payoff the
  rules allow (checked before anything is played);
* :mod:`~sim.tournament.analysis` -- the analysis of the ``tournament`` kind: a specification in, a plain-data
  :class:`TournamentOutcome` out, in the market's terms.
"""
