"""What an assessment is asked: the experiment tables of ``kind = "assess"`` and the checks of every setting.

:func:`assessment_from_dict` reads an experiment's tables into the arguments of :func:`sim.antitrust.assess.assess`;
:func:`check_options` and :func:`check_sensitivity` validate the ``[assess]`` settings and the sensitivity ranges;
:func:`lineup_entries` and :func:`scaled_monitoring` build the line-up and the monitoring settings the simulations
use. Every error is an :class:`~sim.core.errors.InputError` naming the key path.
"""

from __future__ import annotations

import numpy as np

from sim.antitrust.calibration import MarketData, data_from_dict
from sim.antitrust.merger import merger_from_dict
from sim.core.errors import InputError
from sim.core.params import Boolean, Integer, Options, Real
from sim.core.tables import refuse_unknown
from sim.core.values import parse_values
from sim.models.market import market_from_dict
from sim.models.monitoring import NORMAL_SIGMA_MAX, Monitoring
from strategies.registry import lineup_from_tables

__all__ = ["AGREEMENTS", "ASSESS_TABLES", "SCHEME_NAMES", "SENSITIVITY_INPUTS", "assessment_from_dict",
           "check_options", "check_sensitivity", "has_noise", "lineup_entries", "scaled_monitoring"]

SCHEME_NAMES = {"grim": "grim trigger", "finite": "Nash reversion", "stick_carrot": "stick and carrot"}
AGREEMENTS = ("joint", "symmetric", "proportional")
#: calibration inputs a sensitivity range may vary (with a [data] table)
SENSITIVITY_INPUTS = ("margin", "elasticity", "market_elasticity", "size")
ASSESS_TABLES = ("experiment", "market", "data", "merger", "collusion", "monitoring", "strategies", "run",
                 "assess")
_EXPERIMENT_KEYS = ("name", "kind", "description", "currency", "period")
_ASSESS_KEYS = ("scheme", "length", "punishments", "deltas", "partial", "growth", "simulate", "transparency_scale",
                "sensitivity", "payoff_sets", "other_markets", "pair_mergers")
_SENS_KEYS = ("margin", "elasticity", "market_elasticity", "size", "delta", "noise")
_NOISE_PARAMS = ("sigma", "perception_error", "implementation_error")


def _list_of(key: str, value, element, min_len: int = 0) -> list:
    if isinstance(value, tuple | np.ndarray):
        value = list(value)
    if not isinstance(value, list):
        raise InputError(key, f"must be a list, got {value!r}")
    if len(value) < min_len:
        raise InputError(key, f"must have at least {min_len} values, got {len(value)}")
    return [element.check(f"{key}[{k + 1}]", v) for k, v in enumerate(value)]


def _range(key: str, value, element) -> tuple[np.ndarray, list | None, bool]:
    """Values of a sensitivity range in the range syntax of experiment files, the one of ``[sweep]``
    (:func:`sim.core.values.parse_values`): a list of values, ``{start, stop, num}`` (evenly spaced, both
    ends included), ``{start, stop, step}``, ``{start, stop, num, log = true}`` or ``{values = [...],
    labels = [...]}``. Between 2 and 1000 values, each checked by ``element`` (key ``key[k]``,
    counted from 1); returned in increasing order with their labels (None unless given) and whether
    the range is logarithmic."""

    vals, labels, log = parse_values(value, key, max_values=1000)
    if len(vals) < 2:
        raise InputError(key, f"must have at least 2 values (a sensitivity range), got {len(vals)}")
    checked = [element.check(f"{key}[{k + 1}]", v) for k, v in enumerate(vals)]
    order = np.argsort(checked, kind="stable")
    given = isinstance(value, dict) and "labels" in value
    return (np.asarray(checked, dtype=float)[order], [labels[i] for i in order] if given else None, bool(log))


def check_options(scheme, length, punishments, deltas, partial, growth, simulate_flag, agreement,
                  transparency_scale=2.0, prefix: str = "assess") -> dict:
    """Validate the settings of ``[assess]`` and ``collusion.agreement``.

    Parameters
    ----------
    scheme, length, punishments, deltas, partial, growth : object
        As in :func:`sim.antitrust.assess.assess`.
    simulate_flag : object
        ``assess.simulate``.
    agreement : object
        ``collusion.agreement``.
    transparency_scale : object
        ``assess.transparency_scale``.
    prefix : str
        Key path of the settings' table in error messages.

    Returns
    -------
    dict
        ``scheme``, ``length``, ``punishments`` (sorted, with ``length``), ``deltas`` (sorted), ``partial``,
        ``growth``, ``simulate``, ``agreement``, ``transparency_scale``.

    Raises
    ------
    InputError
        Naming the setting, its allowed range and the value given.
    """
    scheme = Options(*SCHEME_NAMES).check(f"{prefix}.scheme", scheme)
    Ts = _list_of(f"{prefix}.punishments", punishments, Integer(1, 10_000))
    if scheme == "finite":
        if length is None:
            raise InputError(f"{prefix}.length", "missing: the punishment length T of scheme = 'finite'")
        length = Integer(1, 10_000).check(f"{prefix}.length", length)
        if length not in Ts:
            Ts = [*Ts, length]
    elif length is not None:
        raise InputError(f"{prefix}.length", f"only used with scheme = 'finite', not {scheme!r}")
    Ts = sorted(set(Ts))
    ds = _list_of(f"{prefix}.deltas", deltas, Real(0, 1, closed="neither"))
    if partial is None:
        partial = ["grim", "finite"] if Ts else ["grim"]
    parts = _list_of(f"{prefix}.partial", partial, Options(*SCHEME_NAMES))
    if "finite" in parts and not Ts:
        raise InputError(f"{prefix}.partial", "'finite' needs at least one punishment length in assess.punishments")
    # a declining market states a negative rate; below -1 demand would vanish within one period
    growth = Real(-1, 1, closed="neither").check(f"{prefix}.growth", growth)
    simulate_flag = Boolean().check(f"{prefix}.simulate", simulate_flag)
    tscale = Real(0, 100, closed="right").check(f"{prefix}.transparency_scale", transparency_scale)
    if tscale == 1.0:
        raise InputError(f"{prefix}.transparency_scale", "must differ from 1 (the experiment's own noise): above 1 "
                                                         "more noise, below 1 less, got 1")
    if agreement not in AGREEMENTS:
        raise InputError("collusion.agreement", f"must be one of {', '.join(map(repr, AGREEMENTS))} (agreed actions "
                                                f"do not carry over to the post-merger market), got {agreement!r}")
    return {"scheme": scheme, "length": length, "punishments": Ts, "deltas": sorted(set(ds)),
            "partial": list(dict.fromkeys(parts)), "growth": growth, "simulate": simulate_flag,
            "agreement": agreement, "transparency_scale": tscale}


def check_sensitivity(sens, data, prefix: str = "assess.sensitivity") -> tuple[dict, dict]:
    """Validate the sensitivity ranges.

    Parameters
    ----------
    sens : dict or None
        ``[assess.sensitivity]``: ranges of ``margin``, ``elasticity``, ``market_elasticity``, ``size``
        (calibration inputs), ``delta`` and ``noise``.
    data : MarketData or None
        The observed data the market is calibrated from (None: a given market, no calibration input to vary).
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    values : dict
        Name -> ndarray of shape (n_values,), increasing.
    axes : dict
        Name -> ``{"labels": list of str or None, "log": bool}``.
    """
    if sens is None:
        return {}, {}
    refuse_unknown(sens, prefix, _SENS_KEYS)
    out, axes = {}, {}
    for name in SENSITIVITY_INPUTS:
        if name not in sens:
            continue
        if data is None:
            raise InputError(f"{prefix}.{name}", "varies a calibration input, so the market must come from a [data] "
                                                 "table of observations (not a [market] table)")
        element = {"margin": Real(0, 1, closed="neither"), "size": Real(0, None, closed="neither")}.get(
            name, Real(None, 0, closed="neither"))
        vals, labels, log = _range(f"{prefix}.{name}", sens[name], element)
        if name == "size":
            if not data.has_potential_market:
                raise InputError(f"{prefix}.size", "the potential market size is an input of logit demand only")
            sold = float(data.validated("data")["quantities"].sum())
            if vals[0] <= sold:
                raise InputError(f"{prefix}.size", f"every potential market size must exceed the quantities sold "
                                                   f"({sold:g}), got {vals[0]:g}")
        # every value must give valid data (a homogeneous good has no per-product own elasticity, ...)
        try:
            data.with_input(name, float(vals[0])).validated("data")
        except InputError as exc:
            raise InputError(f"{prefix}.{name}", exc.message) from None
        out[name] = vals
        axes[name] = {"labels": labels, "log": log}
    for name, element in (("delta", Real(0, 1, closed="neither")), ("noise", Real(0, 100))):
        if name in sens:
            out[name], labels, log = _range(f"{prefix}.{name}", sens[name], element)
            axes[name] = {"labels": labels, "log": log}
    return out, axes


def lineup_entries(lineup, n_firms: int) -> list:
    """One ``[[strategies]]`` entry per firm, validated.

    Parameters
    ----------
    lineup : list of dict or None
        The experiment's ``[[strategies]]`` entries (``seats`` copies of each); None: grim trigger for every firm.
    n_firms : int

    Returns
    -------
    list of dict
        n_firms entries, without ``seats``.
    """
    if lineup is None:
        return [{"strategy": "grim_trigger"} for _ in range(n_firms)]
    if not isinstance(lineup, list) or not lineup or not all(isinstance(e, dict) for e in lineup):
        raise InputError("strategies", "must be a non-empty list of [[strategies]] entries")
    lineup_from_tables(lineup, n_firms, "strategies")
    out = []
    for e in lineup:
        seats = int(e.get("seats", 1))
        out.extend({k: v for k, v in e.items() if k != "seats"} for _ in range(seats))
    return out


def _noise_bounds(p: dict) -> dict:
    """Largest value of each noise parameter (the :class:`~sim.models.monitoring.Monitoring` constraints; a
    normal shock's sigma is capped at 1/3)."""

    out = {k: Monitoring._constraints[k].high for k in _NOISE_PARAMS}
    if p["noise"] == "normal":
        out["sigma"] = min(out["sigma"], NORMAL_SIGMA_MAX)
    return out


def scaled_monitoring(mon: Monitoring, k: float, key: str) -> Monitoring:
    """The monitoring with every noise parameter multiplied by ``k``, validated.

    Nothing is clipped: a scale that takes a parameter above its range raises :class:`InputError` under ``key``
    (the setting that asked for the scale), naming the parameter, its range, the scaled value and the largest
    scale the experiment's noise allows.

    Parameters
    ----------
    mon : Monitoring
    k : float
        The scale.
    key : str
        Key path of the setting that asked for the scale.

    Returns
    -------
    Monitoring
    """
    p = mon.validated()
    bounds = _noise_bounds(p)
    for name in _NOISE_PARAMS:
        v = p[name] * k
        if v > bounds[name]:
            largest = min(bounds[n] / p[n] for n in _NOISE_PARAMS if p[n] > 0)
            shock = f" with noise = '{p['noise']}'" if name == "sigma" else ""
            raise InputError(key, f"scale {k:g} takes monitoring.{name} from {p[name]:g} to {v:g}, outside its "
                                  f"range [0, {bounds[name]:.4g}]{shock}; with this monitoring the scale must be at "
                                  f"most {largest:.4g}")
    out = Monitoring(signal=p["signal"], noise=p["noise"], **{n: p[n] * k for n in _NOISE_PARAMS})
    out.validated(key)
    return out


def has_noise(mon: Monitoring) -> bool:
    """Whether any monitoring noise parameter is positive.

    Parameters
    ----------
    mon : Monitoring

    Returns
    -------
    bool
    """
    p = mon.validated()
    return p["sigma"] > 0 or p["perception_error"] > 0 or p["implementation_error"] > 0


def _experiment_settings(doc: dict) -> dict:
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", _EXPERIMENT_KEYS)
    if "kind" in exp and exp["kind"] != "assess":
        raise InputError("experiment.kind", f"this command runs kind = 'assess' experiments, got {exp['kind']!r}")
    name = exp.get("name", "assessment")
    if not isinstance(name, str) or not name.strip():
        raise InputError("experiment.name", f"must be a non-empty string, got {name!r}")
    out = {"name": name}
    for k in ("currency", "period"):
        v = exp.get(k)
        if v is not None and (not isinstance(v, str) or not v.strip()):
            raise InputError(f"experiment.{k}", f"must be a non-empty string, got {v!r}")
        out[k] = v
    return out


def assessment_from_dict(doc: dict) -> dict:
    """Read the tables of a ``kind = "assess"`` experiment.

    Tables: ``[experiment]`` (``name``, ``kind``, ``description`` and, optionally, the ``currency`` and the
    ``period`` money and time are counted in), ``[market]`` (a market given directly) or ``[data]`` (observations
    to calibrate from, see :class:`~sim.antitrust.calibration.MarketData`), ``[merger]``, ``[collusion]``
    (``agreement``), ``[monitoring]``, ``[[strategies]]`` (the pre-merger line-up), ``[run]`` and ``[assess]``
    (``scheme``, ``length``, ``punishments``, ``deltas``, ``partial``, ``growth``, ``simulate``,
    ``transparency_scale``, a ``[assess.sensitivity]`` table of ranges: lists of values or ``{start, stop,
    num}`` / ``{start, stop, step}``, an optional ``[assess.payoff_sets]`` table (``grid``, ``directions``,
    ``tolerance``: the equilibrium payoff sets before and after) and optional ``[[assess.other_markets]]`` entries
    (``market``, ``firms``, ``label``, ``growth``: markets where the firms also meet, for the multimarket-contact
    row)). Unknown tables and keys raise :class:`InputError` naming them.

    Parameters
    ----------
    doc : dict
        The experiment's tables.

    Returns
    -------
    dict
        Keyword arguments of :func:`sim.antitrust.assess.assess` (``source``, ``merger``, ...) plus ``name``,
        ``currency`` and ``period``.
    """
    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    for k in doc:
        if k in ("sweep", "report"):
            raise InputError(k, "supergame assess runs one assessment; run a sweep (or a [report] table) with "
                                "supergame run FILE")
        if k not in ASSESS_TABLES:
            raise InputError(k, f"unknown table for an assessment; allowed: {', '.join(ASSESS_TABLES)}")
    about = _experiment_settings(doc)
    if ("market" in doc) == ("data" in doc):
        raise InputError("data", "give either a [data] table of observations to calibrate from or a [market] table, "
                                 "not both" if "market" in doc else "missing: give a [data] table of observations "
                                                                    "(or a [market] table)")
    source = data_from_dict(doc["data"]) if "data" in doc else market_from_dict(doc["market"])
    if "merger" not in doc:
        raise InputError("merger", "missing: the [merger] table names the merging firms")
    merger = merger_from_dict(doc["merger"])
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", ("agreement",))
    a = refuse_unknown(doc.get("assess", {}), "assess", _ASSESS_KEYS)
    out = {"source": source, "merger": merger, "monitoring": doc.get("monitoring"), "lineup": doc.get("strategies"),
           "run": doc.get("run"), "agreement": coll.get("agreement", "joint")}
    for k in _ASSESS_KEYS:
        if k in a:
            out[k] = a[k]
    return out | about


def observed_input(data: MarketData, name: str):
    """The observed value of a calibration input that a sensitivity range varies.

    Parameters
    ----------
    data : MarketData
    name : str
        ``margin``, ``elasticity``, ``market_elasticity`` or ``size``.

    Returns
    -------
    float or None
        None when the input is not given as one number.
    """
    if name == "size":
        return float(data.validated("data")["size"])
    v = getattr(data, name)
    if v is None or isinstance(v, list | tuple | np.ndarray):
        return None
    return float(v)
