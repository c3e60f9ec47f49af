"""A capacity-constrained price game as the simulation engine plays it: arrays, levels and their payoffs.

:class:`CapacityStageMarket` presents a :class:`~sim.models.capacity_pricing.CapacityPricing` market and its
agreement to the repeated-game engine (:mod:`sim.simulation`) in the layout the engine reads from a market
(the stage-core code and arrays of :func:`sim.models.stagecore.market_arrays`, the number of firms and products,
the price step), and computes what the engine's analytic baseline asks of a market: each firm's profit at a
profile and its best one-shot deviation from it.

The three levels a line-up plays:

* ``collusive``: every firm at the agreed price; firms that tie share in proportion to the agreed quantities (the
  capacities under the proportional rule), so the profile sells exactly the agreement;
* ``deviation``: each firm's best one-shot deviation from the agreement
  (:func:`sim.models._capacity_collusion.best_deviations`); a deviation that undercuts the agreed price charges
  one price step below it (``1e-9`` of the reservation price: prices on a computer are discrete, as in the
  homogeneous Bertrand markets of :mod:`sim.models.market`), so its profit falls short of the continuous-price
  supremum by about ``step * capacity``;
* ``nash``: the static equilibrium. A pure one (market clearing, or pricing at cost) is played as it is. A mixed
  one (Bertrand-Edgeworth) is played as a draw from each firm's equilibrium distribution every period, from the
  replication's own random stream (:mod:`sim.models.capacity_stage`): the level is priced at ``MIXED_PRICE`` and
  the kernels draw. Its payoffs for the analytic side are the equilibrium's expected profits; its expected market
  price and consumer surplus are estimated from 16,384 profiles drawn with a fixed seed (they are reported, not
  used in any threshold).

Model results are evidence under stated assumptions, not proof of conduct.
"""

from __future__ import annotations

import numpy as np

from sim.core.errors import InputError
from sim.models._capacity_core import DEMAND_CODES, RATIONING_CODES, profits
from sim.models.capacity_pricing import CapacityPricing
from sim.models.capacity_stage import MIXED_PRICE, quantile_table
from sim.models.codes import CODE_CAPACITY_BERTRAND
from sim.models.stagecore import EFFECTIVE_TICK, evaluate_py, market_arrays

__all__ = ["CapacityStageMarket"]

#: profiles drawn to estimate the expected market price and consumer surplus of a mixed equilibrium
N_EXPECTATION_DRAWS = 16_384
#: price points of the search for a best response to a pure price profile (besides the rivals' prices)
N_SEARCH = 2049


class _StageDemand:
    """The demand parameters in the stage core's layout (``scalars``, ``vector``)."""

    def __init__(self, scalars, vector):
        self.scalars = np.asarray(scalars, dtype=float)
        self.vector = np.asarray(vector, dtype=float)

    def provides(self, *names) -> bool:
        """Whether the demand offers the named methods (the capacity game offers none of the smooth-demand ones).

        Parameters
        ----------
        *names : str

        Returns
        -------
        bool
        """
        return False


class CapacityStageMarket:
    """A capacity market and its agreement, in the form the simulation engine plays.

    Parameters
    ----------
    market : CapacityPricing
        The market.
    rule : {"proportional", "equal", "given"}
        The agreement rule (:meth:`CapacityPricing.agreement`).
    shares : array_like of shape (n_firms,), optional
        Shares of the ``given`` rule.
    price : float, optional
        The agreed price (default: the reservation price, or the joint-profit price with linear demand).
    prefix : str
        Key path of the market in error messages.

    Attributes
    ----------
    pricing : CapacityPricing
    spec : CapacitySpec
    agreed : Agreement
    equilibrium : StaticEquilibrium
    n_firms, n_products : int
    code : int
    cost, capacity : ndarray of shape (n_firms,)
    demand : object with ``scalars`` of shape (4,) and ``vector`` of shape (n_firms,)
    mixed : ndarray of shape (n_firms, N_QUANTILES), or (0, 0) when the static equilibrium is pure
    profiles : dict of str to ndarray of shape (n_firms,)
        ``collusive``, ``deviation`` (each firm's deviation price, the others at the agreed price) and ``nash``.
    firm_profits_of : dict of str to ndarray of shape (n_firms,)
        Per-period profits of the three levels (the deviator's own profit for ``deviation``).
    """

    model = "capacity"
    quantity_setting = False
    homogeneous_good = True
    homogeneous_bertrand = False
    owner = None

    def __init__(self, market: CapacityPricing, rule: str = "proportional", shares=None, price=None,
                 prefix: str = "market"):
        self.pricing = market
        s = self.spec = market.spec(prefix)
        self.agreed = market.agreement(rule, shares, price)
        self.equilibrium = market.static_equilibrium()
        n = self.n_firms = self.n_products = s.n_firms
        self.code = CODE_CAPACITY_BERTRAND
        self.cost = np.full(n, s.cost)
        self.capacity = np.asarray(s.capacity, dtype=float).copy()
        q = np.asarray(self.agreed.quantities, dtype=float)
        self.weights = q.copy() if np.all(q > 0) else self.capacity.copy()
        self.demand = _StageDemand([s.reservation_price, s.market_size, DEMAND_CODES[s.demand],
                                    RATIONING_CODES[s.rationing]], self.weights)
        self.symmetric = bool(np.all(self.capacity == self.capacity[0]))
        self.price_step = EFFECTIVE_TICK * s.reservation_price
        eq = self.equilibrium
        self.mixed = np.zeros((0, 0)) if eq.pure else quantile_table(eq)
        self.arrays = market_arrays(self)
        self._levels()

    def _levels(self):
        s, a = self.spec, self.agreed
        n = self.n_firms
        p_c = float(a.price)
        _, dev_price, kinds = self.pricing.best_deviations(a)
        dev = np.array(dev_price, dtype=float)
        for i, kind in enumerate(kinds):
            if kind == "undercut" and dev[i] >= p_c - self.price_step:
                dev[i] = p_c - self.price_step
        rows = np.tile(np.full(n, p_c), (n, 1))
        rows[np.arange(n), np.arange(n)] = dev
        eq = self.equilibrium
        nash = np.full(n, MIXED_PRICE) if not eq.pure else np.asarray(eq.support_low, dtype=float).copy()
        self.profiles = {"collusive": np.full(n, p_c), "deviation": dev, "nash": nash}
        self.deviation_rows = rows
        played = profits(s, rows, self.weights)
        self.firm_profits_of = {
            "collusive": profits(s, np.full(n, p_c), self.weights),
            "deviation": np.diag(played).copy(),
            "nash": np.asarray(eq.payoffs, dtype=float).copy() if not eq.pure else profits(s, nash, self.weights),
        }

    # ---- what the engine's analytic side asks of a market -----------------------------------------------------
    def firm_profits(self, profiles) -> np.ndarray:
        """Profits at price profiles; a profile at ``MIXED_PRICE`` everywhere has the mixed equilibrium's expected
        profits.

        Parameters
        ----------
        profiles : array_like of shape (..., n_firms)

        Returns
        -------
        ndarray of shape (..., n_firms)
        """
        P = np.asarray(profiles, dtype=float)
        flat = P.reshape(-1, self.n_firms)
        out = np.empty_like(flat)
        for r, row in enumerate(flat):
            if np.all(row == MIXED_PRICE):
                out[r] = self.equilibrium.payoffs
            elif np.any(row < 0):
                raise InputError("strategies", "a level mixes drawn and fixed prices, which the capacity market "
                                               "cannot evaluate")
            else:
                out[r] = profits(self.spec, row, self.weights)
        return out.reshape(P.shape)

    def deviation_payoffs(self, profile) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Each firm's profit at a profile, its best one-shot deviation profit and the deviation profiles.

        The agreement uses the deviations of :attr:`profiles`; the mixed equilibrium has no profitable
        deviation (it is an equilibrium); against any other pure profile a firm's best response is searched over
        the rivals' prices, one step below each, and ``N_SEARCH`` evenly spaced prices from cost to the
        reservation price (a search whose gains are attainable, so a deviation it finds is real).

        Parameters
        ----------
        profile : array_like of shape (n_firms,)

        Returns
        -------
        profits, deviation_profits : ndarray of shape (n_firms,)
        rows : ndarray of shape (n_firms, n_firms)
            Row i: the profile when firm i deviates.
        """
        a = np.asarray(profile, dtype=float)
        n = self.n_firms
        if np.all(a == MIXED_PRICE):
            pay = np.asarray(self.equilibrium.payoffs, dtype=float)
            return pay.copy(), pay.copy(), np.tile(a, (n, 1))
        if np.array_equal(a, self.profiles["collusive"]):
            own = self.firm_profits_of["collusive"]
            dev = np.maximum(self.firm_profits_of["deviation"], own)
            return own.copy(), dev, self.deviation_rows.copy()
        own = self.firm_profits(a)
        s = self.spec
        rows, best = np.tile(a, (n, 1)), own.copy()
        grid = np.linspace(s.cost, s.reservation_price, N_SEARCH)
        for i in range(n):
            rivals = np.delete(a, i)
            cand = np.unique(np.concatenate([grid, rivals, rivals - self.price_step]))
            cand = cand[(cand >= 0) & (cand <= s.reservation_price)]
            trial = np.tile(a, (cand.size, 1))
            trial[:, i] = cand
            pi = profits(s, trial, self.weights)[:, i]
            k = int(np.argmax(pi))
            if pi[k] > best[i]:
                best[i], rows[i] = pi[k], trial[k]
        return own, best, rows

    def expected_outcome(self, profile) -> tuple:
        """Sales, prices, profits, market price and consumer surplus at a profile, as
        :func:`sim.models.stagecore.evaluate_py` gives them; for the mixed equilibrium (a profile at
        ``MIXED_PRICE``), their expectations (profits exact, the rest estimated from draws with a fixed seed).

        Parameters
        ----------
        profile : array_like of shape (n_firms,)

        Returns
        -------
        quantities, prices : ndarray of shape (n_firms,)
        firm_profits : ndarray of shape (n_firms,)
        market_price, surplus : float
        """
        a = np.asarray(profile, dtype=float)
        if not np.any(a == MIXED_PRICE):
            return evaluate_py(self.arrays, a)
        u = np.random.default_rng(0).random((N_EXPECTATION_DRAWS, self.n_firms))
        m = self.mixed.shape[1]
        j = np.minimum((u * m).astype(np.int64), m - 1)
        draws = np.where(a == MIXED_PRICE, self.mixed[np.arange(self.n_firms), j], a)
        out = [evaluate_py(self.arrays, row) for row in draws]
        q = np.mean([o[0] for o in out], axis=0)
        num = float(np.mean([float(o[0] @ o[1]) for o in out]))
        cs = float(np.mean([o[4] for o in out]))
        return q, draws.mean(axis=0), np.asarray(self.equilibrium.payoffs, dtype=float).copy(), \
            (num / q.sum() if q.sum() > 0 else float(draws.mean())), cs

    def minmax_profits(self) -> np.ndarray:
        """Each firm's minmax payoff (:meth:`CapacityPricing.minmax`).

        Returns
        -------
        ndarray of shape (n_firms,)
        """
        return np.asarray(self.pricing.minmax(), dtype=float)

    def to_dict(self) -> dict:
        """The market's ``[market]`` table (``model = "capacity"`` and the parameters of the market).

        Returns
        -------
        dict
        """
        return {"model": self.model, **self.pricing.to_dict()}
