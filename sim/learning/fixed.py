"""A learner that no longer learns: the greedy policy of a saved learner, read from a file and played as it is.

A seat of family ``"fixed"`` (:class:`strategies.qlearning.QLearner` with ``family = "fixed"``, ``policy_from``,
``firm`` and ``session``) plays, in every state, the greedy action that the learner of firm ``firm`` had at the end
of saved session ``session`` of the file ``policy_from`` (:mod:`sim.learning.saved`). It never explores, never
updates and draws nothing from the session's random stream. Its grid and memory are the saved learner's.

Such a seat answers questions a learning run alone cannot: how a new learner, or an automaton, fares against a
learned pricing rule that is frozen (an algorithm whose training has ended), and whether two frozen copies of a
converged pair reproduce the pair's limit prices.

What the policy reads
---------------------
The saved learner's state is the firms' prices of its last ``k`` periods, as indices on the grids of the saved run.
In the new line-up each lag's profile is read off the same way: firm ``j`` of the saved run is firm ``j`` here,
except that the fixed seat and firm ``firm`` swap places when the fixed seat sits elsewhere (a copy of firm 1's
learner seated as firm 2 sees firm 1's price where it saw its rival's). Every price another firm can play here must
be a price of the grid the saved learner saw for that firm: a policy is defined only on the prices it learned on,
and any other is refused (``<key>.policy_from``) rather than rounded. The market must be the saved one.
"""

from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.records import to_plain
from sim.learning.saved import _first_difference, load_learners
from strategies.qlearning import QLearner

__all__ = ["FixedPolicy", "fixed_q", "load_policy", "policy_table", "with_fixed_policies", "with_sources"]

#: a price of the new line-up reads as a saved grid's price when they differ by at most this, relative (rounding)
GRID_MATCH = 1e-9


@dataclass(frozen=True, eq=False)
class FixedPolicy:
    """The greedy policy of one saved learner.

    Attributes
    ----------
    greedy : ndarray of int64, shape (M_saved**k,)
        The saved learner's greedy action (an index on ``grids[seat]``) in every history state of the saved run.
    k : int
        Its memory (1 for a saved bandit, whose policy is the same in every state).
    seat : int
        The saved firm, from 0.
    grids : tuple of ndarray
        Every saved firm's prices (a learner's grid, an automaton's actions), in the saved order.
    source : dict
        ``policy_from``, ``firm`` (from 1), ``session`` (from 1) and ``arrays_sha256`` of the file.
    """

    greedy: np.ndarray
    k: int
    seat: int
    grids: tuple
    source: dict


def _seat_grid(entry: dict) -> np.ndarray:
    return np.asarray(entry.get("grid", entry.get("actions", [])), dtype=float)


def load_policy(strategy: QLearner, key: str, market: dict | None = None) -> FixedPolicy:
    """Read the policy a fixed seat plays, checking the file (format, version, hash) and the market.

    Parameters
    ----------
    strategy : strategies.qlearning.QLearner
        With ``family = "fixed"``.
    key : str
        Key path of the seat (``"strategies[2]"``); errors name ``key.policy_from``, ``key.firm`` or ``key.session``.
    market : dict, optional
        The market of the new run (:meth:`sim.Market.to_dict`); None: not compared.

    Returns
    -------
    FixedPolicy

    Raises
    ------
    InputError
        A missing, damaged or altered file, another format version, another market, a seat that was not a learner,
        a session or a seat the file does not hold.
    """
    p = strategy.spec(prefix=key)
    fkey = f"{key}.policy_from"
    saved = load_learners(p["policy_from"], fkey)
    h = saved.header
    if market is not None:
        diff = _first_difference(h.get("market"), json.loads(json.dumps(to_plain(market))))
        if diff is not None:
            there = (h.get("market") or {}).get(diff, "not given")
            raise InputError(fkey, f"the learner was saved on another market (market.{diff}: {there!r} there, "
                                   f"{market.get(diff, 'not given')!r} here)")
    seats = h.get("seats") or []
    seat, session = int(p["firm"]), int(p["session"])
    if seat > len(seats):
        raise InputError(f"{key}.firm", f"must be a firm of the saved run (1 to {len(seats)}), got {seat}")
    if seats[seat - 1].get("strategy") != "qlearning":
        raise InputError(f"{key}.firm", f"firm {seat} of the saved run played {seats[seat - 1].get('strategy')!r}, "
                                        "not a learner")
    if session > saved.n_sessions:
        raise InputError(f"{key}.session", f"must be a saved session (1 to {saved.n_sessions}), got {session}")
    grids = tuple(_seat_grid(e) for e in seats)
    m_old = math.prod(g.size for g in grids)
    k = max(1, int(seats[seat - 1].get("k") or 0))
    li = sum(e.get("strategy") == "qlearning" for e in seats[: seat - 1])
    n_states = m_old**k
    if saved.greedy.shape[2] < m_old ** int(seats[seat - 1].get("k") or 0) or saved.Q.shape[3] < grids[seat - 1].size:
        raise InputError(fkey, f"its arrays do not fit its seats ({saved.greedy.shape[2]} states, {n_states} "
                               "expected): the file is not consistent")
    if seats[seat - 1].get("k") in (0, None):
        # a saved bandit keeps no state: its one greedy action holds in every state
        greedy = np.full(n_states, int(saved.greedy[session - 1, li, 0]), dtype=np.int64)
    else:
        greedy = saved.greedy[session - 1, li, :n_states].astype(np.int64)
    if np.any(greedy < 0) or np.any(greedy >= grids[seat - 1].size):
        raise InputError(fkey, "its greedy actions lie outside the saved grid: the file is not consistent")
    source = {"policy_from": p["policy_from"], "firm": seat, "session": session,
              "arrays_sha256": h.get("arrays_sha256"), "family": seats[seat - 1].get("family", "q")}
    return FixedPolicy(greedy, k, seat - 1, grids, source)


def with_fixed_policies(seats: list, keys: list, market: dict | None) -> tuple[list, dict]:
    """The line-up's fixed seats given the saved learners' grids and memories, and their policies.

    Parameters
    ----------
    seats : list
        One strategy per seat.
    keys : list of str
        Key path of each seat.
    market : dict or None
        The new run's market (:meth:`sim.Market.to_dict`), or None.

    Returns
    -------
    seats : list
        A copy: each fixed seat a clone with the saved grid and memory.
    policies : dict of int to FixedPolicy
        By seat, from 0.
    """
    out, policies = list(seats), {}
    for i, x in enumerate(seats):
        if isinstance(x, QLearner) and x.family == "fixed":
            pol = load_policy(x, keys[i], market)
            policies[i] = pol
            out[i] = x.clone(grid=pol.grids[pol.seat].tolist(), m=None, k=pol.k)
    return out, policies


def policy_table(policy: FixedPolicy, position: int, radix: np.ndarray, place: np.ndarray, grids: tuple,
                 key: str) -> np.ndarray:
    """The fixed seat's action in every state of the new line-up.

    Parameters
    ----------
    policy : FixedPolicy
    position : int
        The fixed seat here, from 0.
    radix, place : ndarray of int64, shape (n,)
        Actions and place value of every seat of the new line-up.
    grids : tuple of ndarray
        Every seat's prices in the new line-up.
    key : str
        Key path of the seat, for errors.

    Returns
    -------
    ndarray of int64, shape (M**k,)
        ``M = prod(radix)``; state ``s`` as in :mod:`sim.learning.kernel` (lag 1 in the lowest digit).

    Raises
    ------
    InputError
        ``key.policy_from``: another number of firms, or a price here that the saved learner never saw.
    """
    n = radix.size
    fkey = f"{key}.policy_from"
    if len(policy.grids) != n:
        raise InputError(fkey, f"the learner was saved in a market of {len(policy.grids)} firms; this one has {n}")
    perm = list(range(n))
    perm[position], perm[policy.seat] = perm[policy.seat], perm[position]
    radix_old = np.array([g.size for g in policy.grids], dtype=np.int64)
    place_old = np.concatenate([[1], np.cumprod(radix_old[:-1])]).astype(np.int64)
    maps = []
    for j in range(n):
        old, new = policy.grids[j], np.asarray(grids[perm[j]], dtype=float)
        # the nearest saved price, equal up to rounding (grids computed for different seats of a symmetric market
        # can differ in their last bits)
        hi = np.minimum(np.searchsorted(old, new), old.size - 1)
        lo = np.maximum(hi - 1, 0)
        idx = np.where(np.abs(old[lo] - new) <= np.abs(old[hi] - new), lo, hi)
        bad = np.abs(old[idx] - new) > GRID_MATCH * np.maximum(1.0, np.abs(new))
        if np.any(bad):
            v = float(new[np.flatnonzero(bad)[0]])
            raise InputError(fkey, f"firm {perm[j] + 1} here can play {v:.6g}, not a price of the grid the saved "
                                   f"learner saw for firm {j + 1} ({old.size} prices from {old[0]:.6g} to "
                                   f"{old[-1]:.6g}): a fixed policy reads only the prices it learned on")
        maps.append(idx.astype(np.int64))
    m_new, m_old = int(np.prod(radix)), int(radix_old.prod())
    s = np.arange(m_new**policy.k, dtype=np.int64)
    s_old = np.zeros_like(s)
    for lag in range(policy.k):
        prof = (s // m_new**lag) % m_new
        prof_old = np.zeros_like(s)
        for j in range(n):
            a = (prof // place[perm[j]]) % radix[perm[j]]
            prof_old += maps[j][a] * place_old[j]
        s_old += prof_old * m_old**lag
    return policy.greedy[s_old]


def fixed_q(q0: np.ndarray, policies: dict, seats, grids: tuple, keys: list) -> np.ndarray:
    """Initial Q-values with each fixed seat's rows set to its policy: 1 at the policy's action, 0 elsewhere, so
    that the first argmax of every row (the greedy action the kernels play) is the policy's action.

    Parameters
    ----------
    q0 : ndarray of float64, shape (n_learners, max(mod), max(radix))
        The line-up's initial Q-values (changed in place and returned).
    policies : dict of int to FixedPolicy
    seats : sim.learning.inputs.SeatInputs
    grids : tuple of ndarray
    keys : list of str

    Returns
    -------
    ndarray of float64, shape (n_learners, max(mod), max(radix))
    """
    for i, pol in policies.items():
        li, n_states = int(seats.lidx[i]), int(seats.mod[i])
        table = policy_table(pol, i, seats.radix, seats.place, grids, keys[i])
        q0[li, :n_states, :] = 0.0
        q0[li, np.arange(n_states), table] = 1.0
    return q0


def with_sources(compiled: tuple, policies: dict) -> tuple:
    """The compiled seats with each fixed seat's ``source`` naming its file, firm, session and arrays' SHA-256 (what
    a report and a saved file record of it).

    Parameters
    ----------
    compiled : tuple
        One :class:`~strategies.qlearning.CompiledLearner` (or None for an automaton) per seat.
    policies : dict of int to FixedPolicy

    Returns
    -------
    tuple
    """
    return tuple(dataclasses.replace(c, source=dict(policies[i].source)) if i in policies else c
                 for i, c in enumerate(compiled))
