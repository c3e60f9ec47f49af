"""The parameter side of a demand system: :class:`Demand`, and the registry of models by name.

A :class:`Demand` subclass holds the parameters a user writes (store-only constructor, constraints
declared as data) and validates them in :meth:`Demand.spec`, which returns the numeric system
(:class:`~sim.models.demand_spec.DemandSpec`). :func:`register_demand` makes a model available by name
to experiment files; :mod:`sim.models.demand` registers the shipped ones, a plugin its own.
"""

from __future__ import annotations

import numpy as np

from sim.core.params import Parametrized, PerFirm, optional
from sim.models.demand_spec import DemandSpec

__all__ = ["DEMAND_TYPES", "MAX_MAGNITUDE", "Demand", "register_demand"]

#: Largest absolute value accepted for prices, costs, intercepts, slopes and sizes: far beyond any
#: market in any currency unit, and small enough that squares and products stay finite.
MAX_MAGNITUDE = 1e9

#: name -> Demand subclass, for experiment files and the command line (see :func:`register_demand`)
DEMAND_TYPES: dict[str, type[Demand]] = {}


def register_demand(cls: type[Demand]) -> type[Demand]:
    """Make a demand model available by its name (``demand = "name"`` in a ``[market]`` table).

    Parameters
    ----------
    cls : type
        A :class:`Demand` subclass with a non-empty ``name``, the modes of competition it supports in
        ``models`` and a constraint for every constructor argument.

    Returns
    -------
    type
        ``cls`` itself, so that the function can decorate the class.

    Raises
    ------
    ValueError
        ``cls`` is not a Demand subclass, has no name or no mode of competition, or its name is taken
        by another class.
    """
    if not (isinstance(cls, type) and issubclass(cls, Demand)):
        raise ValueError(f"a demand model must subclass sim.models.demand.Demand, got {cls!r}")
    if not cls.name or not cls.name.isidentifier():
        raise ValueError(f"{cls.__name__}.name must be a plain word (letters, digits, underscores), got {cls.name!r}")
    if not cls.models or not set(cls.models) <= {"cournot", "bertrand"}:
        raise ValueError(f"{cls.__name__}.models must list 'cournot' and/or 'bertrand', got {cls.models!r}")
    known = DEMAND_TYPES.get(cls.name)
    if known is not None and known is not cls:
        raise ValueError(f"the demand name {cls.name!r} is taken by {known.__module__}.{known.__qualname__}")
    DEMAND_TYPES[cls.name] = cls
    return cls


class Demand(Parametrized):
    """Base class of the parameter objects of demand systems.

    Subclasses set the class attributes below, declare ``_constraints`` (one constraint per
    constructor argument; per-product values with :class:`~sim.core.params.PerFirm`), store their
    arguments in ``__init__`` and implement :meth:`spec`.

    Attributes
    ----------
    name : str
        Name used in experiment files and on the command line.
    models : tuple of str
        Modes of competition the system supports, the default first: ``"cournot"``, ``"bertrand"``.
    homogeneous : bool
        Whether every firm sells the same good (one market price; no multi-product firms).
    """

    name: str = ""
    models: tuple[str, ...] = ()
    homogeneous: bool = False

    def spec(self, n_firms: int, prefix: str = "market") -> DemandSpec:  # pragma: no cover - interface
        """Validate the parameters for ``n_firms`` products and return the numeric system.

        Parameters
        ----------
        n_firms : int
            Number of products (one per firm without multi-product firms).
        prefix : str
            Key path of the market in error messages.

        Returns
        -------
        DemandSpec
        """
        raise NotImplementedError(f"{type(self).__name__} must implement spec(n_firms, prefix)")

    def symmetric_version(self, n_products: int, prefix: str = "market") -> Demand:
        """The same demand with every product alike: per-product values replaced by their mean.

        Per-product parameters that must be given as a list (weights, such as the split of a
        homogeneous good) are dropped to their default.

        Parameters
        ----------
        n_products : int
        prefix : str
            Key path of the market in error messages.

        Returns
        -------
        Demand
        """
        p = self._check_params(prefix, n_products)
        changes = {}
        for name, c in self._constraints.items():
            inner = c.inner if isinstance(c, optional) else c
            if isinstance(inner, PerFirm) and p[name] is not None:
                changes[name] = float(np.mean(p[name])) if inner.broadcast else None
        return self.clone(**changes)

    def merge_firms(self, ms, merging, firm_map: np.ndarray, n_after: int) -> Demand:
        """The demand after the firms ``merging`` of a homogeneous good become one firm.

        Only parameters given per firm (not per product) change; the default keeps every parameter.

        Parameters
        ----------
        ms : MarketSpec
            The market before the merger.
        merging : sequence of int
            The merging firms (0-based).
        firm_map : ndarray of int, shape (n_firms,)
            The firm after the merger of each firm before it.
        n_after : int
            Number of firms after the merger.

        Returns
        -------
        Demand
        """
        return self.clone()
