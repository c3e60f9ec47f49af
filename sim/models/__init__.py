"""Markets: demand systems, costs and capacities, monitoring, and the numba stage core.

The names a plugin needs to add a demand model are gathered here (see :mod:`sim.models.demand`).
"""

from sim.models.demand import (
    DEMAND_TYPES,
    Demand,
    DemandSpec,
    DifferentiatedDemand,
    IsoelasticDemand,
    LinearDemand,
    LogitDemand,
    register_demand,
)

__all__ = [
    "DEMAND_TYPES",
    "Demand",
    "DemandSpec",
    "DifferentiatedDemand",
    "IsoelasticDemand",
    "LinearDemand",
    "LogitDemand",
    "register_demand",
]
