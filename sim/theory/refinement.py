"""How the answers of the payoff-set analysis move as the action grid is refined.

A finite grid is a modelling device, not a feature of the market: firms can choose any quantity or
price. :func:`grid_refinement` recomputes the practitioner's numbers -- worst equilibrium payoffs,
best joint and symmetric profits, the lowest discount factor sustaining the agreement under any
punishment and under the named schemes -- on grids of increasing size, so that a reader can see
which conclusions are settled and which still move with the discretisation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..core.errors import InputError
from ..core.params import Integer, Real
from ._plain import array_from_plain, number, plain, plain_number
from .discretize import DEFAULT_MAX_BYTES, discretize
from .payoff_sets import equilibrium_payoffs
from .practice import lowest_threshold, named_thresholds, sustainable_frontier

__all__ = ["GridRefinement", "RefinementRow", "grid_refinement"]


@dataclass(frozen=True, eq=False)
class RefinementRow:
    """The answers on one grid.

    Attributes
    ----------
    n_actions : tuple of int
        Actions per firm.
    status : str
        Status of the payoff set at ``delta`` (see :data:`sim.theory.payoff_sets.STATUSES`).
    accuracy : float
        Hausdorff distance between its inner and outer sets.
    worst : ndarray of shape (n_firms, 2)
        Each firm's worst equilibrium payoff, low and high.
    joint, symmetric : tuple of float
        Best joint profit and best symmetric payoff, low and high.
    threshold : tuple of float
        Lowest discount factor sustaining the agreement under any punishment, low and high
        (``nan`` when not computed).
    grim, stick_carrot : float
        Named-scheme thresholds on the same grid.
    """

    n_actions: tuple
    status: str
    accuracy: float
    worst: np.ndarray
    joint: tuple
    symmetric: tuple
    threshold: tuple
    grim: float
    stick_carrot: float

    def to_dict(self) -> dict:
        """Plain data that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {"n_actions": list(self.n_actions), "status": self.status, "accuracy": plain_number(self.accuracy),
                "worst": plain(self.worst), "joint": plain(self.joint), "symmetric": plain(self.symmetric),
                "threshold": plain(self.threshold), "grim": plain_number(self.grim),
                "stick_carrot": plain_number(self.stick_carrot)}

    @classmethod
    def from_dict(cls, data: dict) -> RefinementRow:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        RefinementRow
        """
        return cls(tuple(int(k) for k in data["n_actions"]), data["status"], number(data["accuracy"], math.inf),
                   array_from_plain(data["worst"], 2), tuple(number(x) for x in data["joint"]),
                   tuple(number(x) for x in data["symmetric"]), tuple(number(x) for x in data["threshold"]),
                   number(data["grim"]), number(data["stick_carrot"]))


@dataclass(frozen=True, eq=False)
class GridRefinement:
    """A table of the payoff-set answers over grid sizes.

    Attributes
    ----------
    delta : float
    agreement : str
    rows : tuple of RefinementRow
        One per grid, coarsest first.
    """

    delta: float
    agreement: str
    rows: tuple

    def to_dict(self) -> dict:
        """Plain data that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {"delta": self.delta, "agreement": self.agreement, "rows": [r.to_dict() for r in self.rows]}

    @classmethod
    def from_dict(cls, data: dict) -> GridRefinement:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        GridRefinement
        """
        return cls(float(data["delta"]), data["agreement"], tuple(RefinementRow.from_dict(r) for r in data["rows"]))


def grid_refinement(market, delta: float, n_actions=(8, 16, 32), agreement: str = "joint", actions=None,
                    thresholds: bool = True, method: str = "auto", directions=None, tol: float = 1e-8,
                    threshold_tol: float = 1e-3, max_bytes: float = DEFAULT_MAX_BYTES) -> GridRefinement:
    """The payoff-set answers on grids of increasing size.

    Parameters
    ----------
    market : Market or MarketSpec
    delta : float in (0, 1)
    n_actions : sequence of int
        Actions per firm of each grid (each at least 2; the key levels of
        :func:`~sim.theory.discretize.discretize` are on every grid).
    agreement, actions :
        The agreed collusive outcome (see :func:`sim.equilibrium.collusive_outcome`).
    thresholds : bool
        Also bisect for the lowest discount factor sustaining the agreement (the slow part).
    method, directions, tol :
        Passed to :func:`~sim.theory.payoff_sets.equilibrium_payoffs`.
    threshold_tol : float
        Passed to :func:`~sim.theory.practice.lowest_threshold` as ``tol``.
    max_bytes : float
        Memory allowed per grid, checked for every grid before any work.

    Returns
    -------
    GridRefinement
    """
    delta = Real(0, 1, closed="neither").check("payoff_set.delta", delta)
    sizes = list(n_actions)
    if not sizes:
        raise InputError("payoff_set.n_actions", "give at least one grid size")
    for k in sizes:
        Integer(2, 100_000).check("payoff_set.n_actions", k)
    games = [discretize(market, k, agreement=agreement, actions=actions, max_bytes=max_bytes) for k in sizes]
    rows = []
    for g in games:
        res = equilibrium_payoffs(g, delta, method=method, directions=directions, tol=tol, max_bytes=max_bytes)
        fr = sustainable_frontier(res)
        named = named_thresholds(g)
        thr = (math.nan, math.nan)
        if thresholds:
            t = lowest_threshold(g, tol=threshold_tol, method=method, directions=directions, set_tol=tol)
            thr = (t.low, t.high)
        worst = np.stack([res.worst_outer, res.worst_inner], axis=1)
        rows.append(RefinementRow(tuple(g.shape), res.status, res.accuracy, worst, fr.joint, fr.symmetric, thr,
                                  named["grim"], named["stick_carrot"]))
    return GridRefinement(delta, agreement, tuple(rows))
