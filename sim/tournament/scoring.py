"""Scores of a played tournament: what each match gave, each group's payoffs, each entrant's score and place.

For every match and seat, the engine's estimators (:mod:`sim.core.stats`) give the mean profit per period (ratio of
totals), the mean discounted profit and the profit gain ``(profit - Nash) / (collusive - Nash)`` of the seat's firm.
A group's payoff to a member is the average over its seatings and over the member's seats. An entrant's *score* is
its expected payoff when its ``n - 1`` rivals are drawn independently and uniformly from the entrants: the groups
are weighted by the multinomial probability of the rivals (:func:`sim.tournament.plan.rival_weights`; with two
seats: the plain average over opponents, self-play included, as in the round robins of Axelrod, 1984, "The Evolution
of Cooperation"). This is the payoff against an equal-share population of :mod:`sim.tournament.evolution`. Standard
errors combine those of the matches (independent replications); intervals are normal at the ``confidence`` level.
Entrants are placed by ``score`` (ties share the better place).

With two seats, each pair's paired difference ``P_i - P_j`` is estimated with its standard error; ``i`` earns more
than ``j`` in their match when the difference exceeds ``z`` standard errors.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.stats import Estimate, mean_estimate, normal_quantile, ratio_estimate
from sim.core.text import CAUTION
from sim.tournament.bootstrap import competition_ranks, rank_stability
from sim.tournament.payoffs import PayoffTable, type_counts
from sim.tournament.plan import SCORES, TournamentPlan, rival_weights

__all__ = ["MatchRecord", "TournamentResult", "member_series", "score_tournament"]


@dataclass(eq=False)
class MatchRecord:
    """What one match produced.

    Parameters
    ----------
    index : int
    lineup : tuple of int
        Entrant index per seat.
    group : int
    learning : bool
    profit_sum, discounted : ndarray of shape (R, n_seats)
        Per replication (session): the sum of each seat's per-period profits (a learning session: its mean profit
        over the limit cycle) and its discounted profit.
    periods : int64 ndarray of shape (R,)
        Periods played (1 for a learning session, whose ``profit_sum`` is already a per-period mean).
    collusive : int64 ndarray of shape (R,) or None
        Periods in which every firm colluded (automaton matches).
    profit, discounted_profit, profit_gain : list of Estimate, one per seat
    collusive_share : Estimate or None
        Share of the periods in which every firm colluded (automaton matches).
    converged : float or None
        Share of converged sessions (learning matches).
    stream : dict
        How to reproduce the match: ``{"seed", "key"}`` for :func:`sim.simulation.engine.simulate`, ``{"seed",
        "cell"}`` for :func:`sim.learning.session.learn`.
    first_breakdown : Estimate or None
        Periods until collusion first breaks down (Kaplan-Meier restricted mean over the horizon; automaton
        matches).
    spell_length : Estimate or None
        Length of a collusive spell, in periods (Kaplan-Meier restricted mean; automaton matches).
    """

    index: int
    lineup: tuple
    group: int
    learning: bool
    profit_sum: np.ndarray
    discounted: np.ndarray
    periods: np.ndarray
    collusive: np.ndarray | None
    profit: list
    discounted_profit: list
    profit_gain: list
    collusive_share: object
    converged: float | None
    stream: dict
    first_breakdown: object = None
    spell_length: object = None

    @property
    def n_reps(self) -> int:
        """Replications (sessions) played."""
        return int(self.periods.shape[0])

    def metric(self, name: str) -> list:
        """The per-seat estimates of a score.

        Parameters
        ----------
        name : {"profit", "discounted_profit", "profit_gain"}

        Returns
        -------
        list of Estimate
        """
        return {"profit": self.profit, "discounted_profit": self.discounted_profit,
                "profit_gain": self.profit_gain}[name]


@dataclass(eq=False)
class TournamentResult:
    """Everything a tournament produced.

    Parameters
    ----------
    plan : TournamentPlan
    matches : list of MatchRecord
    group_payoffs : dict
        Metric -> (value, se), each an ndarray of shape (G, E): the payoff of a member of each entrant in each group
        (nan where absent).
    scores : dict
        Metric -> list of Estimate (one per entrant).
    ranks : int ndarray of shape (E,)
        Place of each entrant by ``settings["score"]`` (1 = best; ties share the better place).
    order : list of int
        Entrant indices from first to last.
    stability : dict or None
        Bootstrap stability of the places (:func:`sim.tournament.bootstrap.rank_stability`); None without bootstrap.
    pairwise : dict or None
        Two seats only: per metric ``value``/``se`` matrices ``[i, j]`` (i's payoff against j), the paired
        ``difference``/``difference_se`` ``P_i - P_j`` and ``beats`` (1: i earns more than j beyond the margin,
        -1: j does, 0: neither), with their row counts ``wins`` and ``losses``.
    versus : dict
        Per metric, ``[i, j]``: i's payoff when every rival is j (the pairwise matrix with two seats).
    timings : dict
        Seconds spent validating, playing and scoring.
    """

    plan: TournamentPlan
    matches: list
    group_payoffs: dict
    scores: dict
    ranks: np.ndarray
    order: list
    stability: dict | None
    pairwise: dict | None
    versus: dict
    timings: dict

    @property
    def labels(self) -> list[str]:
        """The entrants' labels."""
        return self.plan.labels

    @property
    def score(self) -> str:
        """The score the entrants are placed by."""
        return self.plan.settings["score"]

    def payoffs(self, metric: str | None = None) -> PayoffTable:
        """The tournament's payoffs as a table for the evolutionary analysis.

        Parameters
        ----------
        metric : str, optional
            Default: the ranking score.

        Returns
        -------
        PayoffTable
        """

        metric = metric or self.score
        if metric not in SCORES:
            raise InputError("metric", f"must be one of {', '.join(SCORES)}, got {metric!r}")
        E = len(self.labels)
        groups = np.array([type_counts(g, E) for g in self.plan.groups], dtype=np.int64).reshape(-1, E)
        v, s = self.group_payoffs[metric]
        return PayoffTable(tuple(self.labels), self.plan.seats, groups, v.copy(), s.copy(), metric)

    def settings(self) -> dict:
        """The settings played: market, monitoring, run, tournament and entrants, as plain data.

        Returns
        -------
        dict
        """
        p = self.plan
        return {"market": _market_dict(p.market), "monitoring": {k: v for k, v in p.monitoring.items()
                                                                 if k != "noise_code"},
                "run": dict(p.run), "tournament": dict(p.settings),
                "entrants": [e.to_dict() for e in p.entrants]}

    def to_dict(self, replications: bool = False) -> dict:
        """Plain data (JSON-ready through :func:`sim.core.jsonutil.dumps`).

        Parameters
        ----------
        replications : bool
            Include every match's per-replication sums.

        Returns
        -------
        dict
        """

        labels = self.labels
        p = self.plan
        out = {
            "settings": self.settings(),
            "benchmarks": {"agreement": p.settings["agreement"], "agreement_given": p.settings["agreement_given"],
                           "nash_profit": p.nash.tolist(), "collusive_profit": p.collusive.tolist(),
                           "profit_gain_defined": p.gain_defined.tolist()},
            "score": self.score,
            "ranking": [{"rank": int(self.ranks[e]), "label": labels[e], "strategy": p.entrants[e].name,
                         **{m: self.scores[m][e].to_dict() for m in SCORES},
                         **({"stability": {k: v[e] for k, v in self.stability["per_entrant"].items()}}
                            if self.stability else {})}
                        for e in self.order],
            "rank_stability": ({k: v for k, v in self.stability.items() if k != "per_entrant"}
                               if self.stability else None),
            "groups": [{"group": gi + 1, "members": [labels[e] for e in g],
                        "payoffs": {labels[e]: {m: {"value": float(self.group_payoffs[m][0][gi, e]),
                                                    "se": float(self.group_payoffs[m][1][gi, e])}
                                                for m in SCORES}
                                    for e in sorted(set(g))}}
                       for gi, g in enumerate(p.groups)],
            "matches": [match_dict(r, p, replications) for r in self.matches],
            "versus": {m: self.versus[m].tolist() for m in SCORES},
            "timings": self.timings,
            "caution": CAUTION,
        }
        if self.pairwise is not None:
            out["pairwise"] = {m: {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in d.items()}
                               for m, d in self.pairwise.items()}
        return out


def _market_dict(ms) -> dict:
    return {"model": ms.model, "demand": ms.demand.kind, "n_firms": ms.n_firms, "n_products": ms.n_products,
            "cost": np.asarray(ms.cost).tolist(), "symmetric": bool(ms.symmetric)}


def match_dict(r: MatchRecord, plan: TournamentPlan, replications: bool = False) -> dict:
    """One match as plain data: numbered from 1 (like seats, firms and entrants; the stream key keeps the match's
    position from 0, as :func:`sim.simulation.engine.simulate` takes it), its seats, how to reproduce it and its
    estimates.

    Parameters
    ----------
    r : MatchRecord
    plan : TournamentPlan
    replications : bool
        Include the per-replication sums.

    Returns
    -------
    dict
    """
    out = {"match": r.index + 1, "seats": [plan.entrants[e].label for e in r.lineup], "group": r.group + 1,
           "kind": "learning sessions" if r.learning else "automata", "replications": r.n_reps,
           "stream": r.stream,
           "profit": [e.to_dict() for e in r.profit],
           "discounted_profit": [e.to_dict() for e in r.discounted_profit],
           "profit_gain": [e.to_dict() for e in r.profit_gain]}
    if r.collusive_share is not None:
        out["collusive_share"] = r.collusive_share.to_dict()
    if r.converged is not None:
        out["converged"] = r.converged
    if replications:
        out["per_replication"] = {"profit_sum": r.profit_sum.tolist(), "discounted": r.discounted.tolist(),
                                  "periods": r.periods.tolist()}
    return out


def member_series(plan: TournamentPlan, rec: MatchRecord, e: int, metric: str):
    """Per-replication numerator and denominator of entrant ``e``'s payoff in a match (its seats averaged): the
    standard error of the match payoff comes from these.

    Parameters
    ----------
    plan : TournamentPlan
    rec : MatchRecord
    e : int
    metric : str

    Returns
    -------
    x : ndarray of shape (R,)
    y : ndarray of shape (R,) or None
        The periods (a ratio of totals), None for a plain mean.
    """
    seats = [s for s, x in enumerate(rec.lineup) if x == e]
    per = rec.periods.astype(float)
    if metric == "discounted_profit":
        return rec.discounted[:, seats].mean(axis=1), None
    if metric == "profit":
        return rec.profit_sum[:, seats].mean(axis=1), per
    gaps = np.where(plan.gain_defined[seats], plan.collusive[seats] - plan.nash[seats], np.nan)
    u = ((rec.profit_sum[:, seats] - plan.nash[seats][None, :] * per[:, None]) / gaps[None, :]).mean(axis=1)
    return u, per


def _series_se(x, y) -> float:
    return float(mean_estimate(x).se if y is None else ratio_estimate(x, y).se)


def _group_payoffs(plan: TournamentPlan, records: list, metric: str) -> tuple[np.ndarray, np.ndarray]:
    """Value and standard error of each member's payoff in each group, shape (G, E) each."""
    E = len(plan.entrants)
    G = len(plan.groups)
    val = np.full((G, E), np.nan)
    se = np.full((G, E), np.nan)
    for g, idx in enumerate(plan.group_seatings):
        members = sorted(set(plan.groups[g]))
        k = len(idx)
        for e in members:
            vs, ss = [], []
            for mi in idx:
                rec = records[mi]
                seats = [s for s, x in enumerate(rec.lineup) if x == e]
                est = rec.metric(metric)
                vs.append(sum(est[s].value for s in seats) / len(seats))
                if len(seats) == 1:
                    ss.append(est[seats[0]].se)
                else:
                    ss.append(_series_se(*member_series(plan, rec, e, metric)))
            val[g, e] = sum(vs) / k
            se[g, e] = math.sqrt(sum(x * x for x in ss)) / k
    return val, se


def _entrant_scores(W: np.ndarray, val: np.ndarray, se: np.ndarray, z: float) -> list:
    """Each entrant's score: the rival-weighted mean of its group payoffs, with its normal interval."""
    out = []
    for e in range(W.shape[1]):
        w = W[:, e]
        on = w > 0
        v = float(np.sum(w[on] * val[on, e]))
        s = float(math.sqrt(np.sum((w[on] * se[on, e]) ** 2)))
        lo, hi = (v - z * s, v + z * s) if math.isfinite(s) else (math.nan, math.nan)
        out.append(Estimate(v, s, lo, hi, int(on.sum()), "weighted mean of match payoffs"))
    return out


def score_tournament(plan: TournamentPlan, records: list, threads: int | None = None) -> TournamentResult:
    """Score the played matches: group payoffs, scores, places and their bootstrap stability, the payoffs against
    one rival entrant and (two seats) each pair's paired difference.

    Parameters
    ----------
    plan : TournamentPlan
    records : list of MatchRecord
        In plan order.
    threads : int, optional
        Threads of the bootstrap kernel.

    Returns
    -------
    TournamentResult
        With empty ``timings``.
    """
    E = len(plan.entrants)
    n = plan.seats
    z = normal_quantile(plan.settings["confidence"])
    gp = {metric: _group_payoffs(plan, records, metric) for metric in SCORES}
    W = rival_weights(plan)
    scores = {metric: _entrant_scores(W, *gp[metric], z) for metric in SCORES}
    main = np.array([x.value for x in scores[plan.settings["score"]]])
    ranks = competition_ranks(main[None, :])[0]
    order = sorted(range(E), key=lambda e: (ranks[e], e))
    stability = None
    if plan.settings["bootstrap"] > 0:
        stability = rank_stability(plan, records, ranks, threads)
    where = {g: k for k, g in enumerate(plan.groups)}
    versus = {}
    for metric in SCORES:
        val, _ = gp[metric]
        V = np.empty((E, E))
        for i in range(E):
            for j in range(E):
                V[i, j] = val[where[tuple(sorted([i] + [j] * (n - 1)))], i]
        versus[metric] = V
    pairwise = _pairwise(plan, records, gp, z) if n == 2 else None
    return TournamentResult(plan, records, gp, scores, ranks, order, stability, pairwise, versus, {})


def _pair_difference(plan: TournamentPlan, records: list, g: int, i: int, j: int, metric: str) -> tuple:
    """The paired difference ``P_i - P_j`` in group ``g`` (averaged over seatings) and its standard error."""
    ds, ss = [], []
    for mi in plan.group_seatings[g]:
        rec = records[mi]
        si, sj = rec.lineup.index(i), rec.lineup.index(j)
        est = rec.metric(metric)
        ds.append(est[si].value - est[sj].value)
        xi, y = member_series(plan, rec, i, metric)
        xj, _ = member_series(plan, rec, j, metric)
        ss.append(float(mean_estimate(xi - xj).se if y is None else ratio_estimate(xi - xj, y).se))
    k = len(ds)
    return sum(ds) / k, math.sqrt(sum(x * x for x in ss)) / k


def _pairwise(plan: TournamentPlan, records: list, gp: dict, z: float) -> dict:
    E = len(plan.entrants)
    where = {g: k for k, g in enumerate(plan.groups)}
    out = {}
    for metric in SCORES:
        val, se = gp[metric]
        V = np.empty((E, E))
        S = np.empty((E, E))
        D = np.zeros((E, E))
        DS = np.zeros((E, E))
        B = np.zeros((E, E), dtype=np.int64)
        for i in range(E):
            for j in range(E):
                g = where[(i, j) if i <= j else (j, i)]
                V[i, j] = val[g, i]
                S[i, j] = se[g, i]
        for i in range(E):
            for j in range(i + 1, E):
                D[i, j], DS[i, j] = _pair_difference(plan, records, where[(i, j)], i, j, metric)
                D[j, i] = -D[i, j]
                DS[j, i] = DS[i, j]
                scale = max(1.0, abs(V[i, j]), abs(V[j, i]))
                tie = abs(D[i, j]) <= 1e-12 * scale or (DS[i, j] > 0 and abs(D[i, j]) <= z * DS[i, j])
                B[i, j] = 0 if tie else (1 if D[i, j] > 0 else -1)
                B[j, i] = -B[i, j]
        out[metric] = {"value": V, "se": S, "difference": D, "difference_se": DS, "beats": B,
                       "wins": (B > 0).sum(axis=1), "losses": (B < 0).sum(axis=1)}
    return out
