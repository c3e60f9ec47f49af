"""Global sensitivity of a conclusion to uncertain inputs that move together.

The model being analysed is a plain function of the inputs. Vectorised (``vectorized=True``): it
takes a dict of arrays of shape (n_draws,) and returns a dict of arrays of shape (n_draws,) (one per
output, e.g. the critical discount factor before and after a merger and the change). Otherwise it
takes a dict of floats and returns a dict of floats (or one float, named ``"output"``), and the draws
can be spread over processes (``workers``): the draws are cut into fixed chunks evaluated in order,
so the numbers do not depend on the number of workers. A scalar model given with ``workers > 1``
must be picklable (defined at the top level of a module).

Inputs: a range ``(low, high)`` (uniform) or a table ``{"distribution": ..., ...}``:
``uniform`` (low, high), ``triangular`` (low, mode, high), ``normal`` (mean, sd, truncated to
[low, high]) or ``lognormal`` (median, sigma of the logarithm). Draws are made on the unit cube and
mapped through each input's quantile function.

* :func:`sobol_indices`: first-order and total Sobol indices (Sobol, 2001, Mathematics and Computers
  in Simulation 55) from Saltelli's sampling scheme (Saltelli, 2002, Computer Physics Communications
  145(2); Saltelli et al., 2010, the estimators SALib uses) with bootstrap confidence intervals, by
  SALib (Herman and Usher, 2017, Journal of Open Source Software 2(9); Iwanaga, Usher and Herman,
  2022, Socio-Environmental Systems Modelling 4).
* :func:`morris_screening`: elementary effects (Morris, 1991, Technometrics 33(2); ``mu_star`` of
  Campolongo, Cariboni and Saltelli, 2007) for many inputs, on the quantile scale of each input.
* :func:`share_easier`: in plain Monte Carlo draws, the share in which the merger makes coordination
  easier (the threshold after below the threshold before), with a Wilson interval.

Seeds: one user seed, split by :class:`numpy.random.SeedSequence` into the sampling and bootstrap
streams. The same seed gives the same numbers. Outputs must be finite: a model that reports a
threshold that no discount factor below one reaches should report it as 1.
"""

from __future__ import annotations

import math
import numbers
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from sim.antitrust.result import CautionedTable
from sim.core.errors import InputError, SolverError
from sim.core.stats import wilson_estimate
from sim.core.text import CAUTION

__all__ = ["DISTRIBUTIONS", "MorrisResult", "ShareResult", "SobolResult", "morris_screening", "share_easier",
           "sobol_indices", "uncertain_inputs"]

DISTRIBUTIONS = ("uniform", "triangular", "normal", "lognormal")
#: rows per chunk of draws handed to a worker, for scalar and vectorised models (fixed: the split never
#: depends on the number of workers)
CHUNK = 256
CHUNK_VECTORIZED = 4096


@dataclass(frozen=True)
class _Input:
    name: str
    distribution: str
    params: tuple

    def ppf(self, u: np.ndarray) -> np.ndarray:
        d, p = self.distribution, self.params
        if d == "uniform":
            return p[0] + u * (p[1] - p[0])
        if d == "triangular":
            lo, mode, hi = p
            return stats.triang.ppf(u, c=(mode - lo) / (hi - lo), loc=lo, scale=hi - lo)
        if d == "normal":
            mean, sd, lo, hi = p
            return stats.truncnorm.ppf(u, (lo - mean) / sd, (hi - mean) / sd, loc=mean, scale=sd)
        median, sigma = p
        return median * np.exp(sigma * stats.norm.ppf(u))


def _real(key, v):
    if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)):
        raise InputError(key, f"must be a finite number, got {v!r}")
    return float(v)


def uncertain_inputs(inputs: dict) -> list:
    """Validate the uncertain inputs (see the module notes); errors name ``sensitivity.<name>``.

    Parameters
    ----------
    inputs : dict
        Input name -> ``(low, high)`` or a table with ``distribution`` and its parameters.

    Returns
    -------
    list of validated inputs, in the given order
    """
    if not isinstance(inputs, dict) or not inputs:
        raise InputError("sensitivity", f"must be a table of uncertain inputs (name -> range), got {inputs!r}")
    out = []
    for name, spec in inputs.items():
        key = f"sensitivity.{name}"
        if isinstance(spec, list | tuple):
            if len(spec) != 2:
                raise InputError(key, f"a range is (low, high), got {spec!r}")
            spec = {"distribution": "uniform", "low": spec[0], "high": spec[1]}
        if not isinstance(spec, dict):
            raise InputError(key, f"must be a range (low, high) or a table with a distribution, got {spec!r}")
        d = spec.get("distribution", "uniform")
        if d not in DISTRIBUTIONS:
            raise InputError(f"{key}.distribution", f"must be one of {', '.join(map(repr, DISTRIBUTIONS))}, got {d!r}")
        allowed = {"uniform": ("low", "high"), "triangular": ("low", "mode", "high"),
                   "normal": ("mean", "sd", "low", "high"), "lognormal": ("median", "sigma")}[d]
        for k in spec:
            if k != "distribution" and k not in allowed:
                raise InputError(f"{key}.{k}", f"unknown key for a {d} input; allowed: {', '.join(allowed)}")
        vals = {}
        for k in allowed:
            if k not in spec:
                raise InputError(f"{key}.{k}", f"missing (a {d} input needs {', '.join(allowed)})")
            vals[k] = _real(f"{key}.{k}", spec[k])
        if "low" in vals and not vals["low"] < vals["high"]:
            raise InputError(key, f"empty range: low must be below high, got [{vals['low']:g}, {vals['high']:g}]")
        if d == "triangular" and not vals["low"] <= vals["mode"] <= vals["high"]:
            raise InputError(f"{key}.mode", f"must lie in [{vals['low']:g}, {vals['high']:g}], got {vals['mode']:g}")
        for k in ("sd", "sigma", "median"):
            if k in vals and vals[k] <= 0:
                raise InputError(f"{key}.{k}", f"must be positive, got {vals[k]:g}")
        out.append(_Input(str(name), d, tuple(vals[k] for k in allowed)))
    return out


def _seeds(seed, n: int) -> list[int]:
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise InputError("sensitivity.seed", f"must be a non-negative integer, got {seed!r}")
    return [int(s.generate_state(1, np.uint32)[0]) for s in np.random.SeedSequence(int(seed)).spawn(n)]


def _chunk_eval(model, names, rows, vectorized):
    X = {k: rows[:, j] for j, k in enumerate(names)}
    if vectorized:
        out = model(X)
        out = out if isinstance(out, dict) else {"output": out}
        return {k: np.asarray(v, dtype=float).reshape(rows.shape[0]) for k, v in out.items()}
    res = []
    for r in range(rows.shape[0]):
        y = model({k: float(v[r]) for k, v in X.items()})
        res.append(y if isinstance(y, dict) else {"output": y})
    return {k: np.array([float(y[k]) for y in res]) for k in res[0]}


def evaluate(model, inputs: list, X: np.ndarray, vectorized: bool = False, workers: int = 1) -> dict:
    """Outputs of ``model`` at the input values ``X``.

    Parameters
    ----------
    model : callable
    inputs : list of validated inputs
    X : ndarray of shape (n_draws, n_inputs)
        Input values (not unit-cube draws).
    vectorized : bool
    workers : int
        Processes; the result does not depend on it.

    Returns
    -------
    dict of ndarray of shape (n_draws,)
    """
    names = [i.name for i in inputs]
    size = CHUNK_VECTORIZED if vectorized else CHUNK
    chunks = [X[s:s + size] for s in range(0, X.shape[0], size)]
    if isinstance(workers, bool) or not isinstance(workers, numbers.Integral) or workers < 1:
        raise InputError("sensitivity.workers", f"must be a positive integer, got {workers!r}")
    if workers == 1:
        parts = [_chunk_eval(model, names, c, vectorized) for c in chunks]
    else:
        with ProcessPoolExecutor(max_workers=int(workers)) as ex:
            parts = list(ex.map(_chunk_eval, [model] * len(chunks), [names] * len(chunks), chunks,
                                [vectorized] * len(chunks)))
    out = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    for k, v in out.items():
        bad = ~np.isfinite(v)
        if bad.any():
            raise SolverError(f"sensitivity: output {k!r} is not finite in {int(bad.sum())} of {v.size} draws (report "
                              "a threshold that no discount factor below one reaches as 1)")
    return out


def _to_values(inputs, U):
    return np.column_stack([inp.ppf(U[:, j]) for j, inp in enumerate(inputs)])


def _problem(inputs):
    return {"num_vars": len(inputs), "names": [i.name for i in inputs], "bounds": [[0.0, 1.0]] * len(inputs)}


@dataclass(frozen=True)
class SobolResult:
    """Sobol indices of each output.

    Parameters
    ----------
    inputs : tuple of str
    outputs : tuple of str
    first, total : dict of str -> ndarray of shape (n_inputs,)
        First-order and total indices per output.
    first_low, first_high, total_low, total_high : dict of str -> ndarray of shape (n_inputs,)
        Bootstrap confidence bounds (SALib's normal-approximation half-widths around the estimate).
    confidence : float
    n_base, n_evaluations, seed : int
    mean, std : dict of str -> float
        Mean and standard deviation of each output over the evaluations.
    """

    inputs: tuple
    outputs: tuple
    first: dict
    total: dict
    first_low: dict
    first_high: dict
    total_low: dict
    total_high: dict
    confidence: float
    n_base: int
    n_evaluations: int
    seed: int
    mean: dict = field(default_factory=dict)
    std: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        conv = lambda d: {k: np.asarray(v).tolist() for k, v in d.items()}  # noqa: E731
        return {"inputs": list(self.inputs), "outputs": list(self.outputs), "first": conv(self.first),
                "total": conv(self.total), "first_low": conv(self.first_low), "first_high": conv(self.first_high),
                "total_low": conv(self.total_low), "total_high": conv(self.total_high), "confidence": self.confidence,
                "n_base": self.n_base, "n_evaluations": self.n_evaluations, "seed": self.seed,
                "mean": dict(self.mean), "std": dict(self.std), "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> SobolResult:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        SobolResult
        """
        conv = lambda x: {k: np.asarray(v, float) for k, v in x.items()}  # noqa: E731
        return cls(tuple(d["inputs"]), tuple(d["outputs"]), conv(d["first"]), conv(d["total"]), conv(d["first_low"]),
                   conv(d["first_high"]), conv(d["total_low"]), conv(d["total_high"]), float(d["confidence"]),
                   int(d["n_base"]), int(d["n_evaluations"]), int(d["seed"]), dict(d["mean"]), dict(d["std"]))


def sobol_indices(model, inputs: dict, n_base: int = 1024, seed: int = 0, vectorized: bool = False,
                  workers: int = 1, n_resamples: int = 200, confidence: float = 0.95) -> SobolResult:
    """First-order and total Sobol indices with bootstrap intervals.

    Parameters
    ----------
    model : callable
        See the module notes.
    inputs : dict
        Uncertain inputs (see :func:`uncertain_inputs`).
    n_base : int
        Base samples ``N`` (a power of two); the model is evaluated ``N (d + 2)`` times for ``d`` inputs.
    seed : int
    vectorized : bool
    workers : int
    n_resamples : int
        Bootstrap resamples of the intervals.
    confidence : float in (0, 1)

    Returns
    -------
    SobolResult
    """
    from SALib.analyze import sobol as sobol_analyze
    from SALib.sample import sobol as sobol_sample

    inp = uncertain_inputs(inputs)
    if isinstance(n_base, bool) or not isinstance(n_base, numbers.Integral) or n_base < 2 or n_base & (n_base - 1):
        raise InputError("sensitivity.n_base", f"must be a power of two (at least 2), got {n_base!r}")
    if not 0 < confidence < 1:
        raise InputError("sensitivity.confidence", f"must be in (0, 1), got {confidence!r}")
    s_sample, s_boot = _seeds(seed, 2)
    prob = _problem(inp)
    U = sobol_sample.sample(prob, int(n_base), calc_second_order=False, seed=s_sample)
    Y = evaluate(model, inp, _to_values(inp, U), vectorized, workers)
    res = {k: {} for k in ("first", "total", "first_low", "first_high", "total_low", "total_high")}
    mean, std = {}, {}
    for k, y in Y.items():
        if np.ptp(y) == 0:
            z = np.zeros(len(inp))
            for key in res:
                res[key][k] = z
        else:
            si = sobol_analyze.analyze(prob, y, calc_second_order=False, num_resamples=int(n_resamples),
                                       conf_level=confidence, seed=s_boot)
            res["first"][k], res["total"][k] = np.asarray(si["S1"]), np.asarray(si["ST"])
            res["first_low"][k] = res["first"][k] - np.asarray(si["S1_conf"])
            res["first_high"][k] = res["first"][k] + np.asarray(si["S1_conf"])
            res["total_low"][k] = res["total"][k] - np.asarray(si["ST_conf"])
            res["total_high"][k] = res["total"][k] + np.asarray(si["ST_conf"])
        mean[k], std[k] = float(y.mean()), float(y.std())
    return SobolResult(tuple(i.name for i in inp), tuple(Y), res["first"], res["total"], res["first_low"],
                       res["first_high"], res["total_low"], res["total_high"], float(confidence), int(n_base),
                       int(U.shape[0]), int(seed), mean, std)


@dataclass(frozen=True)
class MorrisResult:
    """Morris elementary-effect screening of each output.

    Parameters
    ----------
    inputs, outputs : tuple of str
    mu_star, mu_star_conf, mu, sigma : dict of str -> ndarray of shape (n_inputs,)
        Mean absolute effect, its bootstrap half-width, mean effect and the effects' standard
        deviation (a step is a fraction of each input's quantile range).
    n_trajectories, n_evaluations, seed : int
    """

    inputs: tuple
    outputs: tuple
    mu_star: dict
    mu_star_conf: dict
    mu: dict
    sigma: dict
    n_trajectories: int
    n_evaluations: int
    seed: int

    def ranking(self, output: str) -> list[str]:
        """Inputs by decreasing ``mu_star``.

        Parameters
        ----------
        output : str

        Returns
        -------
        list of str
        """
        order = np.argsort(-self.mu_star[output], kind="stable")
        return [self.inputs[i] for i in order]

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        conv = lambda d: {k: np.asarray(v).tolist() for k, v in d.items()}  # noqa: E731
        return {"inputs": list(self.inputs), "outputs": list(self.outputs), "mu_star": conv(self.mu_star),
                "mu_star_conf": conv(self.mu_star_conf), "mu": conv(self.mu), "sigma": conv(self.sigma),
                "n_trajectories": self.n_trajectories, "n_evaluations": self.n_evaluations, "seed": self.seed}

    @classmethod
    def from_dict(cls, d: dict) -> MorrisResult:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        MorrisResult
        """
        conv = lambda x: {k: np.asarray(v, float) for k, v in x.items()}  # noqa: E731
        return cls(tuple(d["inputs"]), tuple(d["outputs"]), conv(d["mu_star"]), conv(d["mu_star_conf"]),
                   conv(d["mu"]), conv(d["sigma"]), int(d["n_trajectories"]), int(d["n_evaluations"]), int(d["seed"]))


def morris_screening(model, inputs: dict, n_trajectories: int = 50, num_levels: int = 4, seed: int = 0,
                     vectorized: bool = False, workers: int = 1, confidence: float = 0.95) -> MorrisResult:
    """Elementary-effect screening (Morris, 1991).

    Parameters
    ----------
    model : callable
    inputs : dict
    n_trajectories : int
        Trajectories; the model is evaluated ``n_trajectories (d + 1)`` times.
    num_levels : int
        Grid levels of each input's quantile scale (even).
    seed : int
    vectorized : bool
    workers : int
    confidence : float in (0, 1)

    Returns
    -------
    MorrisResult
    """
    from SALib.analyze import morris as morris_analyze
    from SALib.sample import morris as morris_sample

    inp = uncertain_inputs(inputs)
    if isinstance(n_trajectories, bool) or not isinstance(n_trajectories, numbers.Integral) or n_trajectories < 2:
        raise InputError("sensitivity.n_trajectories", f"must be an integer of at least 2, got {n_trajectories!r}")
    if num_levels not in (2, 4, 6, 8, 10, 12):
        raise InputError("sensitivity.num_levels", f"must be an even number from 2 to 12, got {num_levels!r}")
    s_sample, s_boot = _seeds(seed, 2)
    prob = _problem(inp)
    U = morris_sample.sample(prob, int(n_trajectories), num_levels=int(num_levels), seed=s_sample)
    # the unit-cube corners map to infinite quantiles for unbounded distributions: stay inside
    Y = evaluate(model, inp, _to_values(inp, np.clip(U, 1e-9, 1 - 1e-9)), vectorized, workers)
    out = {k: {} for k in ("mu_star", "mu_star_conf", "mu", "sigma")}
    for k, y in Y.items():
        si = morris_analyze.analyze(prob, U, y, num_resamples=200, conf_level=confidence, num_levels=int(num_levels),
                                    seed=s_boot)
        for key in out:
            out[key][k] = np.asarray(si[key], dtype=float)
    return MorrisResult(tuple(i.name for i in inp), tuple(Y), out["mu_star"], out["mu_star_conf"], out["mu"],
                        out["sigma"], int(n_trajectories), int(U.shape[0]), int(seed))


@dataclass(frozen=True)
class ShareResult(CautionedTable):
    """Share of draws in which the merger makes coordination easier.

    Parameters
    ----------
    share, low, high : float
        Estimate and Wilson interval.
    n_draws, n_easier, seed : int
    confidence : float
    """

    share: float
    low: float
    high: float
    n_draws: int
    n_easier: int
    seed: int
    confidence: float


def share_easier(model, inputs: dict, n_draws: int = 4096, seed: int = 0, before: str = "before",
                 after: str = "after", vectorized: bool = False, workers: int = 1,
                 confidence: float = 0.95) -> ShareResult:
    """Share of independent draws with ``after < before`` (the merger lowers the threshold).

    Parameters
    ----------
    model : callable
        Must return the outputs ``before`` and ``after``.
    inputs : dict
    n_draws : int
    seed : int
    before, after : str
        Output names.
    vectorized : bool
    workers : int
    confidence : float in (0, 1)

    Returns
    -------
    ShareResult
    """
    inp = uncertain_inputs(inputs)
    if isinstance(n_draws, bool) or not isinstance(n_draws, numbers.Integral) or n_draws < 1:
        raise InputError("sensitivity.n_draws", f"must be a positive integer, got {n_draws!r}")
    (s,) = _seeds(seed, 1)
    U = np.random.default_rng(s).random((int(n_draws), len(inp)))
    Y = evaluate(model, inp, _to_values(inp, U), vectorized, workers)
    for k in (before, after):
        if k not in Y:
            raise InputError("sensitivity.outputs", f"the model returns no output {k!r}; it returns {', '.join(Y)}")
    scale = np.maximum(1.0, np.maximum(np.abs(Y[before]), np.abs(Y[after])))
    k = int((Y[after] < Y[before] - 1e-12 * scale).sum())
    est = wilson_estimate(k, int(n_draws), confidence)
    return ShareResult(est.value, est.low, est.high, int(n_draws), k, int(seed), float(confidence))
