"""Demand systems: the shipped models, the interface every model implements, and the registry.

A demand system maps actions to quantities and prices. It knows nothing about costs or firms'
objectives: :class:`sim.models.market.Market` combines a demand system with marginal costs, capacities
and a mode of competition.

Two classes make one model, as :class:`~sim.models.market.Market` and
:class:`~sim.models.market.MarketSpec` make one market:

* a :class:`Demand` subclass holds the parameters a user writes (store-only constructor, constraints
  declared as data) and validates them in :meth:`Demand.spec`;
* a :class:`~sim.models.demand_spec.DemandSpec` subclass is the validated numeric system for a given
  number of products. It implements what the theory (:mod:`sim.theory`) and the numba stage core
  (:mod:`sim.models.stagecore`) need: demand and inverse demand, consumer surplus, best responses where a
  closed form exists, the Nash starting point and joint-profit maximum where it has a special method,
  the price signal the trigger-price equilibrium observes, and its stage-core code and parameter
  arrays (:mod:`sim.models.demand_spec` declares each with its contract).

No code outside this layer asks a model for its name. A capability a model does not implement raises
one :class:`~sim.core.errors.InputError` naming the model and the capability (key ``market.demand``):
the theory never falls through to another model's formula. Optional methods return None to let the
theory use its generic method (a best response by grid and Brent search, a neutral starting point),
and each says so in its docstring.

The base classes live in :mod:`sim.models.demand_base` and :mod:`sim.models.demand_spec`, the shipped
models in their own modules (:mod:`sim.models.linear`, :mod:`sim.models.differentiated`,
:mod:`sim.models.logit`, :mod:`sim.models.isoelastic`). This module gathers them: importing it (as
every user of markets does) registers the shipped models with :func:`register_demand`, as a user's
plugin registers its own.
"""

from __future__ import annotations

import numpy as np

from sim.models.demand_base import DEMAND_TYPES, MAX_MAGNITUDE, Demand, register_demand
from sim.models.demand_spec import DemandSpec
from sim.models.differentiated import DifferentiatedDemand
from sim.models.isoelastic import IsoelasticDemand
from sim.models.linear import LinearDemand
from sim.models.logit import LogitDemand

__all__ = [
    "DEMAND_TYPES",
    "MAX_MAGNITUDE",
    "Demand",
    "DemandSpec",
    "DifferentiatedDemand",
    "IsoelasticDemand",
    "LinearDemand",
    "LogitDemand",
    "consumer_surplus",
    "direct_demand",
    "inverse_demand",
    "register_demand",
]

# the order of messages that list the models
for _cls in (LinearDemand, DifferentiatedDemand, LogitDemand, IsoelasticDemand):
    register_demand(_cls)


# --------------------------------------------------------------------------------------------------
# The numpy definitions as functions of a system
# --------------------------------------------------------------------------------------------------


def inverse_demand(s: DemandSpec, q) -> np.ndarray:
    """Prices of each product given quantities (:meth:`DemandSpec.inverse_demand`).

    Parameters
    ----------
    s : DemandSpec
    q : array_like of shape (..., n_products)

    Returns
    -------
    ndarray of shape (..., n_products)
    """
    return s.inverse_demand(q)


def direct_demand(s: DemandSpec, p) -> np.ndarray:
    """Quantities sold given prices (:meth:`DemandSpec.direct_demand`).

    Parameters
    ----------
    s : DemandSpec
    p : array_like of shape (..., n_products)

    Returns
    -------
    ndarray of shape (..., n_products)
    """
    return s.direct_demand(p)


def consumer_surplus(s: DemandSpec, q, p) -> np.ndarray:
    """Consumer surplus at quantities ``q`` and prices ``p`` (:meth:`DemandSpec.consumer_surplus`).

    Parameters
    ----------
    s : DemandSpec
    q, p : array_like of shape (..., n_products)

    Returns
    -------
    ndarray of shape (...,)
    """
    return s.consumer_surplus(q, p)
