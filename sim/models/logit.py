"""Multinomial logit demand with an outside good (price competition).

``s_i = exp((a_i - p_i)/mu) / (sum_j exp((a_j - p_j)/mu) + exp(a_0/mu))`` and ``q_i = size * s_i``.
A firm's first-order condition is ``p_i - c_i = mu / (1 - S_f)``, ``S_f`` the total share of its
products (Anderson, de Palma and Thisse, 1992, "Discrete Choice Theory of Product Differentiation",
ch. 7).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize, special

from sim.core.docs import doc_sections
from sim.core.params import PerFirm, Real
from sim.models.codes import CODE_LOGIT_BERTRAND
from sim.models.demand_base import MAX_MAGNITUDE, Demand
from sim.models.demand_spec import DemandSpec, profit_with

__all__ = ["LogitDemand", "LogitDemandSpec"]


#: above these log odds at cost (a bracket wider than ``exp(30) mu``) best responses use the closed form in log space;
#: below, Brent's method on the first-order condition in prices
_DIRECT_LOG_ODDS = 30.0


class LogitDemand(Demand):
    """Multinomial logit demand with an outside good.

    Parameters
    ----------
    quality : float or list of float
        Quality index ``a_i`` of each product.
    outside : float
        Quality index ``a_0`` of the outside good.
    mu : float
        Horizontal differentiation (> 0); products become perfect substitutes as ``mu -> 0``.
    size : float
        Market size: quantities are ``size`` times shares.
    """

    models = ("bertrand",)
    name = "logit"
    _constraints = {
        "quality": PerFirm(Real(-1e6, 1e6)),
        "outside": Real(-1e6, 1e6),
        "mu": Real(1e-6, 1e6),
        "size": Real(0, MAX_MAGNITUDE, closed="right"),
    }

    def __init__(self, quality=2.0, outside=0.0, mu=0.25, size=1.0):
        self.quality = quality
        self.outside = outside
        self.mu = mu
        self.size = size

    @doc_sections(Demand.spec)
    def spec(self, n_firms, prefix="market"):
        """Validate the parameters for ``n_firms`` products: ``scalars = (outside, mu, size, 0)``,
        ``vector`` the qualities."""
        p = self._check_params(prefix, n_firms)
        return LogitDemandSpec(type(self), np.array([p["outside"], p["mu"], p["size"], 0.0]), p["quality"])


@doc_sections(DemandSpec)
class LogitDemandSpec(DemandSpec):
    """Numeric logit demand (see :class:`LogitDemand`), its ``scalars`` and ``vector`` in the layout
    given by :meth:`LogitDemand.spec`."""

    stage_codes = {"bertrand": CODE_LOGIT_BERTRAND}

    @doc_sections(DemandSpec.direct_demand)
    def direct_demand(self, p):
        """``size`` times each product's share."""
        p = np.asarray(p, dtype=float)
        a0, mu, size = self.scalars[0], self.scalars[1], self.scalars[2]
        u = (self.vector - p) / mu
        u0 = np.full(p.shape[:-1] + (1,), a0 / mu)
        top = np.maximum(u.max(axis=-1, keepdims=True), u0)
        e = np.exp(u - top)
        denom = e.sum(axis=-1, keepdims=True) + np.exp(u0 - top)
        return size * e / denom

    def share_complement(self, p, products) -> float:
        """``1 - sum of the shares of products`` for one price profile, computed as the share of every
        other option (no cancellation when those products dominate the market).

        Parameters
        ----------
        p : array_like of shape (n_products,)
        products : sequence of int

        Returns
        -------
        float
        """
        a0, mu = self.scalars[0], self.scalars[1]
        u = (self.vector - np.asarray(p, dtype=float)) / mu
        top = max(float(u.max()), a0 / mu)
        e = np.exp(u - top)
        e0 = np.exp(a0 / mu - top)
        mask = np.zeros(u.size, bool)
        mask[np.asarray(products)] = True
        return float((e[~mask].sum() + e0) / (e.sum() + e0))

    def outside_share(self, p) -> np.ndarray:
        """Share of the outside good.

        Parameters
        ----------
        p : array_like of shape (..., n_products)

        Returns
        -------
        ndarray of shape (...,)
        """
        a0, mu = self.scalars[0], self.scalars[1]
        u = (self.vector - np.asarray(p, dtype=float)) / mu
        u0 = np.full(u.shape[:-1] + (1,), a0 / mu)
        top = np.maximum(u.max(axis=-1, keepdims=True), u0)
        e = np.exp(u - top)
        e0 = np.exp(u0 - top)
        return (e0 / (e.sum(axis=-1, keepdims=True) + e0))[..., 0]

    @doc_sections(DemandSpec.consumer_surplus)
    def consumer_surplus(self, q, p):
        """``size * mu * (log(sum_j exp((a_j - p_j)/mu) + exp(a_0/mu)) - a_0/mu)``, the expected surplus
        relative to buying only the outside good (Small and Rosen, 1981)."""
        p = np.asarray(p, dtype=float)
        a0, mu, size = self.scalars[0], self.scalars[1], self.scalars[2]
        u = (self.vector - p) / mu
        u0 = np.full(u.shape[:-1] + (1,), a0 / mu)
        allu = np.concatenate([u, u0], axis=-1)
        top = allu.max(axis=-1, keepdims=True)
        lse = (top + np.log(np.exp(allu - top).sum(axis=-1, keepdims=True)))[..., 0]
        return size * mu * (lse - a0 / mu)

    @doc_sections(DemandSpec.prices_for_quantities)
    def prices_for_quantities(self, q):
        """Inverse logit demand: ``p_i = a_i - a_0 - mu (log s_i - log s_0)``."""
        a0, mu, size = self.scalars[0], self.scalars[1], self.scalars[2]
        s = q / size
        s0 = 1.0 - s.sum(axis=-1, keepdims=True)
        return self.vector - a0 - mu * (np.log(s) - np.log(s0))

    @doc_sections(DemandSpec.action_upper)
    def action_upper(self, ms):
        """A firm's optimal markup never exceeds ``mu / s_0`` evaluated with every price at cost, and the
        joint-profit markup is ``mu / s_0`` as well; twice that (plus ten ``mu``) bounds every candidate."""
        c = ms.cost
        mu = self.scalars[1]
        s = self.direct_demand(c[None, :])[0] / self.scalars[2]
        if 1.0 - s.sum() > 1e-12:
            return c + 2.0 * mu / (1.0 - s.sum()) + 10.0 * mu
        # the inside goods take (nearly) the whole market at cost: ``mu / s_0`` would overflow, and the
        # joint-profit markup (the largest any firm charges, with every rival price removed) bounds it instead
        return c + 2.0 * self._markup(c, np.arange(c.size), np.full(c.size, np.inf)) + 10.0 * mu

    @doc_sections(DemandSpec.best_response)
    def best_response(self, ms, i, A):
        """The first-order condition ``p - c = mu / (1 - s_i(p))`` has a unique root because ``s_i``
        falls in ``p``; ``1 - s_i`` is computed directly as the share of the other options, so that a
        dominant product does not lose it to cancellation. When the product dominates so much that the bracket
        ``mu / (1 - s_i(c))`` is astronomically wide (or ``1 - s_i`` underflows, as with a tiny ``mu``) the root
        comes from its closed form in log space (:meth:`_markup`)."""
        x = np.array([self._response(ms, i, row) for row in A])
        return x, profit_with(ms, i, A, x)

    def _response(self, ms, i, row):
        mu = self.scalars[1]
        c = ms.cost[i]
        if self._log_odds(ms.cost[[i]], [i], row) > _DIRECT_LOG_ODDS:
            return float(c + self._markup(ms.cost[[i]], [i], row))
        prof = row.copy()

        def rest(p):
            prof[i] = p
            return self.share_complement(prof, [i])

        def h(p):
            return p - c - mu / rest(p)

        hi = c + mu / rest(c)
        if h(hi) <= 0:
            return hi
        return float(optimize.brentq(h, c, hi, xtol=1e-15 * max(1.0, c, mu), rtol=1e-15, maxiter=1000))

    def _log_odds(self, c, own, row):
        """``K = log sum_own exp((a_k - c_k)/mu) - log(sum_others exp((a_j - p_j)/mu) + exp(a_0/mu))``: the log odds
        of the products ``own`` priced at cost against every other option."""
        a0, mu = self.scalars[0], self.scalars[1]
        mask = np.zeros(self.vector.size, bool)
        mask[np.asarray(own)] = True
        others = np.append((self.vector[~mask] - row[~mask]) / mu, a0 / mu)
        return float(special.logsumexp((self.vector[mask] - c) / mu) - special.logsumexp(others))

    def _markup(self, c, own, row):
        """The common best-response markup of the products ``own`` (costs ``c``) against ``row``.

        The first-order condition ``m = mu / (1 - S_f(m))`` reads, with ``z = m / mu``,
        ``z = 1 + exp(K - z)`` where ``K = log sum_own exp((a_k - c_k)/mu) - log(sum_others exp((a_j - p_j)/mu)
        + exp(a_0/mu))``; its root is ``z = 1 + omega(K - 1)`` with ``omega`` the Wright omega function
        (``omega + log omega = x``, the Lambert W of ``exp(x)``). Computing ``K`` with log-sum-exp keeps the
        markup exact when ``mu`` is tiny and a share would underflow (the Lambert-W form of the logit optimal
        markup: Li and Huh, 2011, "Pricing multiple products with the multinomial logit and nested logit
        models: concavity and implications", MSOM 13(4), from memory).
        """
        return self.scalars[1] * (1.0 + float(special.wrightomega(self._log_odds(c, own, row) - 1.0)))

    @doc_sections(DemandSpec.best_response_multi)
    def best_response_multi(self, ms, i, own, row):
        """A multi-product firm sets one common markup ``m`` on its products, solving
        ``m = mu / (1 - S_f)``; the root is unique because ``S_f`` falls as ``m`` rises."""
        mu = self.scalars[1]
        c = ms.cost[own]
        if self._log_odds(c, own, row) > _DIRECT_LOG_ODDS:
            p = row.copy()
            p[own] = c + self._markup(c, own, row)
            return p

        def prof_at(m):
            p = row.copy()
            p[own] = c + m
            return p

        def h(m):
            return m - mu / self.share_complement(prof_at(m), own)

        hi = mu / self.share_complement(prof_at(0.0), own)
        m = hi if h(hi) <= 0 else optimize.brentq(h, 0.0, hi, xtol=1e-15 * max(1.0, mu), rtol=1e-15, maxiter=1000)
        return prof_at(m)

    @doc_sections(DemandSpec.nash_start)
    def nash_start(self, ms):
        """Symmetric-share guess ``c + mu (1 + 1/n)`` (the best-response iteration finishes the job)."""
        return ms.cost + self.scalars[1] * (1.0 + 1.0 / ms.n_products)

    @doc_sections(DemandSpec.joint_maximum)
    def joint_maximum(self, ms):
        """A multi-product logit monopolist sets equal markups ``m`` solving ``m * s_0(m) = mu``."""
        c = ms.cost
        mu = self.scalars[1]
        f = lambda m: m * self.outside_share((c + m)[None, :])[0] - mu  # noqa: E731
        hi = mu
        while f(hi) < 0:
            hi *= 2
        m = optimize.brentq(f, 0.0, hi, xtol=1e-15, rtol=1e-15, maxiter=500)
        return c + m

    @doc_sections(DemandSpec.joint_gradient)
    def joint_gradient(self, ms, a, q, p):
        """``dJ/dp_k = q_k - (m_k q_k - s_k sum_j m_j q_j) / mu`` with markups ``m = p - c``."""
        mu, size = self.scalars[1], self.scalars[2]
        s = q / size
        m = p - ms.cost
        return q - (m * q - s * float(m @ q)) / mu

    @doc_sections(DemandSpec.proportional_limit)
    def proportional_limit(self, qn):
        """Just below ``size / sum(qn)``: the inside goods cannot take the whole market."""
        total = qn.sum()
        # no inside sales at double precision: every scale is attainable
        return (1.0 - 1e-12) * self.scalars[2] / total if total > 0 else np.inf

    @doc_sections(DemandSpec.proportional_prices)
    def proportional_prices(self, nash_prices, qn, lam):
        """``p_i(lam) = pN_i - mu (log lam + log(1 - S) - log(1 - lam S))``, ``S`` the inside share at Nash: the
        inverse logit demand of ``lam * qn`` (:meth:`prices_for_quantities`) written relative to the Nash prices,
        so that a Nash share that underflows to zero keeps its product on the path."""
        if np.all(qn > 0) and qn.sum() < (1.0 - 1e-9) * self.scalars[2]:
            return self.prices_for_quantities(lam[:, None] * qn[None, :])
        # log s_0 and log(1 - s_0) at the Nash prices by log-sum-exp, so that neither share is lost to underflow;
        # then log(1 - lam S) = log(s_0 + (1 - lam)(1 - s_0))
        a0, mu = self.scalars[0], self.scalars[1]
        u = (self.vector - nash_prices) / mu
        total = special.logsumexp(np.append(u, a0 / mu))
        log_s0, log_inside = a0 / mu - total, special.logsumexp(u) - total
        with np.errstate(divide="ignore"):  # log(1 - lam) at lam = 1 is -inf: the Nash prices themselves
            rest = np.logaddexp(log_s0, np.log1p(-lam) + log_inside)
        shift = np.log(lam) + log_s0 - rest
        return nash_prices[None, :] - mu * shift[:, None]

    @doc_sections(DemandSpec.proportional_slope)
    def proportional_slope(self, qn, lam):
        """``d p_i / d lam = -mu (1/lam + S / (1 - lam S))`` with ``S = sum(qn) / size``."""
        S = qn.sum() / self.scalars[2]
        return np.full(qn.shape[0], -self.scalars[1] * (1.0 / lam + S / (1.0 - lam * S)))


