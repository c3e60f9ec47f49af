"""Outcomes of learning sessions: every session's limit play, and the statistics across sessions.

:class:`LearningResult` holds the per-session arrays that :func:`sim.learning.session.learn` fills, with the line-up
that produced them; :meth:`LearningResult.summary` gives the statistics a reader sees (intervals at the run's
confidence level: Student's t for means, Wilson for shares, as in :mod:`sim.core.stats`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from sim.core.stats import mean_estimate, student_quantile, wilson_estimate
from sim.learning.events import event_summary
from sim.learning.lineup import Lineup
from sim.learning.triggers import trigger_summary

__all__ = [
    "CYCLE_STORE",
    "IR_POINTS",
    "LIMIT_BURN_IN",
    "LIMIT_PERIODS",
    "VALUE_CAP",
    "VALUE_TOL",
    "LearningResult",
    "deviator_discount",
    "limit_description",
    "value_horizon",
]

#: sessions keep at most this many periods of their limit cycle (the statistics use the whole cycle)
CYCLE_STORE = 64
#: the impulse response averages over at most this many points of a session's limit cycle
IR_POINTS = 64
#: estimate of a line-up with automata that act at random: periods of greedy play simulated and
#: discarded before the limit averages start
LIMIT_BURN_IN = 1000
#: ... the default number of periods averaged (``limit_periods``)
LIMIT_PERIODS = 10_000
#: ... and the value of a simulated deviation is summed until the discount weight falls below this
#: (at most VALUE_CAP periods)
VALUE_TOL = 1e-10
VALUE_CAP = 100_000
#: bins of the histogram of profit gains across sessions: -0.5 to 1.5 in steps of 0.05
HISTOGRAM_EDGES = np.round(np.arange(-0.5, 1.5001, 0.05), 10)


# ------------------------------------------------------------------------------------------------
# Statistics across sessions
# ------------------------------------------------------------------------------------------------

# Intervals at the run's confidence level: Student's t for means, the Wilson score interval for shares.


def _mean_ci(x, level: float = 0.95, bounds: tuple | None = None) -> dict:
    """Mean with Student's confidence interval (nan bounds when fewer than two values); with ``bounds``
    (the values' domain, e.g. ``(0, 1)`` for means of shares, ``(0, inf)`` for counts) the interval is kept within
    it. With bounds ``(0, 1)`` and every value 0 or 1 the mean is a share of sessions, and its interval is Wilson's
    (``"method": "wilson"``, defined from one session on): Student's has no width when every session gives the same
    value."""

    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return {"mean": math.nan, "se": math.nan, "low": math.nan, "high": math.nan, "n": 0}
    if bounds == (0.0, 1.0) and bool(np.all((x == 0.0) | (x == 1.0))):
        w = wilson_estimate(int(x.sum()), n, level)
        return {"mean": w.value, "se": math.sqrt(w.value * (1.0 - w.value) / n), "low": w.low, "high": w.high,
                "n": int(n), "method": "wilson"}
    e = mean_estimate(x, level)
    low, high = e.low, e.high
    if bounds is not None and n > 1:
        low, high = max(bounds[0], low), min(bounds[1], high)
    return {"mean": e.value, "se": e.se, "low": low, "high": high, "n": int(n)}


def _share_ci(k: int, n: int, level: float = 0.95) -> dict:
    """Share with the Wilson score interval (Wilson, 1927, JASA 22)."""

    if n == 0:
        return {"share": math.nan, "low": math.nan, "high": math.nan, "count": 0, "n": 0}
    e = wilson_estimate(k, n, level)
    return {"share": e.value, "low": e.low, "high": e.high, "count": int(k), "n": int(n)}


def _quantiles(x) -> dict:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    qs = (0.05, 0.25, 0.5, 0.75, 0.95)
    if x.size == 0:
        return {f"q{int(q * 100):02d}": math.nan for q in qs}
    v = np.quantile(x, qs)
    return {f"q{int(q * 100):02d}": float(a) for q, a in zip(qs, v)}


def deviator_discount(lineup: Lineup, seat: int) -> float:
    """The discount factor the deviator's value is computed with.

    Parameters
    ----------
    lineup : Lineup
    seat : int
        The deviating seat (from 0).

    Returns
    -------
    float
        The seat's own discount factor; an automaton deviator is valued with the first learner's.
    """
    if lineup.learners[seat] is not None:
        return float(lineup.seats.delta[seat])
    return float(lineup.seats.delta[lineup.learner_seats[0]])


def value_horizon(d: float) -> int:
    """Periods over which a simulated deviation's value is summed.

    Parameters
    ----------
    d : float
        The deviator's discount factor, in [0, 1).

    Returns
    -------
    int
        The smallest ``H`` with ``d**H < VALUE_TOL``, at most ``VALUE_CAP`` (1 for a myopic deviator).
    """
    if d <= 0.0:
        return 1
    return int(min(VALUE_CAP, max(1, math.floor(math.log(VALUE_TOL) / math.log(d)) + 1)))


def limit_description(lineup: Lineup, settings: dict) -> dict:
    """How the limit outcomes of a run were obtained (the ``limit`` entry of :meth:`LearningResult.summary`).

    Parameters
    ----------
    lineup : Lineup
    settings : dict
        The run settings (``deviator`` from 0, ``limit_periods``).

    Returns
    -------
    dict
        ``method`` (``"exact"`` or ``"estimate"``) and ``what`` (in words); an estimate adds ``random_firms``
        (from 1), ``burn_in``, ``periods``, ``deviations``, ``value_periods`` and ``value_truncation_bound``.
    """
    if lineup.limit_exact:
        return {"method": "exact",
                "what": "the limit cycle of greedy play from each session's final state, found exactly; the "
                        "impulse response deviates from each point of the cycle and the value of the deviation "
                        "is exact over the infinite horizon"}
    seat = settings["deviator"]
    d = deviator_discount(lineup, seat)
    H = value_horizon(d)
    # the profit the deviation is valued with: after a merger the merged firm's (sim.learning.inputs.DeviationInputs)
    valued = lineup.payoff if lineup.reward is None else lineup.reward
    top = float(np.max(np.abs(valued[:, seat])))
    bound = 2.0 * d**H * top / (1.0 - d) if d > 0 else 0.0
    periods = int(settings["limit_periods"])
    firms = ", ".join(str(i + 1) for i in lineup.random_seats)
    return {
        "method": "estimate",
        "random_firms": [i + 1 for i in lineup.random_seats],
        "burn_in": LIMIT_BURN_IN,
        "periods": periods,
        "deviations": min(IR_POINTS, periods),
        "value_periods": H,
        "value_truncation_bound": bound,
        "what": (f"ESTIMATE, not an exact cycle: firm(s) {firms} act "
                 "at random, so greedy play after learning has no exact limit cycle. Per session, from the final "
                 f"state and the session's own random stream continued after learning: {LIMIT_BURN_IN} periods of "
                 f"greedy play discarded, the next {periods} averaged (limit prices, profits, "
                 f"profit gain); {min(IR_POINTS, periods)} deviations simulated at evenly "
                 "spaced periods among them, each against the path without it from the same random numbers; the "
                 f"deviation gain sums discounted profits over {H} periods (truncation error below {bound:.2g}). "
                 "Cycle lengths and the return to the cycle are not defined."),
    }


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class LearningResult:
    """Outcomes of a set of learning sessions.

    Per-session arrays (``n`` sessions, ``f`` firms, ``T`` response periods):

    Attributes
    ----------
    lineup : Lineup
    settings : dict
        The run settings (sessions, seed, convergence, max_periods, deviator, deviation,
        response_periods, near, cell).
    converged : ndarray of bool, shape (n,)
    periods : ndarray of int64, shape (n,)
        Periods played, including the final ``convergence`` unchanged ones.
    transient : ndarray of int64, shape (n,)
        Periods of greedy play from the final state before the limit cycle (-1: not defined, see
        :attr:`limit_exact`).
    cycle_length : ndarray of int64, shape (n,)
        Length of the limit cycle (0: not defined, see :attr:`limit_exact`).
    cycles : list of ndarray of shape (min(length, CYCLE_STORE), f)
        Action indices along each session's limit cycle (empty when not defined).
    limit_actions, limit_prices, limit_profits : ndarray of shape (n, f)
        Means over the limit cycle; with automata that act at random, simulated means (see
        :attr:`limit_exact` and :func:`learn`).
    profit_gain : ndarray of shape (n,)
        ``(sum of limit profits - sum of Nash profits) / (sum of collusive - sum of Nash)``.
    firm_profit_gain : ndarray of shape (n, f)
    near_collusive, near_nash : ndarray of bool, shape (n,)
        Every firm's mean limit action within ``near`` times the Nash-to-collusive distance of its
        collusive (Nash) action.
    ir_prices, ir_profits, cf_prices, cf_profits : ndarray of shape (n, T + 2, f)
        Impulse response and the path without deviation, averaged over the points of the cycle;
        row 0 is the period before the deviation, row 1 the deviation.
    deviation_action : ndarray of int64, shape (n,)
        The deviator's forced action index (at the first point of the cycle).
    deviation_gain : ndarray of shape (n,)
        Discounted value of deviating minus not deviating, under the learned strategies (exact,
        infinite horizon), averaged over the points of the cycle; with automata that act at random,
        the mean realised difference over the simulated deviations (truncated horizon).
    deviation_pays, returned : ndarray of shape (n,)
        Share of the cycle's points where the deviation pays / after which play returns to the
        same cycle (with automata that act at random: share of simulated deviations with a positive
        realised gain / nan).
    periods_to_return : ndarray of shape (n,)
        Mean periods from the deviation until play is back on the cycle (nan if it never is, or
        when not defined).
    elapsed : float
        Wall-clock seconds.
    saved : sim.learning.saved.SavedLearners or None
        Every session's state at the end of learning, when asked for (``learn(..., keep=True)``).
    triggers : ndarray of int64, shape (n, f, 4), or None
        Every session's record of its automata's punishments during learning
        (:data:`sim.learning.inputs.TRIGGER_FIELDS`; learner rows unused).
    punishing_at_end : ndarray of bool, shape (n, f), or None
        Whether each automaton was punishing (in a non-collusive state) at the end of learning.
    event : dict or None
        For saved sessions continued after an event (:mod:`sim.learning.events`): ``event`` (the
        :class:`~sim.learning.events.Event`), ``what`` (in words), ``path`` (ndarray of shape (n, bins + 1, f), the
        recorded prices), ``settle`` (ndarray of shape (n,), periods from the event to the last change of a
        greedy strategy; nan when the session did not settle), ``start`` (ndarray of int64, shape (n,), the
        periods each session had played before the event) and ``at_event`` (ndarray of shape (n, f), the mean prices
        of greedy play from each session's state at the event, in the line-up after it; None where the limit is an
        estimate).
    """

    lineup: Lineup
    settings: dict
    converged: np.ndarray
    periods: np.ndarray
    transient: np.ndarray
    cycle_length: np.ndarray
    cycles: list
    limit_actions: np.ndarray
    limit_prices: np.ndarray
    limit_profits: np.ndarray
    profit_gain: np.ndarray
    firm_profit_gain: np.ndarray
    near_collusive: np.ndarray
    near_nash: np.ndarray
    ir_prices: np.ndarray
    ir_profits: np.ndarray
    cf_prices: np.ndarray
    cf_profits: np.ndarray
    deviation_action: np.ndarray
    deviation_gain: np.ndarray
    deviation_pays: np.ndarray
    returned: np.ndarray
    periods_to_return: np.ndarray
    elapsed: float = 0.0
    saved: Any = None
    triggers: Any = None
    punishing_at_end: Any = None
    event: Any = None
    _summary: dict = field(default_factory=dict, repr=False)

    @property
    def n_sessions(self) -> int:
        """Number of sessions."""
        return int(self.converged.size)

    @property
    def limit_exact(self) -> bool:
        """True when the limit outcomes are exact (a deterministic line-up); False when they are the
        simulated estimate of a line-up with automata that act at random (see :func:`sim.learning.session.learn`)."""
        return self.lineup.limit_exact

    @property
    def confidence(self) -> float:
        """Level of the confidence intervals of :meth:`summary`."""
        return float(self.settings.get("confidence", 0.95))

    def summary(self) -> dict:
        """Statistics across sessions, with confidence intervals at the run's ``confidence`` level
        (95 % by default; Student's t for means, Wilson for shares, as in :mod:`sim.core.stats`).

        Returns
        -------
        dict
            Limit outcomes and impulse responses are over converged sessions; when none converged, over all
            sessions (``over`` says which). Means come as ``{mean, se, low, high, n}``, shares as ``{share, low,
            high, count, n}``; per-firm entries are lists of length n_firms; ``impulse_response.prices`` holds
            ``mean``, ``low`` and ``high``, each a list of T + 2 rows of n_firms values. ``rival_price_cut`` is the
            learning rivals' mean price cut in the period after the deviation (every rival's when none learns: an
            automaton's response is its rule, not learned), ``rival_price_cuts`` each rival's, with ``firm`` (from
            1) and ``learner``. Alternating sessions
            (``settings["timing"] == "alternating"``) add ``alternating``: the shares of sessions at a fixed price
            pair (``fixed_price``, ``fixed_above_nash``, ``fixed_collusive``; ``fixed_not_stage_nash``: at a pair
            that is not a static equilibrium of the grids, so some firm would gain in the period by another price of
            its grid) and in a cycle (``cycle``), the
            ``cycle_length`` over cycling sessions and its distribution ``cycle_lengths``, and the profit gain of
            each group; their impulse-response entries are nan.
        """
        if self._summary:
            return self._summary
        lu = self.lineup
        lvl = self.confidence
        n = self.n_sessions
        nc = int(self.converged.sum())
        sel = self.converged if nc > 0 else np.ones(n, dtype=bool)
        f = lu.n_seats
        lengths, counts = np.unique(self.cycle_length[sel], return_counts=True)
        edges = HISTOGRAM_EDGES
        pg = self.profit_gain[sel]
        h, _ = np.histogram(np.clip(pg, edges[0], edges[-1]), bins=edges)
        ir = {
            "prices": _stack_ci(self.ir_prices[sel], lvl),
            "profits": _stack_ci(self.ir_profits[sel], lvl),
            "no_deviation_prices": self.cf_prices[sel].mean(axis=0).tolist() if sel.any() else [],
            "no_deviation_profits": self.cf_profits[sel].mean(axis=0).tolist() if sel.any() else [],
        }
        # the deviator's rivals: the seats of other owners (after a merger the merged partner is not a rival)
        owner = lu.seats.owner
        rivals = [j for j in range(f) if owner[j] != owner[self.settings["deviator"]]]
        # the learned response: the learning rivals' (an automaton's response is its rule); all rivals when none learns
        learning = [j for j in rivals if lu.learners[j] is not None] or rivals
        pre = self.ir_prices[sel][:, 0, :]
        after = self.ir_prices[sel][:, 2, :] if self.ir_prices.shape[1] > 2 else pre
        out = {
            "sessions": n,
            "confidence": lvl,
            "over": "converged sessions" if nc > 0 else "all sessions (none converged)",
            "converged": _share_ci(nc, n, lvl),
            "periods": {**_mean_ci(self.periods[self.converged], lvl), **_quantiles(self.periods[self.converged])},
            "profit_gain": {**_mean_ci(pg, lvl), **_quantiles(pg)},
            "firm_profit_gain": [_mean_ci(self.firm_profit_gain[sel][:, i], lvl) for i in range(f)],
            "limit_prices": [_mean_ci(self.limit_prices[sel][:, i], lvl) for i in range(f)],
            "limit_profits": [_mean_ci(self.limit_profits[sel][:, i], lvl) for i in range(f)],
            "near_collusive": _share_ci(int(self.near_collusive[sel].sum()), int(sel.sum()), lvl),
            "near_nash": _share_ci(int(self.near_nash[sel].sum()), int(sel.sum()), lvl),
            "limit": limit_description(lu, self.settings),
            "cycle_lengths": ({str(int(k)): int(c) for k, c in zip(lengths, counts)} if self.limit_exact
                              else None),
            "profit_gain_histogram": {"edges": edges.tolist(), "counts": h.tolist()},
            "impulse_response": ir,
            "rival_price_cut": _mean_ci((pre[:, learning] - after[:, learning]).mean(axis=1), lvl) if rivals else {},
            "rival_price_cuts": [{"firm": j + 1, "learner": lu.learners[j] is not None,
                                  **_mean_ci(pre[:, j] - after[:, j], lvl)} for j in rivals],
            "deviation_gain": _mean_ci(self.deviation_gain[sel], lvl),
            "deviation_pays": _mean_ci(self.deviation_pays[sel], lvl, (0.0, 1.0)),
            "returned": _mean_ci(self.returned[sel], lvl, (0.0, 1.0)),
            "periods_to_return": _mean_ci(self.periods_to_return[sel], lvl, (0.0, math.inf)),
            "benchmarks": {
                "nash_prices": lu.nash_prices.tolist(), "collusive_prices": lu.collusive_prices.tolist(),
                "nash_profits": lu.nash_profits.tolist(), "collusive_profits": lu.collusive_profits.tolist(),
                "nash_actions": lu.nash_actions.tolist(), "collusive_actions": lu.collusive_actions.tolist(),
            },
        }
        if lu.has_automata and self.triggers is not None:
            # why a learner facing an automaton ends where it does: the automaton's punishments during learning
            # after an event the punishments are recorded from the event: so are the periods they are a share of
            since = self.periods - self.event["start"] if self.event else self.periods
            out["automata"] = trigger_summary(lu, self.triggers, self.punishing_at_end, since, sel, lvl,
                                              self.event["start"] if self.event else None)
        if self.settings.get("timing") == "alternating":
            out["alternating"] = _alternating_summary(self, sel, lvl)
            out["limit"] = {"method": "exact",
                            "what": "the cycle of greedy play under alternating moves from each session's final "
                                    "state, found exactly (Klein, 2021); no impulse response is computed"}
        if self.event is not None:
            ev = self.event
            out["event"] = event_summary(ev["event"], ev["path"], ev["settle"], self.converged, self.limit_prices,
                                         ev["what"], lvl, ev.get("merger"), ev.get("at_event"))
            if out["event"].get("merger", {}).get("available"):
                _after_merger(out["event"]["merger"], self, sel, lvl)
        self._summary.update(out)
        return self._summary

    def describe_seats(self) -> list[dict]:
        """What sits on each seat.

        Returns
        -------
        list of dict
            One per seat: a learner's parameters and grid (:meth:`strategies.qlearning.CompiledLearner.to_dict`),
            or an automaton's ``strategy`` name, its ``actions`` and whether it ``acts_at_random``.
        """
        lu = self.lineup
        return [c.to_dict() if c is not None else {"strategy": lu.names[i], "actions": lu.grids[i].tolist(),
                                                   "acts_at_random": i in lu.random_seats}
                for i, c in enumerate(lu.learners)]

    def per_session(self) -> dict:
        """Every session's outcomes as plain lists.

        Returns
        -------
        dict
            Lists of length n_sessions: ``converged``, ``periods``, ``cycle_length`` and ``transient`` (None when
            the limit is an estimate), ``profit_gain``, ``limit_prices`` and ``limit_profits`` (rows of n_firms),
            ``cycle_prices`` and ``cycle_actions`` (each session's stored cycle, None when not defined),
            ``deviation_gain``, ``deviation_action`` (the forced action's value); and ``limit_method``.
        """
        lu = self.lineup
        exact = self.limit_exact
        return {
            "converged": self.converged.tolist(),
            "periods": self.periods.tolist(),
            "limit_method": "exact" if exact else "estimate",
            "cycle_length": self.cycle_length.tolist() if exact else None,
            "transient": self.transient.tolist() if exact else None,
            "profit_gain": self.profit_gain.tolist(),
            "limit_prices": self.limit_prices.tolist(),
            "limit_profits": self.limit_profits.tolist(),
            "cycle_prices": [
                [[float(lu.grids[i][a[i]]) for i in range(lu.n_seats)] for a in c] for c in self.cycles
            ] if exact and not lu.market.quantity_setting else None,
            "cycle_actions": [[[float(lu.grids[i][a[i]]) for i in range(lu.n_seats)] for a in c]
                              for c in self.cycles] if exact else None,
            "deviation_gain": self.deviation_gain.tolist(),
            "deviation_action": [float(lu.grids[self.settings["deviator"]][a]) if a >= 0 else None
                                 for a in self.deviation_action],
        }

    def to_dict(self, sessions: bool = True) -> dict:
        """Plain data: settings, seats, the summary and (optionally) every session's outcomes.

        Firms are numbered from 1 here as in every output (``settings.deviator`` is the deviating firm's
        number); the Python arguments and attributes count seats from 0.

        Parameters
        ----------
        sessions : bool
            Include :meth:`per_session`.

        Returns
        -------
        dict
            ``settings``, ``learners`` (:meth:`describe_seats`), ``seats`` (strategy names), ``summary``,
            ``elapsed_seconds`` and, with ``sessions``, ``per_session``.
        """
        settings = dict(self.settings)
        settings["deviator"] = int(settings["deviator"]) + 1
        out = {"settings": settings, "learners": self.describe_seats(), "seats": list(self.lineup.names),
               "summary": self.summary(), "elapsed_seconds": self.elapsed}
        if sessions:
            out["per_session"] = self.per_session()
        return out


def _alternating_summary(res: LearningResult, sel: np.ndarray, level: float) -> dict:
    """Where alternating sessions end (Klein, 2021): a fixed price pair, above the static-Nash price or at the
    collusive one, or a cycle (Edgeworth-cycle-like; Maskin and Tirole, 1988), over the sessions ``sel``."""
    lu = res.lineup
    period = res.cycle_length[sel]
    fixed = period == 1
    tol = res.settings["near"] * np.abs(lu.collusive_prices - lu.nash_prices)
    above = np.all(res.limit_prices[sel] > lu.nash_prices + tol + 1e-12, axis=1)
    k = int(sel.sum())
    pg = res.profit_gain[sel]
    lengths, counts = np.unique(period[~fixed], return_counts=True)
    sustained = np.array([f and not _stage_equilibrium(lu, a) for f, a in zip(fixed, res.limit_actions[sel])], bool)
    return {
        "timing": "alternating",
        "fixed_price": _share_ci(int(fixed.sum()), k, level),
        "fixed_above_nash": _share_ci(int((fixed & above).sum()), k, level),
        "fixed_not_stage_nash": _share_ci(int(sustained.sum()), k, level),
        "fixed_collusive": _share_ci(int((fixed & res.near_collusive[sel]).sum()), k, level),
        "cycle": _share_ci(int((~fixed).sum()), k, level),
        "cycle_length": _mean_ci(period[~fixed], level),
        "cycle_lengths": {str(int(a)): int(c) for a, c in zip(lengths, counts)},
        "profit_gain_fixed": _mean_ci(pg[fixed], level),
        "profit_gain_cycle": _mean_ci(pg[~fixed], level),
        "what": ("two Q-learners set prices in turn, each price held for two periods (Klein, 2021); a session "
                 "ends at a fixed price pair when greedy play from its final state repeats the same two prices "
                 "every period, and in a cycle otherwise (cycle length: periods until the price pair repeats)"),
    }


def _after_merger(mg: dict, res: LearningResult, sel: np.ndarray, level: float) -> None:
    """The learned outcome measured against the market after a merger (in place in ``mg``, the event's ``merger``
    entry): ``above_nash_after`` (per product, each session's limit price minus the product's static Nash price with
    the merged firm setting its products' prices jointly) and ``profit_gain_after`` (the profit gain with that static
    Nash as its zero; the joint-profit outcome, its one, is the same before and after a merger), over the sessions
    ``sel`` of the other limit outcomes; no ``profit_gain_after`` after a merger to monopoly, whose static Nash is the
    joint-profit outcome. The line-up's benchmarks stay those before the merger: the part of the learned prices above
    them that the merger's unilateral effect alone would give is then told apart."""
    nash = np.asarray(mg["nash_prices"], dtype=float)
    pn = float(np.mean(mg["nash_profits"]))
    pm = float(np.mean(res.lineup.collusive_profits))
    mg["above_nash_after"] = [_mean_ci(res.limit_prices[sel, i] - nash[i], level) for i in range(nash.size)]
    if len(mg["firms"]) < res.lineup.n_seats:
        mg["profit_gain_after"] = _mean_ci((res.limit_profits[sel].mean(axis=1) - pn) / (pm - pn), level)
    # else a merger to monopoly: its static Nash is the joint-profit outcome, and the gain is not defined


def _stage_equilibrium(lu, actions: np.ndarray) -> bool:
    """Whether the profile ``actions`` (one action of each seat's grid, as ``limit_actions`` holds them at a fixed
    pair) is a static (stage-game) Nash equilibrium of the seats' grids: no firm earns more in the period by another
    action of its own grid, the others held (up to a relative 1e-12, rounding)."""
    place, radix, payoff = lu.place, lu.seats.radix, lu.payoff
    acts = np.array([int(np.argmin(np.abs(np.asarray(g) - a))) for g, a in zip(lu.grids, actions)], np.int64)
    prof = int(np.dot(acts, place))
    for i in range(acts.size):
        base = payoff[prof, i]
        for b in range(int(radix[i])):
            if payoff[prof + (b - acts[i]) * place[i], i] > base + 1e-12 * max(1.0, abs(base)):
                return False
    return True


def _stack_ci(x: np.ndarray, level: float = 0.95) -> dict:
    """Mean and Student's interval at ``level`` (``n - 1`` degrees of freedom) per row and firm of an array of shape
    (n, T, f)."""

    if x.shape[0] == 0:
        return {"mean": [], "low": [], "high": []}
    mean = x.mean(axis=0)
    if x.shape[0] < 2:
        nan = np.full_like(mean, np.nan)
        return {"mean": mean.tolist(), "low": nan.tolist(), "high": nan.tolist()}
    se = x.std(axis=0, ddof=1) / math.sqrt(x.shape[0])
    h = student_quantile(level, x.shape[0]) * se
    return {"mean": mean.tolist(), "low": (mean - h).tolist(), "high": (mean + h).tolist()}
