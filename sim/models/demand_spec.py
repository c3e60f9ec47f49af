"""The numeric side of a demand system: :class:`DemandSpec`, the interface the theory and the kernels use.

Every method a model may implement is declared here with its contract. Required capabilities raise
the error of :func:`missing` (an :class:`~sim.core.errors.InputError` at ``market.demand`` naming the
model and what it lacks); optional ones return None, and the theory then uses its generic method.
:meth:`DemandSpec.provides` tells whether a model implements a method, so that a computation can refuse
a model before it starts.
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.errors import InputError

__all__ = ["DemandSpec", "merit_order_quantities", "missing", "profit_with"]


def missing(kind: str, what: str, needs: str, hint: str = "") -> InputError:
    """The error of a model that lacks a capability (``market.demand``, naming both).

    Parameters
    ----------
    kind : str
        The model's name.
    what : str
        The computation that needs the capability ("the trigger-price equilibrium").
    needs : str
        The capability ("the price distribution").
    hint : str
        What the user can do instead (appended after a semicolon), or "".

    Returns
    -------
    InputError
    """
    message = f"{what} needs {needs} of the demand model {kind!r}, which it does not provide"
    return InputError("market.demand", f"{message}; {hint}" if hint else message)


class DemandSpec:
    """Validated numeric form of a demand system for a given number of products (base class).

    Parameters
    ----------
    demand_type : type
        The :class:`Demand` subclass the system comes from (its name, modes and homogeneity).
    scalars : ndarray of shape (4,)
        Scalar parameters in the layout of the system's stage-core code.
    vector : ndarray of shape (n_products,)
        The per-product parameter of that layout (intercepts, qualities or tie-sharing weights).

    Attributes
    ----------
    stage_codes : dict of str to int
        Code of :mod:`sim.models.codes` for each supported mode of competition: the pair the numba
        stage core evaluates with ``scalars`` and ``vector``. Empty when the kernels cannot evaluate
        the system (the theory still can).
    price_reaches_zero : bool
        Whether inverse demand reaches a zero price at a finite quantity and stays there (linear
        demands): a punishment can then flood the market beyond that quantity.
    linear_homogeneous : bool
        Whether the good is homogeneous with a linear inverse demand, so that the closed forms of linear
        Cournot apply (partial cartels produce with their cheapest members).
    """

    stage_codes: dict[str, int] = {}
    price_reaches_zero: bool = False
    linear_homogeneous: bool = False

    def __init__(self, demand_type: type, scalars, vector):
        self.demand_type = demand_type
        self.scalars = scalars
        self.vector = vector

    def __repr__(self) -> str:
        return f"{type(self).__name__}(kind={self.kind!r}, scalars={self.scalars!r}, vector={self.vector!r})"

    # ---- what the model is --------------------------------------------------------------------
    @property
    def kind(self) -> str:
        """The model's name (as in experiment files)."""
        return self.demand_type.name

    @property
    def homogeneous(self) -> bool:
        """Whether every firm sells the same good."""
        return bool(self.demand_type.homogeneous)

    @property
    def n_products(self) -> int:
        """Number of products."""
        return int(np.shape(self.vector)[0])

    def provides(self, *methods: str) -> bool:
        """Whether the system implements every one of the named methods (rather than the base class's
        error or default).

        Parameters
        ----------
        *methods : str
            Method names of :class:`DemandSpec`.

        Returns
        -------
        bool
        """
        return all(getattr(type(self), m) is not getattr(DemandSpec, m) for m in methods)

    def missing(self, what: str, needs: str, hint: str = "") -> InputError:
        """The error for a capability this model lacks (see :func:`missing`).

        Parameters
        ----------
        what : str
            The computation that needs it.
        needs : str
            The capability.
        hint : str
            What the user can do instead, or "".

        Returns
        -------
        InputError
        """
        return missing(self.kind, what, needs, hint)

    def stage_code(self, model: str) -> int:
        """The stage-core code of this system under a mode of competition.

        Parameters
        ----------
        model : {"cournot", "bertrand"}

        Returns
        -------
        int
        """
        code = self.stage_codes.get(model)
        if code is None:
            raise self.missing(f"the simulation kernels ({model} competition)", "a stage-core code "
                               "(sim/models/stagecore.py)")
        return int(code)

    def check_market(self, model: str, cost: np.ndarray, prefix: str) -> None:
        """Refuse costs or a mode of competition the system cannot work with (default: accept).

        Parameters
        ----------
        model : {"cournot", "bertrand"}
        cost : ndarray of shape (n_products,)
        prefix : str
            Key path of the market in error messages.
        """

    # ---- evaluation -------------------------------------------------------------------------
    def inverse_demand(self, q) -> np.ndarray:
        """Price of each product given quantities (quantity competition).

        Parameters
        ----------
        q : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (..., n_products)
        """
        raise self.missing("quantity competition", "the inverse demand")

    def direct_demand(self, p) -> np.ndarray:
        """Quantity sold of each product given prices (price competition).

        Parameters
        ----------
        p : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (..., n_products)
        """
        raise self.missing("price competition", "the direct demand")

    def consumer_surplus(self, q, p) -> np.ndarray:
        """Consumer surplus at quantities ``q`` and prices ``p``.

        Parameters
        ----------
        q, p : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (...,)
        """
        raise self.missing("consumer surplus", "its consumer surplus")

    @property
    def choke_price(self) -> float:
        """Price at which demand vanishes (homogeneous goods under price competition: the scale of the
        smallest price step)."""
        raise self.missing("homogeneous-good price competition", "the choke price")

    def prices_for_quantities(self, q) -> np.ndarray:
        """Prices at which the products sell the quantities ``q`` (inverse of :meth:`direct_demand`).

        Parameters
        ----------
        q : ndarray of shape (..., n_products)

        Returns
        -------
        ndarray of shape (..., n_products)
        """
        raise self.missing("an agreement on quantities under price competition", "the prices of given quantities")

    def price_signal(self, Q) -> np.ndarray:
        """Level of the market price a homogeneous good fetches at total quantity ``Q`` before the
        demand shock.

        The simulation applies a shock ``theta`` to the price under quantity competition, so the price
        signal of a period is ``theta * price_signal(Q)`` and its distribution under a shock with CDF
        ``F`` is ``Pr(signal < x) = F(x / price_signal(Q))``; the trigger-price equilibrium
        (:mod:`sim.theory.trigger_price`) is built on that distribution.

        Parameters
        ----------
        Q : float or ndarray
            Total quantity.

        Returns
        -------
        ndarray of the shape of ``Q``
        """
        raise self.missing("the trigger-price equilibrium", "the price distribution")

    def price_signal_slope(self, Q) -> np.ndarray:
        """Derivative of :meth:`price_signal` with respect to the total quantity.

        Parameters
        ----------
        Q : float or ndarray

        Returns
        -------
        ndarray of the shape of ``Q``
        """
        raise self.missing("the trigger-price equilibrium", "the slope of the price distribution")

    # ---- data the generic solvers need --------------------------------------------------------
    def action_upper(self, ms) -> np.ndarray:
        """Upper end of the interval each product's action is searched in, before capacities.

        Quantity competition: a quantity beyond which extra output cannot raise the firm's profit.
        Price competition: a price at which the product sells nothing, or one above every candidate
        optimum.

        Parameters
        ----------
        ms : MarketSpec

        Returns
        -------
        ndarray of shape (n_products,)
        """
        raise self.missing("the equilibrium solver", "the range of each product's action")

    def own_slope(self, ms, A: np.ndarray, q: np.ndarray, p: np.ndarray) -> np.ndarray:
        """Derivative of each product's price (quantity competition) or quantity (price competition)
        with respect to its own action, the other actions fixed.

        The generic best response (:mod:`sim.theory.best_response`) of a model without a
        :meth:`best_response` of its own needs it: a search on profit values alone finds the maximiser
        only to about the square root of machine precision, the first-order condition to machine
        precision.

        Parameters
        ----------
        ms : MarketSpec
        A : ndarray of shape (n_rows, n_products)
            Action profiles.
        q, p : ndarray of shape (n_rows, n_products)
            Their quantities and prices.

        Returns
        -------
        ndarray of shape (n_rows, n_products)
        """
        raise self.missing("the equilibrium solver", "a best response, or the slope of demand in a product's own "
                           "action")

    def flooding_quantity(self, ms, hi: np.ndarray) -> float:
        """A quantity per rival with which rivals hold a firm to its minmax profit (quantity
        competition): twice the largest action bound by default. ``inf`` means no finite quantity
        does, and the firm's profit only tends to zero as the rivals' output grows.

        Parameters
        ----------
        ms : MarketSpec
        hi : ndarray of shape (n_products,)
            The action bounds (:meth:`MarketSpec.action_bounds`).

        Returns
        -------
        float
        """
        return hi.max() * 2

    # ---- closed forms the theory uses where the model has them (None: the generic method) ----
    def best_response(self, ms, i: int, A: np.ndarray):
        """Best response of product ``i``, whose owner sells nothing else, in each row of ``A``.

        Parameters
        ----------
        ms : MarketSpec
        i : int
        A : ndarray of shape (n_rows, n_products)

        Returns
        -------
        tuple of ndarray of shape (n_rows,) or None
            The product's action and its profit; None to use the generic search.
        """
        return None

    def best_response_multi(self, ms, i: int, own: np.ndarray, row: np.ndarray):
        """Best response of multi-product firm ``i`` setting the actions of its products ``own`` jointly.

        Parameters
        ----------
        ms : MarketSpec
        i : int
        own : ndarray of int
        row : ndarray of shape (n_products,)

        Returns
        -------
        ndarray of shape (n_products,)
            ``row`` with the firm's products at its best response.
        """
        raise self.missing("multi-product firms", "the joint best response of a firm's products")

    def nash_equilibrium(self, ms):
        """A static Nash equilibrium the model knows exactly (no certification needed), or None.

        Parameters
        ----------
        ms : MarketSpec

        Returns
        -------
        ndarray of shape (n_products,) or None
        """
        return None

    def nash_start(self, ms):
        """Closed-form equilibrium candidate that starts (and often ends) the best-response iteration,
        or None for the generic start.

        Parameters
        ----------
        ms : MarketSpec

        Returns
        -------
        ndarray of shape (n_products,) or None
        """
        return None

    def joint_maximum(self, ms):
        """Actions that maximise the sum of profits, or None if the model has no method for it.

        The default handles a homogeneous good under quantity competition by the merit order
        (:func:`merit_order_quantities`) from :meth:`marginal_revenue` and
        :meth:`quantity_at_marginal_revenue`.

        Parameters
        ----------
        ms : MarketSpec

        Returns
        -------
        ndarray of shape (n_products,) or None
        """
        if self.homogeneous and ms.quantity_setting:
            return merit_order_quantities(ms, self.marginal_revenue, self.quantity_at_marginal_revenue)
        return None

    def marginal_revenue(self, Q: float) -> float:
        """Marginal revenue of a homogeneous good at total quantity ``Q``.

        Parameters
        ----------
        Q : float

        Returns
        -------
        float
        """
        raise self.missing("the joint-profit maximum", "the marginal revenue")

    def quantity_at_marginal_revenue(self, m: float) -> float:
        """Total quantity at which marginal revenue equals ``m`` (inverse of :meth:`marginal_revenue`).

        Parameters
        ----------
        m : float

        Returns
        -------
        float
        """
        raise self.missing("the joint-profit maximum", "the quantity at a given marginal revenue")

    def symmetric_maximum(self, ms):
        """Best common action where the model knows it exactly, or None for the generic search.

        Parameters
        ----------
        ms : MarketSpec

        Returns
        -------
        ndarray of shape (n_products,) or None
        """
        return None

    def joint_gradient(self, ms, a: np.ndarray, q: np.ndarray, p: np.ndarray):
        """Gradient of the sum of profits with respect to the actions at profile ``a``, or None (the
        searches then stop at the bracketing precision instead of solving the first-order condition).

        Parameters
        ----------
        ms : MarketSpec
        a, q, p : ndarray of shape (n_products,)
            The profile, and its quantities and prices.

        Returns
        -------
        ndarray of shape (n_products,) or None
            Under quantity competition the theory zeroes entries at capacity.
        """
        return None

    def proportional_limit(self, qn: np.ndarray) -> float:
        """Largest scale ``lam`` for which quantities ``lam * qn`` can be sold (price competition).

        Parameters
        ----------
        qn : ndarray of shape (n_products,)

        Returns
        -------
        float
        """
        return math.inf

    def proportional_prices(self, nash_prices: np.ndarray, qn: np.ndarray, lam: np.ndarray) -> np.ndarray:
        """Prices at which the products sell ``lam * qn`` (price competition; default:
        :meth:`prices_for_quantities`). A system overrides it where the static-Nash prices give the path
        more accurately than the quantities (quantities that underflow to zero, for example).

        Parameters
        ----------
        nash_prices : ndarray of shape (n_products,)
            The static-Nash prices, at which the products sell ``qn``.
        qn : ndarray of shape (n_products,)
            The static-Nash quantities.
        lam : ndarray of shape (n_rows,)
            Scales of the quantities.

        Returns
        -------
        ndarray of shape (n_rows, n_products)
        """
        return self.prices_for_quantities(lam[:, None] * qn[None, :])

    def proportional_slope(self, qn: np.ndarray, lam: float):
        """Derivative of ``prices_for_quantities(lam * qn)`` with respect to ``lam``, or None.

        Parameters
        ----------
        qn : ndarray of shape (n_products,)
        lam : float

        Returns
        -------
        ndarray of shape (n_products,) or None
        """
        return None


# --------------------------------------------------------------------------------------------------
# Helpers several models share
# --------------------------------------------------------------------------------------------------


def profit_with(ms, i: int, A: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Profit of product ``i`` in each row of ``A`` when it plays ``x`` instead.

    Parameters
    ----------
    ms : MarketSpec
    i : int
    A : ndarray of shape (n_rows, n_products)
    x : ndarray of shape (n_rows,)

    Returns
    -------
    ndarray of shape (n_rows,)
    """
    B = A.copy()
    B[:, i] = x
    return ms.profits(B)[:, i]


def merit_order_quantities(ms, mr, q_of_mr) -> np.ndarray:
    """Joint-profit maximum for a homogeneous good under quantity competition.

    The cartel produces total Q where marginal revenue meets the merit-order marginal cost (cheapest
    capacity first, equal-cost firms sharing equally up to their capacities).

    Parameters
    ----------
    ms : MarketSpec
    mr : callable
        Marginal revenue at a total quantity.
    q_of_mr : callable
        Total quantity at which marginal revenue equals a given value.

    Returns
    -------
    ndarray of shape (n_products,)
    """
    c, cap = ms.cost, ms.capacity
    levels = np.unique(c)
    q = np.zeros(ms.n_products)
    Q = 0.0
    for lev in levels:
        group = np.flatnonzero(c == lev)
        if mr(Q) <= lev:
            break
        target = q_of_mr(lev)  # total output where MR equals this cost level
        room = cap[group].sum()
        add = min(target - Q, room)
        _waterfill(q, group, cap, add)
        Q += add
        if add < room:
            break
    return q


def _waterfill(q, group, cap, amount):
    """Share ``amount`` equally among ``group``, respecting capacities."""
    left = list(group)
    while amount > 1e-300 and left:
        each = amount / len(left)
        full = [j for j in left if cap[j] - q[j] <= each]
        if not full:
            for j in left:
                q[j] += each
            return
        for j in full:
            amount -= cap[j] - q[j]
            q[j] = cap[j]
            left.remove(j)
