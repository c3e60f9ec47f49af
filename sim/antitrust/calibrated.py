"""The result of a calibration: the calibrated market and how well it reproduces the observed data."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["REPRODUCTION_TOL", "Calibration"]

#: relative residual below which the calibrated model is said to reproduce the data
REPRODUCTION_TOL = 1e-8


@dataclass(frozen=True)
class Calibration:
    """A calibrated market and how well it reproduces the data.

    Parameters
    ----------
    market : Market
        The calibrated (pre-merger) market.
    demand, model : str
    conduct : str
        The conduct assumption, in words.
    identified_by : str
        What pinned down the price parameter, in words.
    parameters : dict
        Demand parameters of the calibrated model.
    costs : ndarray of shape (n_products,)
        Implied marginal costs.
    margins : ndarray of shape (n_products,)
        Implied price-cost margins ``(p - c) / p`` at the observed prices.
    elasticities : ndarray of shape (n_products, n_products) or None
        Own- and cross-price elasticities of demand at the observed point (row: the product whose
        quantity responds; column: the product whose price changes). None for a homogeneous good.
    market_elasticity : float
        Market (aggregate) price elasticity at the observed point.
    diversion : ndarray of shape (n_products, n_products) or None
        Diversion ratios: share of the sales product ``i`` (row) loses to a price rise that go to
        product ``j`` (column). None for a homogeneous good.
    observed : dict
        ``prices``, ``quantities``, ``shares`` (arrays of shape (n_products,)).
    equilibrium : dict
        The same quantities at the calibrated model's static Nash equilibrium.
    residuals : dict
        ``equilibrium - observed`` for prices, quantities and shares.
    max_relative_residual : float
        Largest of ``|model - observed| / observed`` over prices and quantities.
    reproduced : bool
        Whether that largest relative residual is at most :data:`REPRODUCTION_TOL`.
    fit : dict or None
        Over-identified input (one value per product): the input, observed and fitted values and
        the fit's residuals.
    assumptions : list of str
    data : dict
        The validated inputs.
    """

    market: Any
    demand: str
    model: str
    conduct: str
    identified_by: str
    parameters: dict
    costs: np.ndarray
    margins: np.ndarray
    elasticities: np.ndarray | None
    market_elasticity: float
    diversion: np.ndarray | None
    observed: dict
    equilibrium: dict
    residuals: dict
    max_relative_residual: float
    reproduced: bool
    fit: dict | None
    assumptions: list = field(default_factory=list)
    data: dict = field(default_factory=dict, repr=False)

    def to_dict(self) -> dict:
        """The calibration as plain JSON data (arrays as lists; the calibrated market as its settings).

        Returns
        -------
        dict
        """

        def arr(x):
            return None if x is None else np.asarray(x).tolist()

        return {
            "demand": self.demand, "model": self.model, "conduct": self.conduct,
            "identified_by": self.identified_by, "parameters": self.parameters,
            "costs": arr(self.costs), "margins": arr(self.margins), "elasticities": arr(self.elasticities),
            "market_elasticity": self.market_elasticity, "diversion": arr(self.diversion),
            "observed": {k: arr(v) for k, v in self.observed.items()},
            "equilibrium": {k: arr(v) for k, v in self.equilibrium.items()},
            "residuals": {k: arr(v) for k, v in self.residuals.items()},
            "max_relative_residual": self.max_relative_residual, "reproduced": self.reproduced,
            "reproduction_tolerance": REPRODUCTION_TOL,
            "fit": None if self.fit is None else {k: arr(v) if isinstance(v, np.ndarray) else v
                                                  for k, v in self.fit.items()},
            "assumptions": list(self.assumptions),
            "market": self.market.to_dict(),
        }
