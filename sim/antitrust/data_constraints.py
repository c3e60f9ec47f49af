"""Constraints of the ``[data]`` table of observed market data (see :class:`sim.antitrust.calibration.MarketData`)."""

from __future__ import annotations

import numbers
from collections.abc import Sequence
from typing import Any

from sim.core.docs import doc_sections
from sim.core.errors import InputError
from sim.core.params import Constraint, PerFirm, Real
from sim.models.market import owning_firms

__all__ = ["Negative", "OneOrPerProduct", "OwnerMap"]


class Negative(Real):
    """A finite negative number: a price elasticity of demand (the usual sign)."""

    def __init__(self):
        super().__init__(None, 0, closed="neither")

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "a negative number (a price elasticity of demand is negative)"


class OneOrPerProduct(Constraint):
    """One value (observed for the reference product) or one value per product.

    Parameters
    ----------
    element : Real
        The constraint on each value.
    """

    def __init__(self, element: Real):
        self.element = element

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return f"{self.element.describe()}, or a list of them (one per product)"

    def check(self, key: str, value: Any, n: int | None = None):
        """The checked value.

        Parameters
        ----------
        key : str
            Key path of the value in error messages.
        value : object
        n : int, optional
            The number of products.

        Returns
        -------
        float or ndarray of shape (n_products,)
        """
        if isinstance(value, numbers.Real) and not isinstance(value, bool):
            return self.element.check(key, value)
        return PerFirm(self.element, broadcast=False).check(key, value, n)

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        return self.element.example_bad()


class OwnerMap(Constraint):
    """Firm number (1, 2, ...) of each product; checked in full by :class:`~sim.models.market.Market`."""

    @doc_sections(Constraint.describe)
    def describe(self) -> str:
        return "a list of firm numbers 1, 2, ..., one per product"

    def check(self, key: str, value: Any, n: int | None = None):
        """The checked owner map.

        Parameters
        ----------
        key : str
            Key path of the value in error messages.
        value : object
        n : int, optional
            The number of products.

        Returns
        -------
        int ndarray of shape (n_products,)
            The owning firm of each product, counted from 0.
        """
        if not isinstance(value, Sequence) or isinstance(value, str) or len(value) < 2:
            raise InputError(key, f"must be {self.describe()}, got {value!r}")
        return owning_firms(key, value, n)

    @doc_sections(Constraint.example_bad)
    def example_bad(self) -> Any:
        return [0, 1]
