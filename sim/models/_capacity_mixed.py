"""The result of a static equilibrium and the expected payoffs and deviation check of mixed strategies
on a price grid (shared by the closed forms and the numeric method of the capacity model)."""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from sim.core.errors import InputError, SolverError
from sim.models._capacity_core import CapacitySpec, sales

__all__ = ["MAX_NUMERIC_FIRMS", "StaticEquilibrium", "certificate", "expected_payoffs"]

#: largest number of firms for the numeric mixed equilibrium (3**(n-1) rival configurations)
MAX_NUMERIC_FIRMS = 8


@dataclass(frozen=True)
class StaticEquilibrium:
    """The static equilibrium of a capacity-constrained price game.

    Attributes
    ----------
    kind : {"market_clearing", "cost_pricing", "mixed"}
    method : {"pure", "closed_form", "symmetric", "numeric"}
    payoffs : ndarray of shape (n_firms,)
        Expected profit of each firm.
    support_low, support_high : ndarray of shape (n_firms,)
        Lowest and highest price each firm charges (equal for a pure strategy).
    atoms : ndarray of shape (n_firms,)
        Probability each firm puts on its highest price ``support_high`` (1 for a pure strategy).
    prices : ndarray of shape (n_points,)
        Price grid on which the distribution functions are given.
    cdf : ndarray of shape (n_firms, n_points)
        ``cdf[i, t]``: probability that firm i charges at most ``prices[t]``.
    max_gain : float
        Largest gain (relative to the largest payoff) any firm could make by deviating from the
        distributions as given (0 for the pure and closed-form cases up to rounding).
    notes : tuple of str
    """

    kind: str
    method: str
    payoffs: np.ndarray
    support_low: np.ndarray
    support_high: np.ndarray
    atoms: np.ndarray
    prices: np.ndarray
    cdf: np.ndarray
    max_gain: float = 0.0
    notes: tuple = field(default_factory=tuple)

    @property
    def pure(self) -> bool:
        """True for a pure-strategy equilibrium (bool)."""
        return self.kind != "mixed"

    def cdf_at(self, p) -> np.ndarray:
        """Distribution functions at given prices (right-continuous steps between grid points for
        the numeric method, linear interpolation otherwise, a firm's atom at the top of its support
        kept as a jump).

        Parameters
        ----------
        p : array_like of shape (m,)

        Returns
        -------
        ndarray of shape (n_firms, m)
        """
        p = np.atleast_1d(np.asarray(p, dtype=float))
        out = np.empty((self.cdf.shape[0], p.size))
        for i in range(self.cdf.shape[0]):
            if self.method == "numeric":
                k = np.searchsorted(self.prices, p, side="right") - 1
                out[i] = np.where(k >= 0, self.cdf[i][np.clip(k, 0, None)], 0.0)
            else:
                # the atom at the top is not spread over the last interval: interpolate the left limit
                left = self.cdf[i].copy()
                left[-1] = 1.0 - self.atoms[i]
                out[i] = np.interp(p, self.prices, left, left=0.0, right=1.0)
                out[i] = np.where(p >= self.support_high[i], 1.0, out[i])
        return out

    def expected_prices(self) -> np.ndarray:
        """Mean price of each firm.

        Returns
        -------
        ndarray of shape (n_firms,)
        """
        if self.pure:
            return self.support_low.copy()
        dF = np.diff(np.concatenate([np.zeros((self.cdf.shape[0], 1)), self.cdf], axis=1), axis=1)
        if self.method == "numeric":
            return dF @ self.prices
        mid = np.concatenate([[self.prices[0]], 0.5 * (self.prices[1:] + self.prices[:-1])])
        dF[:, -1] -= self.atoms  # the atom sits at the top, not in the middle of the last interval
        return (dF * mid[None, :]).sum(axis=1) + self.atoms * self.support_high

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {
            "kind": self.kind, "method": self.method, "payoffs": self.payoffs.tolist(),
            "support_low": self.support_low.tolist(), "support_high": self.support_high.tolist(),
            "atoms": self.atoms.tolist(), "prices": self.prices.tolist(), "cdf": self.cdf.tolist(),
            "max_gain": self.max_gain, "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict) -> StaticEquilibrium:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        StaticEquilibrium
        """
        arr = lambda k: np.asarray(d[k], dtype=float)  # noqa: E731
        return cls(d["kind"], d["method"], arr("payoffs"), arr("support_low"), arr("support_high"), arr("atoms"),
                   arr("prices"), np.asarray(d["cdf"], dtype=float).reshape(len(d["payoffs"]), -1),
                   float(d["max_gain"]), tuple(d["notes"]))


# --------------------------------------------------------------------------------------------------
# Expected payoffs against mixed strategies (used by the numeric method and its certificate)
# --------------------------------------------------------------------------------------------------


def expected_payoffs(spec: CapacitySpec, x: np.ndarray, grid: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Expected profit of each firm charging each price in ``x`` while its rivals mix over ``grid``.

    Parameters
    ----------
    spec : CapacitySpec
    x : ndarray of shape (n_x,)
        Candidate prices.
    grid : ndarray of shape (G,)
        Increasing prices the rivals mix over.
    sigma : ndarray of shape (n_firms, G)
        Probabilities of each firm on the grid.

    Returns
    -------
    ndarray of shape (n_firms, n_x)
    """
    n = spec.n_firms
    x = np.asarray(x, dtype=float)
    out = np.zeros((n, x.size))
    if spec.rationing == "efficient" or not spec.linear:
        cs = np.concatenate([np.zeros((n, 1)), np.cumsum(sigma, axis=1)], axis=1)
        lo = np.searchsorted(grid, x, side="left")
        hi = np.searchsorted(grid, x, side="right")
        below = cs[:, lo]
        tied = cs[:, hi] - cs[:, lo]
        above = cs[:, -1:] - cs[:, hi]
        probs = np.stack([below, tied, above], axis=1)  # (n, 3, n_x)
        D = spec.quantity(x)
        cap = spec.capacity
        for i in range(n):
            rivals = [j for j in range(n) if j != i]
            for cfg in itertools.product((0, 1, 2), repeat=n - 1):
                pr = np.ones(x.size)
                S, T = 0.0, float(cap[i])
                for j, s in zip(rivals, cfg):
                    pr = pr * probs[j, s]
                    if s == 0:
                        S += cap[j]
                    elif s == 1:
                        T += cap[j]
                q = np.minimum(T, np.maximum(0.0, D - S)) * cap[i] / T
                out[i] += pr * (x - spec.cost) * q
        return out
    if n != 2:
        raise InputError("market.rationing", "with proportional rationing and linear demand the mixed "
                                             "equilibrium is computed for two firms only")
    for i in range(2):
        j = 1 - i
        prof = np.empty((x.size, grid.size, 2))
        prof[:, :, i] = x[:, None]
        prof[:, :, j] = grid[None, :]
        q = sales(spec, prof)[:, :, i]
        out[i] = ((x[:, None] - spec.cost) * q) @ sigma[j]
    return out


def certificate(spec: CapacitySpec, grid: np.ndarray, sigma: np.ndarray, payoffs: np.ndarray) -> float:
    """Largest gain, relative to the largest payoff, that any firm makes by deviating from mixed
    strategies on a grid to a price at a grid point, just below one, or on a fine sweep of ``[c, v]``.

    Parameters
    ----------
    spec : CapacitySpec
    grid : ndarray of shape (G,)
    sigma : ndarray of shape (n_firms, G)
    payoffs : ndarray of shape (n_firms,)
        The firms' payoffs under ``sigma``.

    Returns
    -------
    float
    """
    step = 1e-9 * max(1.0, spec.reservation_price)
    x = np.unique(np.concatenate([grid, grid - step, np.linspace(spec.cost, spec.reservation_price, 2001)]))
    x = x[(x >= spec.cost) & (x <= spec.reservation_price)]
    best = expected_payoffs(spec, x, grid, sigma).max(axis=1)
    scale = max(1e-300, float(np.max(payoffs)))
    gain = float(np.max(best - payoffs)) / scale
    if not np.isfinite(gain):
        raise SolverError("mixed equilibrium: the deviation check produced a non-finite value")
    return max(0.0, gain)
