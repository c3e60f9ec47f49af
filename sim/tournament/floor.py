"""The lowest payoff a tournament can give, known before anything is played.

Linear fitness ``1 - w + w * payoff`` (:mod:`sim.tournament.replicator`) must stay positive for every payoff the
tournament can produce; :func:`payoff_floor` bounds those payoffs from the stage game and the actions the entrants'
rules can play, so that an experiment is refused before its matches run.
"""

from __future__ import annotations

import math

import numpy as np

import strategies.step as SS
from sim.core.text import fmt_num
from sim.models.stagecore import market_owner
from sim.tournament.plan import TournamentPlan

__all__ = ["MAX_PROFILES", "payoff_floor", "seat_actions"]

#: the most action profiles :func:`payoff_floor` evaluates
MAX_PROFILES = 500_000


def seat_actions(plan: TournamentPlan) -> list[list[np.ndarray]]:
    """Every action each seat can play in some match.

    The levels its automaton's states play (whether or not the state is reached), its cheating level where it
    cheats, the action an implementation error substitutes, and a learning match's action grids.

    Parameters
    ----------
    plan : TournamentPlan

    Returns
    -------
    list of list of ndarray
        Per seat (firm), the distinct actions, each an ndarray over the firm's products.
    """

    ms = plan.market
    owner = market_owner(ms)
    prods = [np.flatnonzero(owner == i) for i in range(ms.n_firms)]
    seen: list[dict] = [{} for _ in range(ms.n_firms)]
    tremble = plan.mon_tremble
    for m in plan.matches:
        if m.learning:
            for i in range(ms.n_firms):
                for a in np.asarray(m.game.grids[i], dtype=float):
                    seen[i].setdefault((float(a),), np.array([a], dtype=float))
            continue
        cl = m.game.lineup
        for i in range(ms.n_firms):
            ns = int(cl.firms[i, SS.N_STATES])
            used = set(cl.states[i, :ns, SS.ACTION].tolist())
            if (np.any(cl.probs[i, :ns, SS.P_CHEAT] > 0)
                    and cl.firms[i, SS.CHEAT_FROM] < cl.firms[i, SS.CHEAT_UNTIL]):
                used.add(int(cl.firms[i, SS.CHEAT_LEVEL]))
            for lev in sorted(used):
                row = cl.levels[i, lev, prods[i]]
                seen[i].setdefault(tuple(row.tolist()), row.astype(float))
            if tremble:
                row = np.asarray(m.game.tremble, dtype=float)[prods[i]]
                seen[i].setdefault(tuple(row.tolist()), row)
    return [list(d.values()) for d in seen]


def _profile_floors(plan: TournamentPlan, sets: list, metric: str) -> tuple[np.ndarray, np.ndarray]:
    """Every combination of the seats' actions and the lowest value of ``metric`` each seat can reach there:
    actions of shape (profiles, n_products) and values of shape (profiles, n_firms)."""
    ms = plan.market
    owner = market_owner(ms)
    idx = np.stack(np.meshgrid(*[np.arange(len(x)) for x in sets], indexing="ij"), -1).reshape(-1, len(sets))
    A = np.empty((idx.shape[0], ms.n_products))
    for i, opts in enumerate(sets):
        A[:, owner == i] = np.stack(opts)[idx[:, i]]
    pi1 = np.asarray(ms.firm_profits(A), dtype=float)
    if plan.monitoring["sigma"] > 0:
        pi0 = np.asarray(ms.firm_profits(A, 0.0), dtype=float)
        slope = pi1 - pi0
        tol = 1e-12 * np.maximum(1.0, np.abs(pi1))
        low = np.where(slope >= -tol, np.minimum(pi0, pi1), -np.inf)
    else:
        low = pi1
    if metric == "profit_gain":
        ok = plan.gain_defined
        val = np.where(ok[None, :], (low - plan.nash[None, :]) / np.where(ok, plan.collusive - plan.nash, 1.0),
                       np.inf)
    else:
        val = low
    return A, val


def payoff_floor(plan: TournamentPlan, metric: str | None = None) -> tuple[float, str]:
    """A lower bound, known before any match is played, of every payoff the tournament can give an entrant under
    ``metric``, and where it is reached.

    Every seat's profit in every period is at least its profit at the worst action profile the seats can play
    (:func:`seat_actions`, every combination, evaluated as the stage game does). With a demand shock ``theta`` (mean
    one, any value in ``[0, inf)``) a firm's profit is affine in ``theta`` (the shock scales the price under
    Cournot, the quantity under Bertrand), so its floor is its profit at ``theta = 0`` where the profit rises with
    ``theta``, and there is none where it falls. A mean profit per period is at least the floor ``lo``; a discounted
    profit at least ``min(lo, 0)`` times the sum of the discount weights of the horizon; a profit gain at least
    ``(lo - Nash) / (collusive - Nash)``. An entrant's payoffs average its seats' values, so the smallest seat floor
    bounds them all.

    Each seat's actions combine with every action of every other seat, whether or not the two ever meet in one
    period, so the floor can lie below the payoffs the tournament actually produces; it never lies above one.

    Parameters
    ----------
    plan : TournamentPlan
    metric : str, optional
        Default: the ranking score.

    Returns
    -------
    floor : float
        ``-inf`` when the payoff has no lower bound (or the profiles are too many to evaluate).
    where : str
        What gives the floor, for messages.
    """

    metric = metric or plan.settings["score"]
    sets = seat_actions(plan)
    count = math.prod(len(x) for x in sets)
    if count > MAX_PROFILES:
        return -math.inf, f"the seats' actions make {count:,} profiles, more than the {MAX_PROFILES:,} checked"
    A, val = _profile_floors(plan, sets, metric)
    k, i = np.unravel_index(int(np.argmin(val)), val.shape)
    floor = float(val[k, i])
    run = plan.run
    if metric == "discounted_profit":
        d = run["delta"]
        weights = float(run["periods"]) if d == 1.0 else (1.0 - d ** run["periods"]) / (1.0 - d)
        floor = min(floor, 0.0) * weights
    acts = ", ".join(fmt_num(float(x)) for x in A[k])
    shock = " and a demand shock near zero" if plan.monitoring["sigma"] > 0 else ""
    if floor == -math.inf:
        return floor, (f"firm {i + 1} prices below cost at actions ({acts}), where a large demand shock makes its "
                       "loss as large as the shock")
    return floor, f"firm {i + 1} at actions ({acts}){shock}"
