"""Closed forms of the analytic baseline against direct computation."""

import numpy as np
import pytest

from sim.baseline import first_breakdown_distribution, trigger_price_chain


def test_trigger_price_chain_against_matrix_powers():
    """P(normal at t) from the two-phase chain (normal, war 1..T) of Green and Porter (1984), against
    the t-th power of the transition matrix."""
    beta, T, H = 0.15, 3, 40
    P = np.zeros((T + 1, T + 1))
    P[0, 0], P[0, 1] = 1 - beta, beta
    for k in range(1, T):
        P[k, k + 1] = 1.0
    P[T, 0] = 1.0
    x = np.eye(T + 1)[0]
    expect = []
    for _ in range(H):
        expect.append(x[0])
        x = x @ P
    np.testing.assert_allclose(trigger_price_chain(beta, T, H), expect, rtol=1e-13)
    np.testing.assert_allclose(trigger_price_chain(beta, None, H), (1 - beta) ** np.arange(H), rtol=1e-13)


def test_first_breakdown_distribution_by_enumeration():
    """P(tau > t) and E[tau] against a direct sum of the distribution P(tau = 1) = q_i,
    P(tau = t) = (1 - q_i) r^(t-2) (1 - r) (sim.baseline notes), and the geometric special case."""
    qi, qp, H = 0.03, 0.05, 3000
    r = (1 - qi) * (1 - qp)
    pmf = np.array([qi] + [(1 - qi) * r ** (t - 2) * (1 - r) for t in range(2, H + 1)])
    d = first_breakdown_distribution(qi, qp, H)
    np.testing.assert_allclose(d["survival"][:100], 1 - np.cumsum(pmf)[:100], rtol=1e-10, atol=1e-15)
    assert d["mean"] == pytest.approx((np.arange(1, H + 1) * pmf).sum(), rel=1e-9)
    assert d["restricted_mean"] == pytest.approx(1 + d["survival"][:-1].sum(), rel=1e-12)
    g = first_breakdown_distribution(0.1, 0.0, 500)
    assert g["mean"] == pytest.approx(10.0, rel=1e-12)  # geometric mean 1 / q
