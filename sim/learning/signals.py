"""Learning from a profit signal: each Q-learner sees its own last price and whether its profit was low.

After Calvano, Calzolari, Denicolò and Pastorello (2021), "Algorithmic collusion with imperfect monitoring",
International Journal of Industrial Organization 79 (abstract read: Q-learners learn to collude in an environment
with imperfect monitoring adapted from Green and Porter, 1984; collusion is sustained by "price wars" triggered by
the observation of low prices, of finite duration, harsher at first and then fading, triggered both by deviations
and by adverse demand shocks), and Green and Porter (1984), "Noncooperative collusion under imperfect price
information", Econometrica 52. The protocol is stated here, not taken from the paper's text: its signal is the
learner's own profit (low or not), where the paper's learners watch a price; it is the ``[learning] observe =
"own_profit"`` setting (``"prices"``, the default, is the protocol of :mod:`sim.learning.kernel`: the state is the
last periods' prices).

The protocol
------------
* Learner ``i``'s state is ``o_i = a_i + m * low_i`` (``2 m`` states): ``a_i`` the index of its own price last
  period, ``low_i`` whether its realised profit last period, ``theta * payoff[prof, i]`` (``theta`` the period's
  demand shock, :mod:`sim.learning.shocks`), fell below ``(1 - band)`` times its *reference profit*
  ``ref[i, a_i]``: the profit it would earn at its own price if every rival charged the same price (the profile
  ``(a_i, ..., a_i)``, shock one). A low profit is what a rival's undercut and an adverse draw both give: the
  learner cannot tell them apart, which is the monitoring problem of Green and Porter.
* ``band`` is ``[learning] signal_band`` (default 0.1: a profit 10 % below the reference is low).
* Two signal levels and no memory of rivals' prices keep the table small (``2 m`` states instead of ``m ** n``),
  so that a session learns in a few hundred thousand periods; a third, "high", level would triple the states for a
  signal that no punishment needs.
* Everything else is the protocol of :func:`sim.learning.kernel.run_session` with its asynchronous rule:
  simultaneous moves, exploration ``exp(-beta t)`` (one uniform, and a second when it explores, seats in order),
  then the period's shock (one ziggurat normal with a shock), then the update of the value of the action played,
  ``Q[o_i, a_i] <- (1 - alpha) Q[o_i, a_i] + alpha (theta payoff + delta max Q[o_i'])`` (Watkins and Dayan, 1992).
* Every seat is a Q-learner with the asynchronous rule, the same number of prices and simultaneous moves; no
  automata, bandits or events (:func:`check_signal_lineup` says so, naming ``learning.observe``).

Where it runs
-------------
In the learning kernel itself, :func:`sim.learning.kernel.run_session` with ``observe = 1``: the kernel reads a
learner's state with :func:`signal_state` and computes the next one, once the period's shock is drawn, with
:func:`signal_code` (both inlined); the draws, the update and the greedy bookkeeping are those of the prices
protocol. :func:`reference_signal_session` is its plain-Python twin.

Layout
------
The kernel keeps its saved layout: learner ``i``'s state ``o_i`` is row ``o_i`` of ``Q[lidx[i]]``, whose ``M ** k``
rows hold the ``2 m`` states (``2 m <= m ** n`` with two firms or more and ``m >= 2``); the other rows are never
visited. The system state is one integer, ``x = sum_i o_i * (2 m) ** i``, returned where the price protocol returns
its history state (and saved as ``history``).

Greedy play after learning (:func:`signal_limit`) has no shock (``theta = 1``, the shock's mean): it is a map on
``x``, whose cycle gives the limit prices; the impulse response to a one-period deviation and its exact value are
those of :func:`sim.learning.limits.analyse_limit` on this map (:func:`signal_impulse`: a rival whose profit the
deviation makes low sees the same signal as after a bad draw), and :func:`greedy_response` answers a low signal
forced on every learner. The response to a drawn shock, learning going on, is :mod:`sim.learning.shock_response`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.errors import InputError
from sim.core.params import Options, Real
from sim.core.rng import ReferenceStream
from sim.learning.inputs import AUTOMATON, Q_FAMILY
from sim.learning.shocks import twin_shock

__all__ = [
    "OBSERVE",
    "OBSERVE_CODES",
    "SIGNAL_BAND",
    "SIGNAL_CONSTRAINTS",
    "check_saved_observe",
    "check_signal_lineup",
    "greedy_response",
    "payoff_low",
    "reference_profits",
    "reference_signal_session",
    "signal_code",
    "signal_impulse",
    "signal_limit",
    "signal_path",
    "signal_profile",
    "signal_start",
    "signal_state",
]

#: what a learner's state is made of: the last periods' prices (default), its own price and a profit signal, or the
#: last prices as it saw them, with error (:mod:`sim.learning.noisy_prices`)
OBSERVE = ("prices", "own_profit", "noisy_prices")
#: the kernel's code of each (``observe`` of :func:`sim.learning.kernel.run_session`)
OBSERVE_CODES = {"prices": 0, "own_profit": 1, "noisy_prices": 2}
#: the default share below the reference profit that makes a profit low
SIGNAL_BAND = 0.1
#: the settings of the protocols, as data (keys of ``[learning]``); ``price_noise`` is in grid steps, at most a
#: hundred (beyond, a seen price is about uniform on any grid of the sizes used)
SIGNAL_CONSTRAINTS = {"observe": Options(*OBSERVE), "signal_band": Real(0, 1, closed="neither"),
                      "price_noise": Real(0, 100, closed="right")}


def check_signal_lineup(lineup, key: str = "learning.observe") -> None:
    """Refuse a line-up the profit-signal protocol cannot run.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    key : str
        Key path of the setting in error messages.

    Raises
    ------
    InputError
        An automaton or a bandit, a learner with the synchronous or mixed rule, seats with different numbers of
        prices, or a memory other than one period.
    """
    seats = lineup.seats
    if (seats.kind == AUTOMATON).any() or (seats.family != Q_FAMILY).any():
        raise InputError(key, "'own_profit' needs a Q-learner on every seat (no automata or bandits)")
    if (seats.share > 0.0).any():
        raise InputError(key, "'own_profit' needs the asynchronous update rule (learning.update = 'asynchronous')")
    if (seats.radix != seats.radix[0]).any():
        raise InputError(key, f"'own_profit' needs the same number of prices on every seat, got "
                              f"{seats.radix.tolist()}")
    if 2 * int(seats.radix[0]) > int(seats.mod.min()):
        raise InputError(key, "'own_profit' needs at least 2 prices and 2 firms")
    if int(lineup.stage.K) != 1:
        # the state is the own last price and one bit: a longer memory would only add rows never visited
        raise InputError(key, f"'own_profit' needs a memory of one period (learning.k = 1), got k = "
                              f"{int(lineup.stage.K)}")


def check_saved_observe(header: dict, observe: str, key: str) -> None:
    """Refuse saved sessions learned under another protocol (their saved state means something else).

    Parameters
    ----------
    header : dict
        The saved sessions' header (:class:`sim.learning.saved.SavedLearners`); ``observe`` absent means ``"prices"``.
    observe : {"prices", "own_profit"}
        The protocol of the run about to continue them.
    key : str
        Key path of the setting in error messages.

    Raises
    ------
    InputError
    """
    saved = header.get("observe", "prices")
    if saved != observe:
        raise InputError(key, f"the saved learners observed {saved!r}; this run observes {observe!r} (their states "
                              "mean different things: continue them with the same setting)")


def reference_profits(lineup) -> np.ndarray:
    """Every learner's reference profit: its profit at its own price when every rival charges the same one.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    ref : ndarray of shape (n_seats, m)
        ``ref[i, a] = payoff[(a, ..., a), i]`` of the learners' reward table (shock one).
    """
    seats, payoff = lineup.seats, lineup.learning_stage.payoff
    m = int(seats.radix[0])
    prof = np.arange(m)[:, None] * seats.place[None, :]
    return np.ascontiguousarray(payoff[prof.sum(axis=1)].T)


def signal_start(s: int, lineup) -> int:
    """The system state at the start of a session: last period's prices of history state ``s``, no low profit.

    Parameters
    ----------
    s : int
        A history state of :func:`sim.learning.kernel.initial_state` (the same draws start both protocols).
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    int
    """
    seats = lineup.seats
    prof = int(s) % int(lineup.stage.M)
    w = 2 * int(seats.radix[0])
    return sum(((prof // int(seats.place[i])) % int(seats.radix[i])) * w**i for i in range(seats.radix.size))


def signal_profile(x: int, lineup) -> int:
    """The profile number of last period's prices in system state ``x``.

    Parameters
    ----------
    x : int
    lineup : sim.learning.lineup.Lineup

    Returns
    -------
    int
    """
    seats = lineup.seats
    m = int(seats.radix[0])
    return sum(((int(x) // (2 * m) ** i) % m) * int(seats.place[i]) for i in range(seats.radix.size))


@njit(cache=True, nogil=True, inline="always")
def signal_state(x, i, width):
    """Learner ``i``'s state ``o_i`` in system state ``x``.

    Parameters
    ----------
    x : int
        The system state, ``sum_i o_i * width ** i``.
    i : int
        The seat.
    width : int
        States of a learner, ``2 m``.

    Returns
    -------
    int
    """
    return (x // width**i) % width


@njit(cache=True, nogil=True, inline="always")
def signal_code(a, realised, reference, band, m):
    """A learner's next state: its price ``a``, plus ``m`` when its realised profit is low.

    Parameters
    ----------
    a : int
        The index of the price it charged.
    realised : float
        Its realised profit, ``theta * payoff[prof, i]``.
    reference : float
        Its reference profit at ``a`` (:func:`reference_profits`).
    band : float
        Low: ``realised < (1 - band) * reference``.
    m : int
        Its number of prices.

    Returns
    -------
    int
    """
    return a + m if realised < (1.0 - band) * reference else a


def reference_signal_session(lineup, rng_state, convergence, max_periods, shock=0, sigma=0.0, band=SIGNAL_BAND):
    """Plain-Python twin of :func:`sim.learning.kernel.run_session` with ``observe = 1``, from a new session: slow,
    readable, the check on it.

    States are tuples ``(own price index, low)``, Q-values a dictionary of lists keyed by them, the greedy action
    recomputed with ``max`` on every use; the draws are the kernel's, in its order.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    rng_state : array_like of uint64, shape (4,)
        The session's generator state.
    convergence, max_periods : int
    shock : int
    sigma : float
    band : float

    Returns
    -------
    dict
        ``status``, ``periods``, ``state`` (the kernel's system state), ``Q`` (ndarray in the kernel's layout),
        ``rng`` (the generator state after the last period).
    """
    seats = lineup.seats
    n, m = int(seats.radix.size), int(seats.radix[0])
    payoff = lineup.learning_stage.payoff.tolist()
    ref = reference_profits(lineup).tolist()
    place = [int(p) for p in seats.place]
    rng = ReferenceStream(rng_state)
    # the history draw of sim.learning.kernel.initial_state with K = 1: one price per seat
    last = [rng.next_below(m) for _ in range(n)]
    for _lag in range(1, int(lineup.stage.K)):
        [rng.next_below(m) for _ in range(n)]
    state = [(a, 0) for a in last]
    q0 = lineup.q0
    Q = [{(a, low): [float(v) for v in q0[int(seats.lidx[i]), a + m * low, :m]] for a in range(m) for low in (0, 1)}
         for i in range(n)]
    t, stable, status = 0, 0, 1
    while t < max_periods:
        acts = []
        for i in range(n):
            if rng.next_double() < math.exp(-float(seats.beta[i]) * t):
                acts.append(rng.next_below(m))
            else:
                row = Q[i][state[i]]
                acts.append(row.index(max(row)))
        prof = sum(a * p for a, p in zip(acts, place))
        theta = twin_shock(shock, sigma, rng)
        new_state = [(acts[i], int(theta * payoff[prof][i] < (1.0 - band) * ref[i][acts[i]])) for i in range(n)]
        changed = False
        for i in range(n):
            row = Q[i][state[i]]
            before = row.index(max(row))
            a, al, de = acts[i], float(seats.alpha[i]), float(seats.delta[i])
            row[a] = (1.0 - al) * row[a] + al * (theta * payoff[prof][i] + de * max(Q[i][new_state[i]]))
            changed = changed or row.index(max(row)) != before
        state = new_state
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = 0
            break
    q = lineup.q0.copy()
    for i in range(n):
        for (a, low), row in Q[i].items():
            q[int(seats.lidx[i]), a + m * low, :m] = row
    x = sum((a + m * low) * (2 * m) ** i for i, (a, low) in enumerate(state))
    return {"status": status, "periods": t, "state": x, "Q": q, "rng": np.array(rng.s, dtype=np.uint64)}


def _greedy_after(x: int, greedy: np.ndarray, lineup, ref: np.ndarray, band: float) -> tuple[int, int]:
    """Greedy play without a shock from system state ``x``: the profile played and the state it leads to."""
    seats, payoff = lineup.seats, lineup.learning_stage.payoff
    n, m = int(seats.radix.size), int(seats.radix[0])
    acts = [int(greedy[int(seats.lidx[i]), (x // (2 * m) ** i) % (2 * m)]) for i in range(n)]
    prof = sum(a * int(p) for a, p in zip(acts, seats.place))
    nxt = sum((a + m * int(payoff[prof, i] < (1.0 - band) * ref[i, a])) * (2 * m) ** i for i, a in enumerate(acts))
    return prof, nxt


def signal_path(x: int, greedy: np.ndarray, lineup, band: float, periods: int) -> np.ndarray:
    """Profiles of greedy play without a shock from system state ``x``.

    Parameters
    ----------
    x : int
    greedy : ndarray of shape (n_learners, S)
    lineup : sim.learning.lineup.Lineup
    band : float
    periods : int

    Returns
    -------
    ndarray of int64, shape (periods,)
    """
    ref = reference_profits(lineup)
    out = np.empty(periods, dtype=np.int64)
    for tau in range(periods):
        out[tau], x = _greedy_after(x, greedy, lineup, ref, band)
    return out


def greedy_response(x: int, greedy: np.ndarray, lineup, band: float, periods: int) -> tuple[np.ndarray, np.ndarray]:
    """The learned strategies' own answer to a low-profit signal: greedy play without a shock, with and without every
    learner's signal forced low after period 1.

    Parameters
    ----------
    x : int
        System state at the end of learning.
    greedy : ndarray of shape (n_learners, S)
        The learned greedy tables (no learning goes on).
    lineup : sim.learning.lineup.Lineup
    band : float
    periods : int
        Periods followed.

    Returns
    -------
    with_low, without : ndarray of shape (periods + 1,)
        Mean prices over firms: row 0 last period's (state ``x``), row ``tau`` period ``tau``'s; the signal forced
        low is the one period 1's profits give, so prices can first react in period 2 (the rows of
        :class:`sim.learning.shock_response.ShockResponse`).
    """
    m, n = int(lineup.seats.radix[0]), int(lineup.seats.radix.size)
    prices = lineup.stage.prices
    first, y = _greedy_after(x, greedy, lineup, reference_profits(lineup), band)
    low = sum((((y // (2 * m) ** i) % m) + m) * (2 * m) ** i for i in range(n))
    head = [prices[signal_profile(x, lineup)].mean(), prices[first].mean()]
    rest = [prices[signal_path(s, greedy, lineup, band, periods - 1)].mean(axis=1) for s in (low, y)]
    return np.concatenate([head, rest[0]]), np.concatenate([head, rest[1]])


def signal_limit(x: int, greedy: np.ndarray, lineup, band: float, out) -> None:
    """The limit cycle of greedy play without a shock from the state at the end of learning.

    Parameters
    ----------
    x : int
        System state at the end of learning.
    greedy : ndarray of shape (n_learners, S)
        The learned greedy tables.
    lineup : sim.learning.lineup.Lineup
    band : float
    out : LimitOutputs
        Receives the cycle, its means (over the stage game of ``lineup.stage``) and ``info[:3]`` (transient, cycle
        length, 0 points); the impulse-response rows and the deviation entries are nan (the forced action -1) until
        :func:`signal_impulse` fills them.
    """
    ref = reference_profits(lineup)
    seen: dict[int, int] = {}
    profiles = []
    while x not in seen:
        seen[x] = len(profiles)
        prof, x = _greedy_after(x, greedy, lineup, ref, band)
        profiles.append(prof)
    mu = seen[x]
    cycle = profiles[mu:]
    stage = lineup.stage
    out.cycle[:] = -1
    out.cycle[: min(len(cycle), out.cycle.size)] = cycle[: out.cycle.size]
    out.lim_actions[:] = stage.actions[cycle].mean(axis=0)
    out.lim_prices[:] = stage.prices[cycle].mean(axis=0)
    out.lim_profits[:] = stage.payoff[cycle].mean(axis=0)
    for arr in (out.ir_prices, out.ir_profits, out.cf_prices, out.cf_profits):
        arr[:] = np.nan
    out.info[:] = np.nan
    out.info[0], out.info[1], out.info[2] = mu, len(cycle), 0
    out.info[7] = -1  # no forced action: no deviation is analysed


def _run_to_cycle(x: int, greedy, lineup, ref, band) -> tuple[list, list, int]:
    """Greedy play without a shock from ``x`` until a state repeats: the states, the profiles and the index of the
    first state of the cycle."""
    seen: dict[int, int] = {}
    states, profiles = [], []
    while x not in seen:
        seen[x] = len(states)
        states.append(x)
        prof, x = _greedy_after(x, greedy, lineup, ref, band)
        profiles.append(prof)
    return states, profiles, seen[x]


def _value(profiles: list, mu: int, payoff: np.ndarray, seat: int, d: float) -> float:
    """Discounted profit of ``seat`` along a path that cycles from index ``mu`` on: exact, no truncation."""
    v = sum(d**t * payoff[p, seat] for t, p in enumerate(profiles[:mu]))
    lam = len(profiles) - mu
    c = sum(d**t * payoff[p, seat] for t, p in enumerate(profiles[mu:]))
    return v + d**mu * c / (1.0 - d**lam)


def signal_impulse(x: int, greedy: np.ndarray, lineup, band: float, dev, out) -> None:
    """The impulse response to a one-period deviation under the profit signal, exact (greedy play, no shock).

    From at most ``dev.points`` points of the limit cycle, the first from its entry, the deviator plays its forced
    action (or its static best response, the first of equal ones, to the others' greedy actions) for one period and
    everyone then plays greedily; a rival whose profit falls below its band sees a low signal, exactly as after a bad
    draw. The rows and ``info`` are those of :func:`sim.learning.limits.analyse_limit`.

    Parameters
    ----------
    x : int
        System state at the end of learning.
    greedy : ndarray of shape (n_learners, S)
    lineup : sim.learning.lineup.Lineup
    band : float
    dev : DeviationInputs
    out : LimitOutputs
        Filled by :func:`signal_limit` first; receives the response rows (``ir_*``: with the deviation, ``cf_*``:
        without, row 0 the period before, row 1 the deviation period) and ``info[2:]``.
    """
    ref, stage, seats = reference_profits(lineup), lineup.stage, lineup.seats
    payoff, seat, d = stage.payoff, int(dev.seat), float(dev.discount)
    states, _profiles, mu = _run_to_cycle(x, greedy, lineup, ref, band)
    cycle = set(states[mu:])
    points = min(len(cycle), int(dev.points))
    rows = out.ir_prices.shape[0]
    for arr in (out.ir_prices, out.ir_profits, out.cf_prices, out.cf_profits):
        arr[:] = 0.0
    m_dev, place = int(seats.radix[seat]), int(seats.place[seat])
    gains, pays, back, periods, first = [], 0, 0, [], -1
    xc = states[mu]
    for _c in range(points):
        last = signal_profile(xc, lineup)
        prof, x_next = _greedy_after(xc, greedy, lineup, ref, band)
        base = prof - ((prof // place) % m_dev) * place
        a_dev = int(dev.action) if dev.action >= 0 else int(np.argmax(payoff[base + np.arange(m_dev) * place, seat]))
        pdev = base + a_dev * place
        first = a_dev if first < 0 else first
        w = 2 * int(seats.radix[0])
        y = sum((((pdev // int(seats.place[i])) % (w // 2)) + (w // 2) * payoff_low(lineup, pdev, i, ref, band)) * w**i
                for i in range(seats.radix.size))
        after = signal_path(y, greedy, lineup, band, rows - 2)
        plain = signal_path(xc, greedy, lineup, band, rows - 1)
        ir = [last, pdev, *after.tolist()]
        cf = [last, *plain.tolist()]
        out.ir_prices[:] += stage.prices[ir]
        out.ir_profits[:] += payoff[ir]
        out.cf_prices[:] += stage.prices[cf]
        out.cf_profits[:] += payoff[cf]
        s_dev, p_dev, mu_dev = _run_to_cycle(y, greedy, lineup, ref, band)
        _s, p_no, mu_no = _run_to_cycle(xc, greedy, lineup, ref, band)
        v_no = _value(p_no, mu_no, payoff, seat, d)
        gain = payoff[pdev, seat] + d * _value(p_dev, mu_dev, payoff, seat, d) - v_no
        gains.append(gain)
        pays += gain > 1e-9 * max(1.0, abs(v_no))
        if set(s_dev[mu_dev:]) == cycle:
            back += 1
            periods.append(float(mu_dev))  # periods after the deviation until the state is on the cycle
        xc = x_next
    for arr in (out.ir_prices, out.ir_profits, out.cf_prices, out.cf_profits):
        arr[:] /= points
    out.info[2], out.info[3], out.info[4] = points, float(np.mean(gains)), pays / points
    out.info[5], out.info[6], out.info[7] = back / points, float(np.mean(periods)) if periods else np.nan, first


def payoff_low(lineup, prof: int, i: int, ref: np.ndarray, band: float) -> bool:
    """Whether seat ``i``'s profit at profile ``prof``, shock one, is low (:func:`signal_code`'s rule).

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    prof : int
    i : int
    ref : ndarray of shape (n, m)
        :func:`reference_profits`.
    band : float

    Returns
    -------
    bool
    """
    a = (prof // int(lineup.seats.place[i])) % int(lineup.seats.radix[i])
    return bool(lineup.learning_stage.payoff[prof, i] < (1.0 - band) * ref[i, a])
