"""Evolutionary dynamics on tournament payoffs: replicator dynamics, the Moran process, stability, all at once.

The pieces live in their own modules: the payoffs of every group and against a population
(:mod:`sim.tournament.payoffs`: random group formation, Broom, Cannings and Vickers, 1997; Gokhale and Traulsen,
2010), fitness and the discrete replicator dynamics (:mod:`sim.tournament.replicator`: Taylor and Jonker, 1978;
Weibull, 1995), the birth-death Moran process with its exact fixation probabilities, seeded simulation and
rare-mutation limit (:mod:`sim.tournament.moran`: Nowak, Sasaki, Taylor and Fudenberg, 2004; Fudenberg and Imhof,
2006), and resistance to invasion in a large and a finite population (:mod:`sim.tournament.stability`: Maynard
Smith and Price, 1973; Nowak et al., 2004). :func:`evolve` runs them on one payoff table and returns an
:class:`EvolutionResult`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from sim.core.errors import InputError
from sim.core.params import Integer, Real
from sim.tournament.moran import fixation_probabilities, simulate_fixation, stationary_distribution
from sim.tournament.payoffs import PayoffTable
from sim.tournament.replicator import FITNESS_MAPS, ReplicatorPath, check_selection, check_shares, replicator
from sim.tournament.stability import stability

__all__ = ["EVOLUTION_CONSTRAINTS", "FITNESS_MAPS", "EvolutionResult", "evolve"]

EVOLUTION_CONSTRAINTS = {
    "generations": Integer(0, 10_000_000),
    "population": Integer(2, 1_000_000),
    "runs": Integer(0, 100_000_000),
    "seed": Integer(0, 2**63 - 1),
    "confidence": Real(0, 1, closed="neither"),
}


@dataclass(frozen=True, eq=False)
class EvolutionResult:
    """Replicator dynamics, Moran fixation (exact and simulated) and stability on one payoff table.

    Parameters
    ----------
    payoffs : PayoffTable
    replicator : ReplicatorPath
    fixation : ndarray of shape (E, E)
        Exact ``rho[i, j]`` (invader ``i``, resident ``j``).
    simulated : int64 ndarray of shape (E, E) or None
        Runs (out of ``runs``) in which the invader took over.
    runs : int
    stationary : ndarray of shape (E,)
        Share of time each entrant is the resident with rare mutations.
    stability : dict
        See :func:`sim.tournament.stability.stability`.
    settings : dict
    """

    payoffs: PayoffTable
    replicator: ReplicatorPath
    fixation: np.ndarray
    simulated: np.ndarray | None
    runs: int
    stationary: np.ndarray
    stability: dict
    settings: dict

    def simulated_share(self) -> np.ndarray | None:
        """The simulated fixation probabilities.

        Returns
        -------
        ndarray of shape (E, E) or None
            Share of the runs in which the invader took over (nan on the diagonal); None without a simulation.
        """
        return None if self.simulated is None else np.where(self.simulated >= 0, self.simulated / self.runs, np.nan)

    def agreement(self, z: float | None = None) -> dict:
        """How well the simulation matches the formula.

        The largest gap over the pairs in binomial standard errors (``sqrt(rho (1 - rho) / runs)``) and whether it
        is below ``z``. By default ``z`` bounds the largest of the ``E (E - 1)`` gaps at a family-wise level of 1 %
        (Bonferroni: the normal quantile of ``1 - 0.01 / (2 E (E - 1))``: 2.81 for two entrants, 3.86 for ten).

        Parameters
        ----------
        z : float, optional

        Returns
        -------
        dict
            ``max_standard_errors`` (float or None), ``within`` (bool or None) and ``z``.
        """

        if self.simulated is None:
            return {"max_standard_errors": None, "within": None, "z": z}
        sim = self.simulated_share()
        rho = self.fixation
        mask = ~np.isnan(rho)
        if z is None:
            z = float(norm.ppf(1.0 - 0.01 / (2 * max(1, int(mask.sum())))))
        se = np.sqrt(np.maximum(rho[mask] * (1.0 - rho[mask]), 1e-300) / self.runs)
        gap = np.abs(sim[mask] - rho[mask]) / se
        worst = float(gap.max()) if gap.size else 0.0
        return {"max_standard_errors": worst, "within": bool(worst <= z), "z": z}

    def to_dict(self) -> dict:
        """Plain data: settings, the replicator path, fixation (exact, times N, simulated), the stationary
        distribution and the stability verdicts.

        Returns
        -------
        dict
        """
        N = self.settings["population"]
        sim = self.simulated_share()
        return {
            "settings": self.settings,
            "labels": list(self.payoffs.labels),
            "metric": self.payoffs.metric,
            "replicator": self.replicator.to_dict(),
            "fixation": {"exact": self.fixation.tolist(), "times_population": (self.fixation * N).tolist(),
                         "simulated": sim.tolist() if sim is not None else None, "runs": self.runs,
                         "agreement": self.agreement(), "neutral": 1.0 / N},
            "stationary": self.stationary.tolist(),
            "stability": self.stability,
        }


def evolve(payoffs: PayoffTable, shares=None, generations: int = 1000, selection: float = 0.1,
           fitness_map: str = "linear", population: int = 100, runs: int = 10_000, seed: int = 0, key=(),
           confidence: float = 0.95, threads: int | None = None, prefix: str = "") -> EvolutionResult:
    """Replicator dynamics, the Moran process (exact and simulated) and the stability check.

    Parameters
    ----------
    payoffs : PayoffTable
    shares : array_like of shape (E,) or dict, optional
        Initial shares of the replicator dynamics (default equal).
    generations : int
    selection : float
        Selection intensity ``w``.
    fitness_map : {"linear", "exponential"}
    population : int
        N of the Moran process (at least the number of seats).
    runs : int
        Simulated invasions per ordered pair (0: no simulation).
    seed : int
    key : tuple of int
        The Moran simulation's streams continue this family.
    confidence : float
        Level at which payoff differences count as ties in the stability check.
    threads : int, optional
    prefix : str
        Key prefix of error messages (``"tournament"`` in experiment files).

    Returns
    -------
    EvolutionResult
    """
    def k(name):
        return f"{prefix}.{name}" if prefix else name

    vals = {}
    for name, value in (("generations", generations), ("population", population), ("runs", runs), ("seed", seed),
                        ("confidence", confidence)):
        vals[name] = EVOLUTION_CONSTRAINTS[name].check(k(name), value)
    if vals["population"] < payoffs.seats:
        raise InputError(k("population"), f"must be at least the number of seats ({payoffs.seats}), "
                                          f"got {vals['population']}")
    w, mapping = check_selection(payoffs, selection, fitness_map, k("selection"), k("fitness"))
    x0 = check_shares(shares, payoffs.n_types, payoffs.labels, k("shares"))
    path = replicator(payoffs, x0, vals["generations"], w, mapping)
    N = vals["population"]
    rho = fixation_probabilities(payoffs, N, w, mapping)
    sim = None
    if vals["runs"] > 0:
        sim = simulate_fixation(payoffs, N, w, mapping, vals["runs"], vals["seed"], key, threads)
    st = stability(payoffs, N, w, mapping, vals["confidence"], rho)
    settings = {"generations": vals["generations"], "selection": w, "fitness": mapping, "population": N,
                "runs": vals["runs"], "seed": vals["seed"], "confidence": vals["confidence"],
                "initial_shares": x0.tolist(), "seats": payoffs.seats}
    return EvolutionResult(payoffs, path, rho, sim, vals["runs"], stationary_distribution(rho), st, settings)

