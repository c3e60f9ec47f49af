"""Codes of the stage games the numba core (:mod:`sim.models.stagecore`) evaluates.

The kernels cannot call Python objects, so a market reaches them as a code and a few arrays. Each code
is one (demand, mode of competition) pair whose evaluation is written out in
:func:`sim.models.stagecore.evaluate`; a demand system names the codes of its pairs in its
``stage_codes`` table (:class:`sim.models.demand_spec.DemandSpec`), and a system whose evaluation
equals an existing one up to its parameters (the same formula, written another way) reuses that code
with its own ``scalars`` and ``vector``. This module imports nothing, so the models can name codes
without loading numba.
"""

from __future__ import annotations

__all__ = [
    "CODE_CAPACITY_BERTRAND",
    "CODE_DIFF_BERTRAND",
    "CODE_DIFF_COURNOT",
    "CODE_ISO_COURNOT",
    "CODE_LINEAR_BERTRAND",
    "CODE_LINEAR_COURNOT",
    "CODE_LOGIT_BERTRAND",
]

#: homogeneous good, ``P(Q) = max(0, scalars[0] - scalars[1] Q)``, quantities
CODE_LINEAR_COURNOT = 0
#: homogeneous good, the same demand, prices (the lowest price sells; ties share by ``vector``)
CODE_LINEAR_BERTRAND = 1
#: differentiated linear demand (intercepts ``vector``, slope ``scalars[0]``, substitution ``scalars[1]``),
#: quantities
CODE_DIFF_COURNOT = 2
#: the same demand, prices (direct demand with ``q >= 0`` by complementarity pivoting)
CODE_DIFF_BERTRAND = 3
#: logit with an outside good (qualities ``vector``; outside, mu, size in ``scalars[:3]``), prices
CODE_LOGIT_BERTRAND = 4
#: homogeneous good, ``P(Q) = scalars[0] Q^(-1/scalars[1])``, quantities
CODE_ISO_COURNOT = 5
#: homogeneous good sold by firms with capacities, prices (:mod:`sim.models.capacity_stage`): reservation price,
#: market size, demand code and rationing code in ``scalars``, tie-sharing weights in ``vector``
CODE_CAPACITY_BERTRAND = 6
