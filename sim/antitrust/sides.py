"""The two sides of the comparison: what is computed for the market before and for the market after a merger.

:func:`solve_side` finds the stage game, the critical discount factor of every punishment scheme per firm with the
binding firm (:func:`sim.theory.thresholds.critical_discount_factors`) and partial collusion at the requested
discount factors; :func:`simulate_side` runs the engine on a prepared game; :func:`asymmetry` measures how unequal
the firms are and :func:`symmetric_counterpart` builds the market with its firms made alike (for the factor table).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from sim.antitrust.merger import firm_shares, hhi
from sim.models.market import Market
from sim.simulation.engine import run_game
from sim.simulation.results import summarize
from sim.theory.equilibrium import stage_game, static_nash
from sim.theory.thresholds import critical_discount_factors, partial_collusion

__all__ = ["Side", "asymmetry", "scheme_threshold", "simulate_side", "solve_side", "symmetric_counterpart"]

#: the simulated metrics an assessment keeps
SIM_METRICS = ("collusive_share", "war_share", "first_breakdown", "broken_down", "spell_length", "profit_gain",
               "price", "consumer_surplus")


@dataclass
class Side:
    """One side of the comparison while it is computed (the live objects behind a
    :class:`~sim.antitrust.result.MarketSide`).

    Parameters
    ----------
    label : {"before", "after"}
    market : Market
    names : list of str
        Firm names.
    report : ThresholdReport
        Critical discount factors of every scheme (per firm, market, binding firm).
    partial : list of PartialCollusion
    asymmetry : dict
        See :func:`asymmetry`.
    simulation : SimulationResult, optional
    rescaled : SimulationResult, optional
        The same simulation with every monitoring noise parameter multiplied by ``assess.transparency_scale``.
    """

    label: str
    market: Any
    names: list
    report: Any
    partial: list
    asymmetry: dict
    simulation: Any = None
    rescaled: Any = field(default=None)

    def scheme(self, scheme: str, T: int | None = None):
        """The :class:`~sim.theory.thresholds.SchemeThreshold` of one scheme.

        Parameters
        ----------
        scheme : {"grim", "finite", "stick_carrot"}
        T : int, optional
            The punishment length of ``finite``.

        Returns
        -------
        SchemeThreshold
        """
        if scheme == "grim":
            return self.report.grim
        if scheme == "stick_carrot":
            return self.report.stick_carrot
        for f in self.report.finite:
            if f.T == T:
                return f
        raise KeyError(f"finite reversion with T={T} was not computed")

    def headline(self, opts: dict):
        """The threshold of the assessment's headline scheme.

        Parameters
        ----------
        opts : dict
            The validated options (``scheme``, ``length``).

        Returns
        -------
        SchemeThreshold
        """
        return self.scheme(opts["scheme"], opts["length"])

    def to_dict(self) -> dict:
        """The side's fields as :class:`~sim.antitrust.result.MarketSide` holds them.

        Returns
        -------
        dict
        """
        th = self.report
        out = {
            "market": self.market.to_dict(), "names": self.names,
            "stage": th.stage.to_dict(),
            "thresholds": {"grim": _scheme_dict(th.grim, self.names),
                           "finite": [_scheme_dict(f, self.names) for f in th.finite],
                           "stick_carrot": _scheme_dict(th.stick_carrot, self.names)},
            "partial_collusion": [p.to_dict() for p in self.partial],
            "asymmetry": self.asymmetry,
        }
        if self.simulation is not None:
            out["simulation"] = _sim_summary(self.simulation) | {
                "collusive_by_period": np.asarray(self.simulation.collusive_by_period, dtype=float).tolist()}
        if self.rescaled is not None:
            out["simulation_scaled_noise"] = _sim_summary(self.rescaled)
        return out


def _scheme_dict(s, names) -> dict:
    d = s.to_dict()
    d["binding_name"] = names[s.binding] if s.binding < len(names) else None
    return d


def _sim_summary(res) -> dict:
    return {k: res.metrics[k].to_dict() for k in SIM_METRICS} | {"settings": res.settings}


def solve_side(label: str, market, names: list, opts: dict, step) -> Side:
    """Stage game, thresholds and partial collusion of one market.

    Parameters
    ----------
    label : {"before", "after"}
    market : Market
    names : list of str
        Firm names.
    opts : dict
        The validated options (``agreement``, ``punishments``, ``deltas``, ``partial``).
    step : callable
        ``step(what)``, called after each part (progress).

    Returns
    -------
    Side
    """
    st = stage_game(market, opts["agreement"])
    step(f"stage game {label}")
    rep = critical_discount_factors(market, punishments=opts["punishments"], deltas=(), stage=st)
    step(f"thresholds {label}")
    parts = []
    for d in opts["deltas"]:
        for sch in opts["partial"]:
            if sch == "finite":
                parts.extend(partial_collusion(market, d, "finite", T=T, stage=st) for T in opts["punishments"])
            else:
                parts.append(partial_collusion(market, d, sch, stage=st))
        step(f"partial collusion {label}, delta {d:g}")
    return Side(label, market, list(names), rep, parts, asymmetry(market, st.nash))


def simulate_side(game, runs: dict, key, threads: int | None = None):
    """Simulate a prepared game with the assessment's run settings and summarise it.

    Parameters
    ----------
    game : Game
        From :func:`sim.simulation.engine.prepare_game`.
    runs : dict
        Validated run settings (``periods``, ``replications``, ``delta``, ``seed``, ``horizon``,
        ``continuation``, ``paths``).
    key : tuple of int
        The simulation's stream key.
    threads : int, optional
        Threads to use (the numbers do not depend on it).

    Returns
    -------
    SimulationResult
    """
    raw = run_game(game, runs["periods"], runs["replications"], runs["delta"], runs["seed"], key, runs["horizon"],
                   runs["continuation"], runs["paths"], threads, False)
    return summarize(raw, game, runs, confidence=0.95, baseline=False)


def scheme_threshold(market, opts: dict) -> tuple[float, int]:
    """The market's critical discount factor of the headline scheme, and its binding firm.

    Parameters
    ----------
    market : Market
    opts : dict
        The validated options (``scheme``, ``length``, ``punishments``, ``agreement``).

    Returns
    -------
    threshold : float
        nan when not sustainable below one.
    binding : int
        The binding firm, counted from 0.
    """
    rep = critical_discount_factors(market, punishments=opts["punishments"], deltas=(), agreement=opts["agreement"])
    if opts["scheme"] == "grim":
        s = rep.grim
    elif opts["scheme"] == "stick_carrot":
        s = rep.stick_carrot
    else:
        s = next(f for f in rep.finite if f.T == opts["length"])
    return s.market, s.binding


def _ratio(x: np.ndarray) -> float:
    x = np.asarray(x, dtype=float)
    if x.size == 0 or not np.all(np.isfinite(x)):
        return math.nan
    lo = float(x.min())
    return math.inf if lo <= 0 else float(x.max()) / lo


def asymmetry(market, outcome=None) -> dict:
    """Measures of asymmetry between the firms of a market.

    Parameters
    ----------
    market : Market or MarketSpec
    outcome : Outcome, optional
        Where shares are measured (default: the static Nash equilibrium).

    Returns
    -------
    dict
        ``shares`` (firm shares of total quantity), ``hhi`` (0-10000), ``share_ratio`` (largest over
        smallest share; ``inf`` when a firm sells nothing), ``costs`` (each firm's quantity-weighted
        mean marginal cost), ``cost_ratio`` (highest over lowest), ``cost_cv`` (coefficient of
        variation), ``capacities``, ``capacity_shares`` and ``capacity_ratio`` (``None`` without
        capacities), ``products`` (number of products per firm).
    """
    ms = market if not hasattr(market, "spec") else market.spec()
    out = outcome if outcome is not None else static_nash(ms)
    q = np.asarray(out.quantities, dtype=float)
    shares = firm_shares(ms, out)
    qf = ms.firm_sum(q)
    with np.errstate(invalid="ignore", divide="ignore"):
        wc = ms.firm_sum(q * ms.cost) / qf
    plain = np.array([ms.cost[ms.products_of(i)].mean() for i in range(ms.n_firms)])
    costs = np.where(qf > 0, wc, plain)
    cap = np.asarray(ms.capacity, dtype=float)
    has_cap = bool(np.all(np.isfinite(cap)))
    capf = ms.firm_sum(cap) if has_cap else None
    return {
        "shares": shares.tolist(), "hhi": hhi(shares), "share_ratio": _ratio(shares),
        "costs": costs.tolist(), "cost_ratio": _ratio(costs),
        "cost_cv": float(np.std(costs) / np.mean(costs)) if np.mean(costs) > 0 else math.nan,
        "capacities": None if capf is None else capf.tolist(),
        "capacity_shares": None if capf is None else (capf / capf.sum()).tolist(),
        "capacity_ratio": None if capf is None else _ratio(capf),
        "products": np.bincount(ms.owner, minlength=ms.n_firms).tolist(),
    }


def symmetric_counterpart(market, n_products: int | None = None, keep_owner: bool = False, *,
                          n_firms: int | None = None, products_per_firm: int = 1):
    """The market with its products made alike: mean marginal cost, mean quality or intercept, equal
    capacities and equal tie-sharing weights; the demand's other parameters unchanged.

    Parameters
    ----------
    market : Market
    n_products : int, optional
        Number of products (single-product firms) of the counterpart; default: as many as the market.
    keep_owner : bool
        Keep the market's owner map (only with the same number of products): removes cost and demand
        asymmetries but not ownership asymmetry.
    n_firms : int, optional
        Instead of ``n_products``: the number of firms of the counterpart, each owning
        ``products_per_firm`` products (``n_firms * products_per_firm`` products in all).
    products_per_firm : int
        Products of each firm with ``n_firms`` (above one only for differentiated products).

    Returns
    -------
    Market
    """
    ms = market.spec()
    owner = None
    if n_firms is not None:
        if n_products is not None or keep_owner:
            raise ValueError("give n_firms or n_products / keep_owner, not both")
        n = int(n_firms) * int(products_per_firm)
        if products_per_firm > 1:
            owner = [i + 1 for i in range(int(n_firms)) for _ in range(int(products_per_firm))]
    else:
        n = ms.n_products if n_products is None else int(n_products)
        if keep_owner and market.owner is not None and n == ms.n_products:
            owner = list(market.owner)
    new_d = market.demand.symmetric_version(ms.n_products)
    c = float(np.mean(ms.cost))
    cap = np.asarray(ms.capacity, dtype=float)
    capacity = float(cap.mean()) if market.capacity is not None and np.all(np.isfinite(cap)) else None
    return Market(new_d, cost=c, model=ms.model, n_firms=None if owner is not None else n, capacity=capacity,
                  tick=ms.tick, owner=owner)
