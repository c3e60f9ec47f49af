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
from sim.core.stats import Estimate, mean_estimate, ratio_estimate, share_estimate
from sim.simulation import kernel
from sim.simulation.driver import RawRun
from sim.simulation.events import simulate_detections_many
from sim.theory.enforcement import Enforcement, enforcement_terms

__all__ = ["PERIOD_POINTS", "EnforcedSimulation", "apply_enforcement", "enforcement_limits", "keep_paths"]


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


def enforcement_limits(enforcement: Enforcement, sigma: float, capacity: bool) -> None:
    """Refuse the enforcement regimes the simulation cannot play exactly.

    Parameters
    ----------
    enforcement : Enforcement
    sigma : float
        Standard deviation of the demand shock (``monitoring.sigma``).
    capacity : bool
        Whether the market has capacity constraints (its static equilibrium may be in mixed strategies).

    Raises
    ------
    InputError
        Naming ``enforcement.<key>`` or ``enforcement`` and why.
    """
    if enforcement.after_detection is not None:
        raise InputError("enforcement.after_detection", "the simulation plays competition forever after a conviction "
                                                        "only: a cartel that resumes would restart its strategies "
                                                        "from a state the simulated path does not contain; leave it "
                                                        "out (thresholds take it)")
    if enforcement.deviator_exposed:
        raise InputError("enforcement.deviator_exposed", "the simulation exposes only periods in which every firm "
                                                         "colludes; set it to false")
    if sigma > 0:
        raise InputError("enforcement", "cannot be simulated with a demand shock (monitoring.sigma > 0): the static "
                                        "Nash profits after a conviction would depend on the shock of each period")
    if capacity:
        raise InputError("enforcement", "cannot be simulated in a market with capacity constraints: its static "
                                        "equilibrium may be mixed, so the profits after a conviction would be random")


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


def apply_enforcement(raw: RawRun, profits, enforcement: Enforcement, delta: float, seed: int, key=(),
                      confidence: float = 0.95) -> EnforcedSimulation:
    """Cut each replication's path at its conviction and account for fines (see the module notes).

    Parameters
    ----------
    raw : RawRun
        The line-up played without enforcement, with every replication's path recorded
        (``raw.n_paths == raw.n_reps``).
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
    if raw.n_paths != n_reps:
        raise ValueError("apply_enforcement needs the path of every replication")
    terms = enforcement_terms(profits, enforcement)
    q = float(terms.conviction_rate)
    fine = terms.expected_fine / q if q > 0 else np.zeros_like(terms.expected_fine)
    draws = simulate_detections_many(profits, enforcement, n_periods, n_reps, seed, key)
    # K: the collusive period (counted from 1) of the conviction; the draw kernel colludes in every period, so
    # a conviction within n_periods draws is at its colluding count, and no path has more collusive periods
    nth = np.where(draws.convictions > 0, draws.collusive_periods, np.inf)
    collude = raw.path_collude == 1
    count = np.cumsum(collude, axis=1)
    plain_coll = raw.ints[:, kernel.R_COLLUSIVE].astype(float)
    played = raw.ints[:, kernel.R_PERIODS].astype(float)
    detected = count[:, -1] >= nth
    t_d = np.where(detected, np.argmax(count >= np.minimum(nth, n_periods + 1)[:, None], axis=1), n_periods)
    after = (np.arange(n_periods)[None, :] > t_d[:, None]) & (raw.path_collude >= 0)
    w = _discount_weights(delta, n_periods)
    path_profit = np.where(after[:, :, None], raw.path_profit, 0.0)
    n_after = after.sum(axis=1).astype(float)
    w_after = after.astype(float) @ w
    nash = np.asarray(profits.nash, dtype=float)
    hits = detected.astype(float)
    fines = hits[:, None] * fine[None, :]
    disc_fines = (hits * np.where(detected, w[np.minimum(t_d, n_periods - 1)], 0.0))[:, None] * fine[None, :]
    net = np.where(detected[:, None], raw.profit_sum - path_profit.sum(axis=1) + n_after[:, None] * nash[None, :],
                   raw.profit_sum) - fines
    net_disc = np.where(detected[:, None],
                        raw.disc - np.einsum("rtf,t->rf", path_profit, w) + w_after[:, None] * nash[None, :],
                        raw.disc) - disc_fines
    coll = np.where(detected, nth, plain_coll)
    running = raw.path_collude >= 0
    period, curve = _curve((collude & ~after & running).sum(axis=0).astype(float), running.sum(axis=0).astype(float))
    firms = range(nash.size)
    return EnforcedSimulation(
        enforcement.to_dict(), float(terms.detection_rate), q, fine, mean_estimate(hits, confidence),
        share_estimate(hits, np.ones(n_reps), confidence), ratio_estimate(hits, coll, confidence),
        share_estimate(coll, played, confidence), float(plain_coll.sum() / played.sum()) if played.sum() else math.nan,
        [mean_estimate(fines[:, i], confidence) for i in firms],
        [mean_estimate(disc_fines[:, i], confidence) for i in firms],
        [mean_estimate(net[:, i], confidence) for i in firms],
        [mean_estimate(net_disc[:, i], confidence) for i in firms], period, curve)


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
