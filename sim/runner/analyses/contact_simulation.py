"""The ``contact_simulation`` kind: the same or overlapping firms in several markets, played with punishments pooled
across the markets and with separate punishments, on the same streams (:mod:`sim.simulation.multimarket`).

Tables: ``[[markets]]`` (two or more; each a market table as ``[market]``, with an optional ``name``, an optional
``strategies`` list for that market's line-up and, when the markets hold different firms, ``firms``: the number,
from 1, of the firm in each seat -- given for every market or for none), ``[[strategies]]`` (the line-up of every
market that gives none), ``[collusion]``, ``[monitoring]`` (perception and implementation errors, no demand shock)
and ``[run]`` (``periods``, ``replications``, ``delta``, ``seed``, ``confidence``).
"""

from __future__ import annotations

from sim.core.errors import InputError
from sim.core.params import Real
from sim.core.tables import refuse_unknown
from sim.models.market import market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.runner.analyses.common import GENERAL_ASSUMPTIONS, collusion_of
from sim.runner.cost import Cost
from sim.runner.kinds import CellContext, CellResult, Kind
from sim.simulation.engine import check_run, prepare_game
from sim.simulation.multimarket import ContactPlay, contact_play, markets_inputs
from strategies.registry import lineup_from_tables

__all__ = ["KIND", "contact_metrics"]

_RUN_KEYS = ("periods", "replications", "delta", "seed", "confidence")
#: firm-periods per second assumed by the time estimate (the compiled kernel, one core; conservative)
THROUGHPUT = 1e7


def _prepare(doc: dict) -> dict:
    entries = doc.get("markets")
    if not isinstance(entries, list) or len(entries) < 2 or not all(isinstance(e, dict) for e in entries):
        raise InputError("markets", f"must list at least two market tables ([[markets]]), got {entries!r}")
    run_t = refuse_unknown(doc.get("run", {}), "run", _RUN_KEYS)
    r = {"periods": 200, "replications": 500, "delta": 0.9, "seed": 0, **run_t}
    confidence = Real(0, 1, closed="neither").check("run.confidence", r.pop("confidence", 0.95))
    mon = monitoring_from_dict(doc.get("monitoring", {}))
    agreement, actions = collusion_of(doc)
    games, names, ids = [], [], []
    listed = [isinstance(e, dict) and "firms" in e for e in entries]
    if any(listed) and not all(listed):
        raise InputError(f"markets[{listed.index(False) + 1}].firms", "missing: list the firms of every market (by "
                                                                      "number, from 1) or of none")
    for k, e in enumerate(entries):
        key = f"markets[{k + 1}]"
        table = {x: v for x, v in e.items() if x not in ("name", "strategies", "firms")}
        market = market_from_dict(table, key)
        n = market.spec().n_firms
        if listed[0]:
            ids.append(_firm_numbers(e["firms"], n, f"{key}.firms"))
        elif games and n != games[0].arrays.n_firms:
            raise InputError(f"{key}.n_firms", f"every market must have the same firms: market 1 has "
                                               f"{games[0].arrays.n_firms}, this one {n} (or list each market's "
                                               f"firms)")
        name = e.get("name", f"market {k + 1}")
        if not isinstance(name, str) or not name:
            raise InputError(f"{key}.name", f"must be a non-empty name, got {name!r}")
        strat = e.get("strategies", doc.get("strategies"))
        lineup = lineup_from_tables(strat, n, f"{key}.strategies" if "strategies" in e else "strategies")
        games.append(prepare_game(market, lineup, mon, agreement, actions, strict=False))
        names.append(name)
    run = check_run(r["periods"], r["replications"], r["delta"], r["seed"], "fixed", 1.0, 0, 1)
    firm_ids = ids if listed[0] else None
    markets_inputs(games, firm_ids)  # the markets' firms and monitoring, checked before any work
    return {"games": games, "names": names, "run": run, "confidence": confidence, "firm_ids": firm_ids}


def _firm_numbers(value, n: int, key: str) -> list:
    """A market's ``firms``: one distinct firm number (from 1) per seat, 0-based for the kernel."""
    if not isinstance(value, list) or len(value) != n or not all(isinstance(x, int) and not isinstance(x, bool)
                                                                 and x >= 1 for x in value) or len(set(value)) != n:
        raise InputError(key, f"must list the market's {n} firms by number (distinct, from 1), got {value!r}")
    return [x - 1 for x in value]


def contact_metrics(result: ContactPlay) -> dict:
    """The stored metrics of a contact simulation: per market the collusive shares and their difference.

    Parameters
    ----------
    result : ContactPlay

    Returns
    -------
    dict
        Stored metric name -> float.
    """
    m = {}
    for k in range(len(result.names)):
        for what in ("pooled", "separate", "difference"):
            est = getattr(result, what)[k]
            stem = f"contact.{what}_share[{k + 1}]"
            m[stem], m[f"{stem}.low"], m[f"{stem}.high"] = est.value, est.low, est.high
    return m


def _names(cfg: dict) -> list[str]:
    out = []
    for k in range(len(cfg["names"])):
        for what in ("pooled", "separate", "difference"):
            out += [f"contact.{what}_share[{k + 1}]{s}" for s in ("", ".low", ".high")]
    return out


def _run(cfg: dict, ctx: CellContext) -> CellResult:
    r = cfg["run"]
    res = contact_play(cfg["games"], cfg["names"], r["periods"], r["replications"], r["delta"], r["seed"], ctx.key,
                       cfg["confidence"], cfg["firm_ids"])
    return CellResult(contact_metrics(res), {}, res)


def _cost(cfg: dict) -> Cost:
    r = cfg["run"]
    M, n = len(cfg["games"]), cfg["games"][0].arrays.n_firms
    work = 2.0 * r["periods"] * r["replications"] * M * n
    memory = 2 * 8 * r["replications"] * M * (2 * n + 1)
    return Cost(memory, work, "firm-periods", work / THROUGHPUT, "run.replications")


def _describe(doc: dict) -> list[str]:
    ms = doc.get("markets", [])
    names = ", ".join(str(e.get("name", f"market {k + 1}")) for k, e in enumerate(ms) if isinstance(e, dict))
    mon = doc.get("monitoring", {})
    return [f"Markets in contact: {names}",
            f"Monitoring: perception error {mon.get('perception_error', 0.0)}, implementation error "
            f"{mon.get('implementation_error', 0.0)} (per firm, market and period)",
            "Each cell plays the markets twice on the same streams: punishments pooled across the markets (a "
            "deviation seen in any market is punished in all of them) and separate punishments"]


KIND = Kind(
    name="contact_simulation",
    tables=("markets", "strategies", "collusion", "monitoring", "run"),
    prepare=_prepare,
    run=_run,
    metric_names=_names,
    result_type=ContactPlay,
    cost=_cost,
    headline=("contact.pooled_share[1]", "contact.separate_share[1]"),
    describe=_describe,
    summary="the same firms in several markets: collusion with pooled against separate punishments",
    assumptions=GENERAL_ASSUMPTIONS + (
        "The same firms meet in every market, one product each; the line-ups are fixed automata.",
        "Pooled punishment: a firm's signal is bad in every market when it is bad in any (Bernheim and Whinston, "
        "1990); separate punishment: each market's automata see that market alone.",
        "Implementation and perception errors are independent across firms, markets and periods; no demand shock.",
    ),
)
