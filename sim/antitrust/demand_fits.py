"""The calibration of each demand system from observed data (see the notes of :mod:`sim.antitrust.calibration`).

Each function takes the validated inputs of :meth:`sim.antitrust.calibration.MarketData.validated` and returns the
calibrated parts: the market, the implied costs, the demand parameters, elasticities and diversion ratios at the
observed point, the fit of an over-identified input and the assumptions made.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import optimize

from sim.core.errors import InputError
from sim.models.demand import DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand
from sim.models.market import Market

__all__: list = []


def _owner(v: dict) -> tuple[np.ndarray, int]:
    if v["owner"] is None:
        return np.arange(v["n"]), v["n"]
    return v["owner"], int(v["owner"].max()) + 1


def _firm_total(x: np.ndarray, owner: np.ndarray) -> np.ndarray:
    """For each product, the sum of ``x`` over the products of its owner."""
    tot = np.bincount(owner, weights=x)
    return tot[owner]


def _identifying(v: dict) -> tuple[str, Any]:
    for k in ("margin", "elasticity"):
        if v[k] is not None:
            return k, v[k]
    return "market_elasticity", v["market_elasticity"]


def _least_squares_slope(y: np.ndarray, x: np.ndarray) -> float:
    """``argmin_t sum (y - t x)^2``."""
    return float(y @ x / (x @ x))


def _check_costs(c: np.ndarray, key: str, what: str) -> None:
    bad = np.flatnonzero(c < 0)
    if bad.size:
        i = int(bad[0])
        raise InputError(key, f"implies a negative marginal cost for product {i + 1} ({c[i]:.6g}): {what}")


def _logit(v: dict, prefix: str) -> dict:
    p, s, size = v["prices"], v["shares"], v["size"]
    owner, F = _owner(v)
    if F < 2:  # pragma: no cover - OwnerMap refuses it
        raise InputError(f"{prefix}.owner", "a market needs at least two firms")
    s0 = 1.0 - s.sum()
    S_f = _firm_total(s, owner)
    name, val = _identifying(v)
    fit = None
    k = v["reference"]
    if name == "margin":
        if np.ndim(val) == 0:
            mu = val * p[k] * (1.0 - S_f[k])
        else:
            x = 1.0 / (p * (1.0 - S_f))
            mu = _least_squares_slope(val, x)
            fit = {"input": "margin", "observed": val, "fitted": mu * x, "residuals": mu * x - val}
    elif name == "elasticity":
        x = p * (1.0 - s)
        if np.ndim(val) == 0:
            alpha = -val / x[k]
        else:
            alpha = _least_squares_slope(-val, x)
            fit = {"input": "elasticity", "observed": val, "fitted": -alpha * x, "residuals": -alpha * x - val}
        mu = 1.0 / alpha
    else:
        pbar = float(s @ p / s.sum())
        mu = pbar * s0 / -val
    costs = p - mu / (1.0 - S_f)
    _check_costs(costs, f"{prefix}.{name}", "the data are not a static Nash equilibrium of logit demand with this "
                                           f"{name.replace('_', ' ')}")
    quality = p + mu * (np.log(s) - math.log(s0))

    market = Market(LogitDemand(quality=quality.tolist(), outside=0.0, mu=float(mu), size=float(size)),
                    cost=costs.tolist(), model="bertrand",
                    owner=None if v["owner"] is None else (owner + 1).tolist())
    alpha = 1.0 / mu
    n = v["n"]
    # elasticity of q_i with respect to p_j: -alpha p_i (1 - s_i) own, alpha p_j s_j cross
    E = np.tile(alpha * p * s, (n, 1))
    E[np.diag_indices(n)] = -alpha * p * (1.0 - s)
    D = np.tile(s, (n, 1)) / (1.0 - s)[:, None]
    np.fill_diagonal(D, 0.0)
    pbar = float(s @ p / s.sum())
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"quality": quality.tolist(), "outside": 0.0, "mu": float(mu), "alpha": alpha,
                       "size": float(size)},
        "elasticities": E, "market_elasticity": -alpha * pbar * s0, "diversion": D,
        "assumptions": ["logit demand with an outside good (Werden and Froeb, 1994); qualities are measured "
                        "relative to the outside good, whose quality is 0",
                        f"potential market size {size:g}; the outside good's share is {s0:.6g}"],
    }


def _homogeneous_point(v: dict) -> tuple[float, np.ndarray, float, np.ndarray]:
    """The observed point of a homogeneous good: its price, the firms' quantities, their total and the shares."""
    q = v["quantities"]
    Q = float(q.sum())
    return float(v["prices"][0]), q, Q, q / Q


def _linear(v: dict, prefix: str) -> dict:
    P, q, Q, s = _homogeneous_point(v)
    name, val = _identifying(v)
    fit = None

    if v["model"] == "bertrand":
        b = P / (-val * Q)
        a = P + b * Q
        costs = np.full(v["n"], P)
        market = Market(LinearDemand(intercept=a, slope=b, split=s.tolist()), cost=costs.tolist(), model="bertrand")
        assumptions = ["homogeneous good with linear demand; price competition",
                       "static Nash with equal costs: every firm prices at its marginal cost, which therefore "
                       "equals the observed price; the observed shares are how tied firms share the market "
                       "(the demand's split weights)"]
    else:
        k = v["reference"]
        if name == "market_elasticity":
            b = P / (-val * Q)
        elif np.ndim(val) == 0:
            b = val * P / q[k]
        else:
            b = _least_squares_slope(val * P, q)
            fit = {"input": "margin", "observed": val, "fitted": b * q / P, "residuals": b * q / P - val}
        a = P + b * Q
        costs = P - b * q
        _check_costs(costs, f"{prefix}.{name}", "the quantities are not a Cournot equilibrium with this "
                                                f"{name.replace('_', ' ')}")
        market = Market(LinearDemand(intercept=a, slope=b), cost=costs.tolist(), model="cournot",
                        capacity=None if v["capacity"] is None else v["capacity"].tolist())
        assumptions = ["homogeneous good with linear demand; quantity competition (Cournot)"]
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"intercept": float(a), "slope": float(b)} | ({"split": s.tolist()}
                                                                  if v["model"] == "bertrand" else {}),
        "elasticities": None, "market_elasticity": -P / (b * Q), "diversion": None, "assumptions": assumptions,
    }


def _isoelastic(v: dict, prefix: str) -> dict:
    P, _, Q, s = _homogeneous_point(v)
    name, val = _identifying(v)
    fit = None
    if name == "market_elasticity":
        eps = -val
    elif np.ndim(val) == 0:
        eps = s[v["reference"]] / val
    else:
        inv = _least_squares_slope(val, s)
        eps = 1.0 / inv
        fit = {"input": "margin", "observed": val, "fitted": s * inv, "residuals": s * inv - val}
    if eps <= 1.0:
        what = "" if name == "market_elasticity" else f" (the Lerner condition implies an elasticity of {-eps:.6g})"
        raise InputError(f"{prefix}.{name}", f"isoelastic demand needs a market elasticity below -1 (the joint-profit "
                                             f"maximum does not exist otherwise){what}")
    A = P * Q ** (1.0 / eps)
    costs = P * (1.0 - s / eps)

    market = Market(IsoelasticDemand(scale=A, elasticity=eps), cost=costs.tolist(), model="cournot",
                    capacity=None if v["capacity"] is None else v["capacity"].tolist())
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"scale": float(A), "elasticity": float(eps)},
        "elasticities": None, "market_elasticity": -eps, "diversion": None,
        "assumptions": ["homogeneous good with constant-elasticity demand; quantity competition (Cournot): "
                        "margins follow the Lerner condition (P - c_i) / P = s_i / elasticity"],
    }


def _diff_jacobian(b: float, g: float, n: int) -> np.ndarray:
    """``dq/dp`` of the differentiated linear system with every product selling: ``-(1/b) B^-1`` with
    ``B = (1 - g) I + g 11'`` (inverse by the Sherman-Morrison formula)."""
    theta = g / (1.0 + (n - 1) * g)
    return -(np.eye(n) - theta * np.ones((n, n))) / (b * (1.0 - g))


def _diff_markups(b: float, g: float, v: dict, owner: np.ndarray) -> np.ndarray:
    """Markups ``p - c`` implied by the first-order conditions at the observed point."""
    q, n = v["quantities"], v["n"]
    if v["model"] == "cournot":
        Q_f = _firm_total(q, owner)
        return b * ((1.0 - g) * q + g * Q_f)
    D = _diff_jacobian(b, g, n)
    m = np.empty(n)
    for f in np.unique(owner):
        idx = np.flatnonzero(owner == f)
        m[idx] = -np.linalg.solve(D[np.ix_(idx, idx)], q[idx])
    return m


def _differentiated(v: dict, prefix: str) -> dict:
    p, q, n = v["prices"], v["quantities"], v["n"]
    Q = float(q.sum())
    owner, _F = _owner(v)
    eta = v["market_elasticity"]
    # a uniform one-percent price rise changes total sales by sum_ij D_ij p_j / Q percent, and every
    # column of D sums to -1 / (b (1 + (n-1) g)): the market elasticity pins b (1 + (n-1) g)
    K = float(p.sum()) / (-eta * Q)
    name = "margin" if v["margin"] is not None else "elasticity"
    val = v[name]
    k = v["reference"]

    def b_of(g):
        return K / (1.0 + (n - 1) * g)

    def predicted(g):
        b = b_of(g)
        if name == "margin":
            return _diff_markups(b, g, v, owner) / p
        return np.diag(_diff_jacobian(b, g, n)) * p / q

    g_hi = 1.0 - 1e-12
    grid = np.unique(np.concatenate([np.linspace(0.0, 0.99, 100), 1.0 - np.logspace(-2, -12, 60)]))
    fit = None
    if np.ndim(val) == 0:
        r = np.array([predicted(g)[k] - val for g in grid])
        sign = np.flatnonzero(np.sign(r[:-1]) * np.sign(r[1:]) <= 0)
        if sign.size == 0:
            lo, hi = np.min(r + val), np.max(r + val)
            raise InputError(f"{prefix}.{name}", f"no substitutability in [0, 1) reproduces {val:g} with market "
                             f"elasticity {eta:g}: the model implies values between {lo:.6g} and {hi:.6g} for "
                             f"product {k + 1}")
        j = int(sign[0])
        if r[j] == 0:
            g = float(grid[j])
        else:
            g = float(optimize.brentq(lambda t: predicted(t)[k] - val, grid[j], grid[j + 1], xtol=1e-15,
                                      rtol=4 * np.finfo(float).eps, maxiter=500))
    else:
        def sse(t):
            res = predicted(t) - val
            return float(res @ res)

        vals = np.array([sse(t) for t in grid])
        j = int(np.argmin(vals))
        lo, hi = grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]
        res = optimize.minimize_scalar(sse, bounds=(lo, min(hi, g_hi)), method="bounded",
                                       options={"xatol": 1e-14, "maxiter": 500})
        g = float(res.x) if res.fun <= vals[j] else float(grid[j])
        pred = predicted(g)
        fit = {"input": name, "observed": val, "fitted": pred, "residuals": pred - val}
    b = b_of(g)
    a = p + b * ((1.0 - g) * q + g * Q)
    costs = p - _diff_markups(b, g, v, owner)
    _check_costs(costs, f"{prefix}.{name}", "the data are not a static Nash equilibrium of differentiated linear "
                                           f"demand with this {name}")

    market = Market(DifferentiatedDemand(intercept=a.tolist(), slope=float(b), substitution=float(g)),
                    cost=costs.tolist(), model=v["model"],
                    capacity=None if v["capacity"] is None else v["capacity"].tolist(),
                    owner=None if v["owner"] is None else (owner + 1).tolist())
    Dj = _diff_jacobian(b, g, n)
    E = Dj * p[None, :] / q[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        div = -Dj / np.diag(Dj)[:, None]
    np.fill_diagonal(div, 0.0)
    return {
        "market": market, "costs": costs, "fit": fit, "input": (name, val),
        "parameters": {"intercept": a.tolist(), "slope": float(b), "substitution": float(g)},
        "elasticities": E, "market_elasticity": float(Dj.sum(axis=0) @ p / Q), "diversion": div,
        "assumptions": ["differentiated products with linear demand from a representative consumer with quadratic "
                        f"utility; {'price' if v['model'] == 'bertrand' else 'quantity'} competition",
                        "the market elasticity is the response of total sales to a uniform one-percent price rise"],
    }
