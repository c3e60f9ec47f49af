"""Fitness and the discrete replicator dynamics on a table of payoffs.

Payoff ``p`` becomes fitness by ``1 - w + w p`` (``"linear"``, Nowak, Sasaki, Taylor and Fudenberg, 2004; it must
stay positive) or ``exp(w p)`` (``"exponential"``, Traulsen, Shoresh and Nowak, 2008, "Analytical results for
individual and group selection of any intensity", Bull. Math. Biol. 70), ``w`` the selection intensity. The map is
applied to the expected payoff (the linear one commutes with expectation).

Discrete replicator dynamics (Taylor and Jonker, 1978; Weibull, 1995, "Evolutionary Game Theory", section 4.2):
``x_i(t+1) = x_i(t) F_i(x(t)) / sum_j x_j(t) F_j(x(t))``. Rest points are those of the continuous dynamics (every
type present earns the mean payoff).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real
from sim.tournament.payoffs import PayoffTable

__all__ = ["FITNESS_MAPS", "ReplicatorPath", "check_selection", "check_shares", "fitness", "replicator"]

FITNESS_MAPS = ("linear", "exponential")


def fitness(payoff, selection: float, mapping: str = "linear"):
    """Fitness of a payoff: ``1 - w + w p`` (linear) or ``exp(w p)`` (exponential).

    Parameters
    ----------
    payoff : float or array_like
    selection : float
        The selection intensity ``w``.
    mapping : {"linear", "exponential"}

    Returns
    -------
    ndarray
        Of the shape of ``payoff``.
    """
    p = np.asarray(payoff, dtype=float)
    if mapping == "linear":
        return 1.0 - selection + selection * p
    return np.exp(selection * p)


def check_selection(table: PayoffTable, selection, mapping, key: str = "selection",
                    map_key: str = "fitness") -> tuple[float, str]:
    """Validate a selection intensity and fitness map against a table's payoffs (linear fitness must stay positive).

    Parameters
    ----------
    table : PayoffTable
    selection : float
    mapping : str
    key, map_key : str
        Key paths of the two settings, for errors.

    Returns
    -------
    selection : float
    mapping : str
    """
    mapping = Options(*FITNESS_MAPS).check(map_key, mapping)
    w = Real(0, None, closed="neither").check(key, selection)
    if mapping == "linear":
        w = Real(0, 1, closed="right").check(key, w)
        lo = float(np.nanmin(table.payoff))
        if not 1.0 - w + w * lo > 0:
            top = 1.0 / (1.0 - lo)
            raise InputError(key, f"the fitness 1 - w + w * payoff must stay positive, and the lowest payoff is "
                                  f"{lo:.6g}: w must be below {top:.6g} (or use {map_key} = 'exponential'), got {w:g}")
    return w, mapping


def check_shares(shares, E: int, labels, key: str = "shares") -> np.ndarray:
    """Validate initial population shares (normalised to sum to one).

    Parameters
    ----------
    shares : array_like of shape (E,), dict of label to share, or None
        None: equal shares.
    E : int
    labels : sequence of str
    key : str
        Key path of the setting, for errors.

    Returns
    -------
    ndarray of shape (E,)
    """
    if shares is None:
        return np.full(E, 1.0 / E)
    if isinstance(shares, dict):
        unknown = [k for k in shares if k not in labels]
        if unknown:
            raise InputError(f"{key}.{unknown[0]}", f"is not an entrant; entrants: {', '.join(labels)}")
        shares = [shares.get(lab, 0.0) for lab in labels]
    x = np.asarray(shares, dtype=float) if not isinstance(shares, str) else np.array([np.nan])
    if x.shape != (E,) or not np.all(np.isfinite(x)) or np.any(x < 0):
        raise InputError(key, f"must be {E} non-negative numbers (one per entrant), got {shares!r}")
    if not x.sum() > 0:
        raise InputError(key, "at least one share must be positive")
    return x / x.sum()


@dataclass(frozen=True, eq=False)
class ReplicatorPath:
    """Population shares over generations of the discrete replicator dynamics.

    Parameters
    ----------
    shares : ndarray of shape (generations + 1, E)
        Row 0 the initial shares.
    mean_payoff : ndarray of shape (generations + 1,)
        Population-average payoff ``x . f(x)``.
    payoffs : ndarray of shape (generations + 1, E)
        Payoff of each type against the population.
    labels : tuple of str
    settings : dict
    """

    shares: np.ndarray
    mean_payoff: np.ndarray
    payoffs: np.ndarray
    labels: tuple
    settings: dict

    @property
    def final(self) -> np.ndarray:
        """The shares after the last generation, shape (E,)."""
        return self.shares[-1]

    @property
    def last_change(self) -> float:
        """Largest change of a share in the last generation (0 at a rest point; nan without a generation)."""
        if self.shares.shape[0] < 2:
            return math.nan
        return float(np.abs(self.shares[-1] - self.shares[-2]).max())

    def thinned(self, max_points: int) -> np.ndarray:
        """Generations kept when the path is drawn with at most ``max_points`` points (evenly spaced, first and
        last included).

        Parameters
        ----------
        max_points : int

        Returns
        -------
        int ndarray of shape (points,)
        """
        G = self.shares.shape[0]
        return np.unique(np.round(np.linspace(0, G - 1, min(G, max_points))).astype(int))

    def to_dict(self, max_points: int = 500) -> dict:
        """Plain data: the settings and the path at no more than ``max_points`` generations.

        Parameters
        ----------
        max_points : int

        Returns
        -------
        dict
        """
        idx = self.thinned(max_points)
        return {"settings": self.settings, "labels": list(self.labels), "generation": idx.tolist(),
                "shares": self.shares[idx].tolist(), "mean_payoff": self.mean_payoff[idx].tolist(),
                "final": self.final.tolist(), "last_change": self.last_change}


def replicator(payoffs: PayoffTable, shares=None, generations: int = 1000, selection: float = 0.1,
               fitness_map: str = "linear") -> ReplicatorPath:
    """Discrete replicator dynamics from ``shares`` (default: equal shares).

    Parameters
    ----------
    payoffs : PayoffTable
    shares : array_like of shape (E,) or dict label -> share, optional
        Initial shares (normalised to sum to one).
    generations : int
    selection : float
        Selection intensity ``w`` of the fitness map.
    fitness_map : {"linear", "exponential"}

    Returns
    -------
    ReplicatorPath
    """
    E = payoffs.n_types
    x = check_shares(shares, E, payoffs.labels)
    G = Integer(0, 10_000_000).check("generations", generations)
    w, mapping = check_selection(payoffs, selection, fitness_map, "selection", "fitness")
    out = np.empty((G + 1, E))
    pay = np.empty((G + 1, E))
    mean = np.empty(G + 1)
    for t in range(G + 1):
        f = payoffs.against(x)
        out[t] = x
        pay[t] = f
        mean[t] = float(x @ f)
        if t == G:
            break
        F = fitness(f, w, mapping)
        y = x * F
        x = y / y.sum()
    return ReplicatorPath(out, mean, pay, payoffs.labels,
                          {"generations": G, "selection": w, "fitness": mapping, "initial": out[0].tolist()})
