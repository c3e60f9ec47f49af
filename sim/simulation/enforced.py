"""A simulated cartel facing an authority: detections, fines and the play after a detection.

Convention (:mod:`sim.theory.enforcement`, after Motta and Polo, 2003, "Leniency programs and cartel
prosecution", IJIO 21(3)): in every period in which every firm colludes, the cartel is convicted with
probability ``q`` (the detection rate, times the probability of proof unless the firms report under
leniency), independently across periods; at a conviction each firm pays its fine in that period and the
firms play the static Nash equilibrium in every later period.

How it is simulated: the line-up is played as without enforcement (the automata neither see nor react to
the authority before a conviction, so the path up to and including the conviction period is the plain
path), and each replication's recorded path is then cut at its conviction: every later period earns the
static Nash profits and counts as competition. This is exact for any line-up when competition after a
conviction lasts forever and the Nash profits do not depend on a random demand shock; other cases are
refused where the experiment is read (:func:`enforcement_limits`).

Competition for ``T`` periods, then collusion again (``after_detection = T``): the firms start their
strategies afresh (every firm back in its initial state). The play after a restart is the plain path from its
first period on only when nothing in it is random and nothing depends on the calendar period, so this variant is
simulated for such line-ups (no errors, no random transitions or cheating, a fixed horizon): each replication then
walks the one deterministic plain path, restarting it after every spell of competition, with the same draws (one
uniform per collusive period, from the detection stream).

The draws: replication ``r`` uses the detection stream of :func:`sim.simulation.events.simulate_detections_many`
(stream family ``(key..., 0)``, one uniform per colluding period, convicted below ``q``), so the
conviction falls on the ``K``-th collusive period of the path, ``K`` the index of the first uniform below
``q``. The draws depend only on the seed, the key and the replication: never on workers or threads.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.records import Record
from sim.core.rng import ReferenceStream, stream_states
from sim.core.stats import Estimate, mean_estimate, ratio_estimate, share_estimate
from sim.simulation import kernel
from sim.simulation.driver import RawRun
from sim.simulation.events import simulate_detections_many
from sim.simulation.game import Game
from sim.theory.enforcement import Enforcement, enforcement_terms
from strategies.step import P_ALT_BAD, P_ALT_GOOD, P_CHEAT

__all__ = ["PERIOD_POINTS", "EnforcedSimulation", "apply_enforcement", "enforcement_limits", "is_deterministic",
           "keep_paths"]


@dataclass(frozen=True, eq=False)
class EnforcedSimulation(Record):
    """The simulated line-up under enforcement, per cell.

    Parameters
    ----------
    enforcement : dict
        The validated ``[enforcement]`` table (:meth:`Enforcement.to_dict`).
    detection_rate : float
        Probability per colluding period that an investigation opens (at the agreed price).
    conviction_rate : float
        ``q``: probability per colluding period that the cartel is convicted.
    fine_per_conviction : ndarray of shape (n_firms,)
        What each firm pays at a conviction.
    detections : Estimate
        Convictions per replication (mean, normal interval).
    detected_share : Estimate
        Share of replications with a conviction (Wilson interval).
    convictions_per_collusive_period : Estimate
        Convictions per period of collusion exposed to the authority (ratio of totals, delta-method
        standard error); its expectation is ``q``.
    collusive_share : Estimate
        Share of periods in which every firm colluded, with enforcement.
    plain_collusive_share : float
        The same share without enforcement (the line-up's own simulation).
    fines : list of Estimate
        Per firm: fines paid per replication (undiscounted).
    discounted_fines : list of Estimate
        Per firm: fines paid per replication, discounted to the first period.
    net_profit : list of Estimate
        Per firm: total profit per replication net of fines.
    net_discounted_profit : list of Estimate
        Per firm: discounted profit per replication net of fines.
    period : ndarray of shape (n_points,)
        Periods (from 1) of the curve below: every period, or at most ``PERIOD_POINTS`` evenly spread ones (the
        last always among them).
    collusive_by_period : ndarray of shape (n_points,)
        Share of the replications still running in which every firm colludes, with enforcement.
    """

    enforcement: dict
    detection_rate: float
    conviction_rate: float
    fine_per_conviction: np.ndarray
    detections: Estimate
    detected_share: Estimate
    convictions_per_collusive_period: Estimate
    collusive_share: Estimate
    plain_collusive_share: float
    fines: list[Estimate]
    discounted_fines: list[Estimate]
    net_profit: list[Estimate]
    net_discounted_profit: list[Estimate]
    period: np.ndarray
    collusive_by_period: np.ndarray


#: largest number of periods of the stored curve
PERIOD_POINTS = 1000


def _curve(colluding: np.ndarray, running: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Share colluding among the running replications per period, at most PERIOD_POINTS periods."""
    n = colluding.shape[0]
    keep = np.unique(np.r_[np.linspace(0, n - 1, min(n, PERIOD_POINTS)).round().astype(int), n - 1])
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(running[keep] > 0, colluding[keep] / np.maximum(running[keep], 1), np.nan)
    return (keep + 1).astype(float), share


def is_deterministic(game: Game) -> bool:
    """Whether a compiled line-up plays one path, the same from any restart: no demand shock, no perception or
    implementation errors, no random transitions and no cheating (which may depend on the calendar period).

    Parameters
    ----------
    game : Game

    Returns
    -------
    bool
    """
    mon, probs = game.monitoring, game.lineup.probs
    alt = probs[:, :, [P_ALT_GOOD, P_ALT_BAD]]
    return bool(mon["sigma"] == 0 and mon["perception_error"] == 0 and mon["implementation_error"] == 0
                and np.all((alt == 0) | (alt >= 1)) and np.all(probs[:, :, P_CHEAT] == 0))


def enforcement_limits(enforcement: Enforcement, sigma: float, capacity: bool, deterministic: bool = False,
                       horizon: str = "fixed") -> None:
    """Refuse the enforcement regimes the simulation cannot play exactly.

    Parameters
    ----------
    enforcement : Enforcement
    sigma : float
        Standard deviation of the demand shock (``monitoring.sigma``).
    capacity : bool
        Whether the market has capacity constraints (its static equilibrium may be in mixed strategies).
    deterministic : bool
        Whether the line-up plays one path, the same from any restart (:func:`is_deterministic`).
    horizon : {"fixed", "random"}
        The run's horizon.

    Raises
    ------
    InputError
        Naming ``enforcement.<key>`` or ``enforcement`` and why.
    """
    if enforcement.deviator_exposed:
        raise InputError("enforcement.deviator_exposed", "the simulation exposes only periods in which every firm "
                                                         "colludes; set it to false")
    if sigma > 0:
        raise InputError("enforcement", "cannot be simulated with a demand shock (monitoring.sigma > 0): the static "
                                        "Nash profits after a conviction would depend on the shock of each period")
    if capacity:
        raise InputError("enforcement", "cannot be simulated in a market with capacity constraints: its static "
                                        "equilibrium may be mixed, so the profits after a conviction would be random")
    if enforcement.after_detection is not None and (not deterministic or horizon != "fixed"):
        raise InputError("enforcement.after_detection", "collusion that resumes after a conviction is simulated only "
                                                        "for a line-up without errors, random transitions or "
                                                        "cheating, over a fixed horizon: otherwise the restarted "
                                                        "strategies' play is not a path the simulation recorded; "
                                                        "leave it out (competition forever after a conviction)")


def _discount_weights(delta: float, n_periods: int) -> np.ndarray:
    """``delta^t`` with the kernel's floor: weights below 1e-300 are zero."""
    w = np.empty(n_periods)
    d = 1.0
    for t in range(n_periods):
        w[t] = d
        d *= delta
        if d < 1e-300:
            d = 0.0
    return w


def _cut_forever(raw: RawRun, nash: np.ndarray, fine: np.ndarray, w: np.ndarray, draws) -> dict:
    """Per replication: each path cut at its conviction, static Nash after it (competition forever)."""
    n_periods = raw.path_collude.shape[1]
    # the conviction falls on the nth collusive period (from 1); the draw kernel colludes in every period, so a
    # conviction within n_periods draws is at its colluding count, and no path has more collusive periods
    nth = np.where(draws.convictions > 0, draws.collusive_periods, np.inf)
    collude = raw.path_collude == 1
    count = np.cumsum(collude, axis=1)
    plain_coll = raw.ints[:, kernel.R_COLLUSIVE].astype(float)
    detected = count[:, -1] >= nth
    t_d = np.where(detected, np.argmax(count >= np.minimum(nth, n_periods + 1)[:, None], axis=1), n_periods)
    running = raw.path_collude >= 0
    after = (np.arange(n_periods)[None, :] > t_d[:, None]) & running
    path_profit = np.where(after[:, :, None], raw.path_profit, 0.0)
    n_after = after.sum(axis=1).astype(float)
    hits = detected.astype(float)
    fines = hits[:, None] * fine[None, :]
    disc_fines = (hits * np.where(detected, w[np.minimum(t_d, n_periods - 1)], 0.0))[:, None] * fine[None, :]
    net = np.where(detected[:, None], raw.profit_sum - path_profit.sum(axis=1) + n_after[:, None] * nash[None, :],
                   raw.profit_sum) - fines
    net_disc = np.where(detected[:, None], raw.disc - np.einsum("rtf,t->rf", path_profit, w)
                        + (after.astype(float) @ w)[:, None] * nash[None, :], raw.disc) - disc_fines
    return {"hits": hits, "coll": np.where(detected, nth, plain_coll), "fines": fines, "disc_fines": disc_fines,
            "net": net, "net_disc": net_disc, "colluding": (collude & ~after & running).sum(axis=0).astype(float)}


def _walk_resumed(raw: RawRun, nash: np.ndarray, fine: np.ndarray, w: np.ndarray, q: float, T: int, seed: int,
                  key: tuple) -> dict:
    """Per replication: the one deterministic plain path (replication 0's), restarted after every spell of ``T``
    periods of competition; one uniform of the detection stream per collusive period, convicted below ``q``."""
    n_reps, n_periods = raw.n_reps, raw.path_collude.shape[1]
    c = raw.path_collude[0] == 1
    p = raw.path_profit[0]
    states = stream_states(seed, (*key, 0), 0, n_reps)
    out = {k: np.zeros(n_reps) for k in ("hits", "coll")}
    for k in ("fines", "disc_fines", "net", "net_disc"):
        out[k] = np.zeros((n_reps, nash.size))
    colluding = np.zeros(n_periods)
    for r in range(n_reps):
        rng = ReferenceStream(states[r])
        o = wait = 0
        for t in range(n_periods):
            if wait > 0:
                out["net"][r] += nash
                out["net_disc"][r] += w[t] * nash
                wait -= 1
                o = 0
                continue
            out["net"][r] += p[o]
            out["net_disc"][r] += w[t] * p[o]
            if c[o]:
                out["coll"][r] += 1
                colluding[t] += 1
                if rng.next_double() < q:
                    out["hits"][r] += 1
                    out["fines"][r] += fine
                    out["disc_fines"][r] += w[t] * fine
                    wait = T
            o += 1
    out["net"] -= out["fines"]
    out["net_disc"] -= out["disc_fines"]
    out["colluding"] = colluding
    return out


def apply_enforcement(raw: RawRun, profits, enforcement: Enforcement, delta: float, seed: int, key=(),
                      confidence: float = 0.95) -> EnforcedSimulation:
    """Play the simulated paths against the authority and account for fines (see the module notes).

    Parameters
    ----------
    raw : RawRun
        The line-up played without enforcement, with every replication's path recorded
        (``raw.n_paths == raw.n_reps``), or, with ``enforcement.after_detection`` set, a deterministic line-up
        (:func:`is_deterministic`) over a fixed horizon with at least one path recorded.
    profits : StageProfits
        Per-firm collusive, deviation and Nash profits of the stage game, and the agreed price.
    enforcement : Enforcement
        A regime accepted by :func:`enforcement_limits`.
    delta : float in (0, 1)
        Discount factor.
    seed : int
        The user's seed.
    key : tuple of int
        The cell's stream key (the detections use the family ``(key..., 0)``).
    confidence : float in (0, 1)
        Level of the intervals.

    Returns
    -------
    EnforcedSimulation
    """
    n_reps, n_periods = raw.n_reps, raw.path_collude.shape[1]
    T = enforcement.after_detection
    if raw.n_paths != n_reps and (T is None or raw.n_paths < 1):
        raise ValueError("apply_enforcement needs the path of every replication")
    terms = enforcement_terms(profits, enforcement)
    q = float(terms.conviction_rate)
    fine = terms.expected_fine / q if q > 0 else np.zeros_like(terms.expected_fine)
    nash = np.asarray(profits.nash, dtype=float)
    w = _discount_weights(delta, n_periods)
    if T is None:
        a = _cut_forever(raw, nash, fine, w, simulate_detections_many(profits, enforcement, n_periods, n_reps, seed,
                                                                      key))
    else:
        a = _walk_resumed(raw, nash, fine, w, q, int(T), seed, tuple(key))
    played = raw.ints[:, kernel.R_PERIODS].astype(float)
    plain_coll = raw.ints[:, kernel.R_COLLUSIVE].astype(float)
    period, curve = _curve(a["colluding"], raw.by_period[1].astype(float))
    firms = range(nash.size)
    return EnforcedSimulation(
        enforcement.to_dict(), float(terms.detection_rate), q, fine, mean_estimate(a["hits"], confidence),
        share_estimate(np.minimum(a["hits"], 1.0), np.ones(n_reps), confidence),
        ratio_estimate(a["hits"], a["coll"], confidence), share_estimate(a["coll"], played, confidence),
        float(plain_coll.sum() / played.sum()) if played.sum() else math.nan,
        [mean_estimate(a["fines"][:, i], confidence) for i in firms],
        [mean_estimate(a["disc_fines"][:, i], confidence) for i in firms],
        [mean_estimate(a["net"][:, i], confidence) for i in firms],
        [mean_estimate(a["net_disc"][:, i], confidence) for i in firms], period, curve)


def keep_paths(raw: RawRun, n_paths: int) -> RawRun:
    """The run with only its first ``n_paths`` recorded paths, as if it had recorded no more.

    The kernel's draws do not depend on how many paths it records, so this is the run the line-up gives
    with ``run.paths = n_paths``.

    Parameters
    ----------
    raw : RawRun
        A run that recorded at least ``n_paths`` paths.
    n_paths : int >= 0

    Returns
    -------
    RawRun
    """
    if n_paths == raw.n_paths:
        return raw
    if n_paths == 0:
        n_firms, n_products = raw.profit_sum.shape[1], raw.path_actions.shape[2]
        src = RawRun.empty(1, n_firms, n_products, raw.by_period.shape[1], 0)
        cut = slice(None)
    else:
        src, cut = raw, slice(0, n_paths)
    names = ("path_actions", "path_prices", "path_market", "path_profit", "path_state", "path_flags", "path_collude")
    return dataclasses.replace(raw, n_paths=n_paths, **{k: getattr(src, k)[cut].copy() for k in names})
