"""The optional tables of the ``thresholds`` kind: ``[enforcement]``, ``[demand_states]`` and ``[contact]``.

Each table adds a part to the thresholds analysis (see :mod:`sim.theory.analysis`). This module reads and
validates the tables (errors name the key path: ``enforcement.fine``, ``demand_states.transition``,
``contact.markets[2].firms``; list entries counted from 1), names the metric columns each part adds and
flattens a result into them. Without these tables the thresholds kind's columns are unchanged.

Columns (``j``: position in ``thresholds.deltas``; ``s``: demand state; ``m``: market of the contact table;
all counted from 1):

* enforcement -- ``enforcement.threshold`` (``.firmN``), ``enforcement.binding``, ``enforcement.detection_rate``,
  ``enforcement.conviction_rate``, ``enforcement.expected_fine.firmN``, ``enforcement.expected_spell``; per
  ``j``: ``enforcement.deterrence_fine[j]`` (``.firmN``), ``enforcement.discounted_fines.firmN[j]``,
  ``enforcement.sustainable[j]``, ``enforcement.slack[j]`` (``.firmN``), ``enforcement.partial_gain[j]``,
  ``enforcement.partial_price[j]``;
* demand states -- ``states.threshold`` (``[s]``), ``states.binding_state``, ``states.binding``,
  ``states.agreed_price[s]``, ``states.nash_price[s]``; per ``j``: ``states.full_collusion[j]``,
  ``states.price_cyclicality[j]``, ``states.price[s][j]``, ``states.weight[s][j]``;
* contact -- ``contact.common_threshold``, ``contact.highest_standalone``, ``contact.binding``,
  ``contact.threshold[m]``, ``contact.pooled.firmN``; per ``j``: ``contact.together[j]``,
  ``contact.alone[m][j]``, ``contact.weight[m][j]``, ``contact.value[j]``, ``contact.standalone_value[j]``.
"""

from __future__ import annotations

import math
import re

from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.theory.analysis import ThresholdsResult
from sim.theory.demand_states import DemandStates, markets_by_state
from sim.theory.enforcement import Enforcement
from sim.theory.enforcement_section import EnforcementQuestion
from sim.theory.multimarket import ContactGame
from sim.theory.states_section import StatesQuestion

__all__ = ["PART_TABLES", "describe_parts", "part_metrics", "part_names", "prepare_parts"]

#: the tables this module reads
PART_TABLES = ("enforcement", "demand_states", "contact")
_CYCLE_CODE = {"procyclical": 1.0, "countercyclical": -1.0, "acyclical": 0.0}
_MOST_GRID = 200


def _grid(key: str, values) -> tuple:
    if not isinstance(values, list) or not values:
        raise InputError(key, f"must be a non-empty list of numbers, got {values!r}")
    if len(values) > _MOST_GRID:
        raise InputError(key, f"lists {len(values)} values, more than {_MOST_GRID}")
    return tuple(values)


def _enforcement(table, deltas: list) -> EnforcementQuestion:
    if not isinstance(table, dict):
        raise InputError("enforcement", f"must be a table, got {table!r}")
    d = dict(table)
    frontier = refuse_unknown(d.pop("frontier", {}), "enforcement.frontier", ("detection", "fines"))
    enf = Enforcement.from_dict(d, "enforcement")
    if not frontier:
        return EnforcementQuestion(enf)
    if set(frontier) != {"detection", "fines"}:
        missing = "detection" if "detection" not in frontier else "fines"
        raise InputError(f"enforcement.frontier.{missing}", "missing: the frontier needs detection rates and fines")
    if not deltas:
        raise InputError("thresholds.deltas", "the deterrence frontier ([enforcement.frontier]) needs a discount "
                                              "factor")
    det = _grid("enforcement.frontier.detection", frontier["detection"])
    fines = _grid("enforcement.frontier.fines", frontier["fines"])
    for key, values, top in (("enforcement.frontier.detection", det, 1.0), ("enforcement.frontier.fines", fines, 1e9)):
        for k, v in enumerate(values):
            if isinstance(v, bool) or not isinstance(v, int | float) or not 0.0 <= float(v) <= top:
                raise InputError(f"{key}[{k + 1}]", f"must be a number in [0, {top:g}], got {v!r}")
    return EnforcementQuestion(enf, tuple(float(x) for x in det), tuple(float(x) for x in fines))


def _states(table, market, agreement: str) -> StatesQuestion:
    if not isinstance(table, dict):
        raise InputError("demand_states", f"must be a table, got {table!r}")
    if agreement == "given":
        raise InputError("collusion.actions", "demand states need an agreement rule (joint, symmetric or "
                                              "proportional) to set the agreement in every state")
    d = dict(table)
    parameter = d.pop("parameter", None)
    values = d.pop("values", None)
    states = DemandStates.from_dict(d, "demand_states")
    if not isinstance(parameter, str):
        raise InputError("demand_states.parameter", f"missing: the market parameter that moves with the state "
                                                    f"(e.g. 'intercept'), got {parameter!r}")
    if not isinstance(values, list) or len(values) != states.n_states:
        raise InputError("demand_states.values", f"must list one value per state ({states.n_states}), got {values!r}")
    try:
        markets_by_state(market, parameter, values)
    except InputError as e:
        # a state's market is the file's [market] with this state's value: name the value
        key = re.sub(r"^demand_states\.markets\[(\d+)\].*$", lambda m: f"demand_states.values[{m.group(1)}]", e.key)
        raise InputError(_one_based(key), e.message) from None
    return StatesQuestion(states, parameter, tuple(float(v) for v in values))


def _one_based(key: str) -> str:
    """A library key with 0-based list positions (``markets[0]``) counted from 1, as the file counts."""
    return re.sub(r"\[(\d+)\]", lambda m: f"[{int(m.group(1)) + 1}]", key)


def _contact(table, market_table: dict, agreement: str) -> ContactGame:
    t = refuse_unknown(table, "contact", ("firms", "agreement", "markets"))
    markets = t.get("markets")
    if isinstance(markets, list):
        # a market without its own settings is the experiment's [market]
        markets = [dict(m, market=market_table) if isinstance(m, dict) and "market" not in m else m
                   for m in markets]
    if agreement == "given" and "agreement" not in t:
        raise InputError("contact.agreement", "missing: the agreed actions of [collusion] describe the [market] "
                                              "alone; give the rule of every market (joint, symmetric or "
                                              "proportional)")
    rule = t.get("agreement", agreement)
    try:
        return ContactGame(t.get("firms"), markets, rule)
    except InputError as e:
        raise InputError("contact." + _one_based(e.key), e.message) from None


def prepare_parts(doc: dict, market, agreement: str, deltas: list) -> dict:
    """Validate the optional tables of a thresholds document.

    Parameters
    ----------
    doc : dict
        The experiment document.
    market : Market
        The experiment's ``[market]``.
    agreement : str
    deltas : list of float
        The validated ``thresholds.deltas``.

    Returns
    -------
    dict
        ``enforcement`` (EnforcementQuestion or None), ``demand_states`` (StatesQuestion or None) and
        ``contact`` (ContactGame or None).
    """
    out: dict = {name: None for name in PART_TABLES}
    if "enforcement" in doc:
        out["enforcement"] = _enforcement(doc["enforcement"], deltas)
    if "demand_states" in doc:
        out["demand_states"] = _states(doc["demand_states"], market, agreement)
    if "contact" in doc:
        out["contact"] = _contact(doc["contact"], doc["market"], agreement)
    return out


def _firms(stem: str, n: int, tail: str = "") -> list[str]:
    return [f"{stem}.firm{i + 1}{tail}" for i in range(n)]


def _enforcement_names(n: int, n_deltas: int) -> list[str]:
    out = ["enforcement.detection_rate", "enforcement.conviction_rate", "enforcement.threshold",
           "enforcement.binding", *_firms("enforcement.threshold", n), *_firms("enforcement.expected_fine", n),
           "enforcement.expected_spell"]
    for j in range(1, n_deltas + 1):
        out += [f"enforcement.deterrence_fine[{j}]", *_firms("enforcement.deterrence_fine", n, f"[{j}]"),
                *_firms("enforcement.discounted_fines", n, f"[{j}]"), f"enforcement.sustainable[{j}]",
                f"enforcement.slack[{j}]", *_firms("enforcement.slack", n, f"[{j}]"),
                f"enforcement.partial_gain[{j}]", f"enforcement.partial_price[{j}]"]
    return out


def _state_deltas(q: StatesQuestion, deltas) -> list[int]:
    return [j + 1 for j, d in enumerate(deltas) if q.states.effective_discount(float(d)) < 1.0]


def _contact_deltas(game: ContactGame, deltas) -> list[int]:
    return [j + 1 for j, d in enumerate(deltas) if all(float(d) * (1.0 + cm.growth) < 1.0 for cm in game.markets)]


def _states_names(q: StatesQuestion, deltas) -> list[str]:
    S = q.states.n_states
    out = ["states.threshold", "states.binding_state", "states.binding"]
    out += [f"states.{x}[{s}]" for x in ("threshold", "agreed_price", "nash_price") for s in range(1, S + 1)]
    for j in _state_deltas(q, deltas):
        out += [f"states.full_collusion[{j}]", f"states.price_cyclicality[{j}]"]
        out += [f"states.{x}[{s}][{j}]" for x in ("price", "weight") for s in range(1, S + 1)]
    return out


def _contact_names(game: ContactGame, deltas) -> list[str]:
    M = game.n_markets
    out = ["contact.common_threshold", "contact.highest_standalone", "contact.binding"]
    out += [f"contact.threshold[{m}]" for m in range(1, M + 1)] + _firms("contact.pooled", game.n_firms)
    for j in _contact_deltas(game, deltas):
        out.append(f"contact.together[{j}]")
        out += [f"contact.{x}[{m}][{j}]" for x in ("alone", "weight") for m in range(1, M + 1)]
        out += [f"contact.value[{j}]", f"contact.standalone_value[{j}]"]
    return out


def part_names(cfg: dict) -> list[str]:
    """The metric columns the optional tables add (empty without them).

    Parameters
    ----------
    cfg : dict
        The prepared thresholds cell (its ``spec``, ``n_firms`` and ``deltas``).

    Returns
    -------
    list of str
    """
    spec, deltas = cfg["spec"], cfg["deltas"]
    out: list[str] = []
    if spec.enforcement is not None:
        out += _enforcement_names(cfg["n_firms"], len(deltas))
    if spec.demand_states is not None:
        out += _states_names(spec.demand_states, deltas)
    if spec.contact is not None:
        out += _contact_names(spec.contact, deltas)
    return out


def _num(x) -> float:
    return math.nan if x is None else float(x)


def _enforcement_metrics(sec, m: dict) -> None:
    a = sec.overall
    m["enforcement.detection_rate"] = a.detection_rate
    m["enforcement.conviction_rate"] = a.conviction_rate
    m["enforcement.threshold"] = a.market
    m["enforcement.binding"] = a.binding + 1
    for i, x in enumerate(a.per_firm):
        m[f"enforcement.threshold.firm{i + 1}"] = float(x)
    for i, x in enumerate(a.expected_fine):
        m[f"enforcement.expected_fine.firm{i + 1}"] = float(x)
    m["enforcement.expected_spell"] = a.expected_spell
    for j, (b, p) in enumerate(zip(sec.at_delta, sec.partial, strict=True), start=1):
        m[f"enforcement.deterrence_fine[{j}]"] = _num(b.market_deterrence_fine)
        for i in range(len(b.per_firm)):
            m[f"enforcement.deterrence_fine.firm{i + 1}[{j}]"] = float(b.deterrence_fine[i])
            m[f"enforcement.discounted_fines.firm{i + 1}[{j}]"] = float(b.discounted_fines[i])
        m[f"enforcement.sustainable[{j}]"] = float(bool(b.sustainable))
        m[f"enforcement.slack[{j}]"] = float(sec.slack[j - 1].min())
        for i, x in enumerate(sec.slack[j - 1]):
            m[f"enforcement.slack.firm{i + 1}[{j}]"] = float(x)
        m[f"enforcement.partial_gain[{j}]"] = float(p.profit_gain)
        m[f"enforcement.partial_price[{j}]"] = float(p.price)


def _states_metrics(sec, deltas, m: dict) -> None:
    th = sec.thresholds
    m["states.threshold"] = th.market
    m["states.binding_state"] = th.binding_state + 1
    m["states.binding"] = th.binding_firm + 1
    first = sec.paths[0] if sec.paths else None
    for s in range(sec.states.n_states):
        m[f"states.threshold[{s + 1}]"] = float(th.per_state[s])
        m[f"states.agreed_price[{s + 1}]"] = float(first.agreed_prices[s]) if first else math.nan
        m[f"states.nash_price[{s + 1}]"] = float(first.nash_prices[s]) if first else math.nan
    kept = [j for j, d in enumerate(deltas, start=1) if sec.states.effective_discount(float(d)) < 1.0]
    for j, path in zip(kept, sec.paths, strict=True):
        m[f"states.full_collusion[{j}]"] = float(path.full_collusion)
        m[f"states.price_cyclicality[{j}]"] = _CYCLE_CODE[path.price_cyclicality]
        for s in range(sec.states.n_states):
            m[f"states.price[{s + 1}][{j}]"] = float(path.prices[s])
            m[f"states.weight[{s + 1}][{j}]"] = float(path.weights[s])


def _contact_metrics(sec, deltas, m: dict) -> None:
    p = sec.pooled
    m["contact.common_threshold"] = p.common
    m["contact.highest_standalone"] = p.highest_standalone
    m["contact.binding"] = p.binding_firm + 1
    for k, x in enumerate(p.market_thresholds):
        m[f"contact.threshold[{k + 1}]"] = float(x)
    for i, x in enumerate(p.pooled):
        m[f"contact.pooled.firm{i + 1}"] = float(x)
    for j, sl, al in zip(_contact_deltas(sec.game, deltas), sec.slack, sec.allocations, strict=True):
        m[f"contact.together[{j}]"] = float(sl.together)
        for k in range(sec.game.n_markets):
            m[f"contact.alone[{k + 1}][{j}]"] = float(sl.alone[k])
            m[f"contact.weight[{k + 1}][{j}]"] = float(al.weights[k])
        m[f"contact.value[{j}]"] = float(al.value)
        m[f"contact.standalone_value[{j}]"] = float(al.standalone_value)


def part_metrics(res: ThresholdsResult) -> dict:
    """The flat metrics of the optional parts of a thresholds result (empty without them).

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    dict of str to float
    """
    m: dict = {}
    if res.enforcement is not None:
        _enforcement_metrics(res.enforcement, m)
    if res.demand_states is not None:
        _states_metrics(res.demand_states, res.deltas, m)
    if res.contact is not None:
        _contact_metrics(res.contact, res.deltas, m)
    return m


def describe_parts(doc: dict) -> list[str]:
    """Setup lines of the optional tables for a run's bundle (empty without them).

    Parameters
    ----------
    doc : dict
        The experiment document.

    Returns
    -------
    list of str
    """
    out = []
    enf = doc.get("enforcement")
    if isinstance(enf, dict):
        keys = ", ".join(f"{k} {v}" for k, v in enf.items() if k != "frontier")
        grid = " (with a deterrence frontier)" if "frontier" in enf else ""
        out.append(f"Enforcement: {keys or 'defaults'}{grid}")
    st = doc.get("demand_states")
    if isinstance(st, dict):
        out.append(f"Demand states: {st.get('kind', 'iid')}, {st.get('parameter')} by state {st.get('values')}"
                   + (f", growth {st['growth']}" if "growth" in st else ""))
    ct = doc.get("contact")
    if isinstance(ct, dict) and isinstance(ct.get("markets"), list):
        names = [m.get("label", f"market {k + 1}") if isinstance(m, dict) else "?" for k, m in enumerate(ct["markets"])]
        out.append(f"Multimarket contact: firms {ct.get('firms')} in {', '.join(names)}")
    return out
