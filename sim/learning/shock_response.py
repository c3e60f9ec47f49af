"""The prices after one adverse demand draw: learned price wars, measured (Calvano, Calzolari, Denicolò and
Pastorello, 2021, abstract read: punishments -- "price wars" of finite duration -- are triggered both by deviations
and by adverse demand shocks).

Each converged session goes on from its state at the end of learning, still learning, over ``periods`` periods
drawn twice from the same copy of its random stream: once with the shocks as drawn, once with the first period's
shock forced to the adverse value ``theta`` (:data:`sim.learning.shocks.FORCED_SHOCK` draws the period's normal all
the same, so the two paths share every random number). The difference of the two price paths is the response to
the adverse draw alone; a session has a *price war* when the mean price with the draw falls below the one without it
in at least one period after the draw.

Under the protocol of :mod:`sim.learning.shocks` (the state is the past prices, the shock enters only the rewards),
a draw can change prices only through learning that goes on: it lowers the value of the price just played by
``alpha (1 - theta) profit``, and prices move only when that is larger than the lead of the greedy price over the
next one. Under the profit-signal protocol of :mod:`sim.learning.signals` (``observe = "own_profit"``) the draw
moves the learners' state (a low profit), and the greedy prices of that state are the learned response.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

import sim.learning.kernel as K
from sim.core.errors import InputError
from sim.core.stats import Estimate, mean_estimate, wilson_estimate
from sim.learning.inputs import STATUS_CONVERGED, SessionState
from sim.learning.shocks import FORCED_SHOCK, shock_code
from sim.learning.signals import OBSERVE_CODES, signal_profile

__all__ = ["PriceCuts", "ShockResponse", "price_cuts", "shock_response"]

#: the session goes on learning without stopping: its convergence counter never reaches this
_NEVER = 2**62
#: a price change smaller than this is no change (prices are grid points: a change is a whole grid step)
_TOL = 1e-9


@dataclass(frozen=True)
class ShockResponse:
    """The mean price path after an adverse draw, against the same draws without it.

    Attributes
    ----------
    theta : float
        The forced shock of period 1.
    with_draw, without_draw : ndarray of shape (n_sessions, periods + 1)
        Mean price over firms: row 0 the last period of learning, row ``tau`` the prices set in period ``tau`` after
        it (the draw hits period 1's profits, so prices can first react in period 2).
    change : list of Estimate
        Mean over sessions of ``with_draw - without_draw``, one per row, with Student's interval.
    price_war : Estimate
        Share of sessions with a price war (Wilson interval).
    """

    theta: float
    with_draw: np.ndarray
    without_draw: np.ndarray
    change: list
    price_war: Estimate


def _path(lineup, saved, j: int, s0: int, periods: int, code: int, sigma: float, forced: float | None,
          band: float | None = None) -> np.ndarray:
    """Mean prices over firms of session ``j`` going on from its saved state (row 0: before the first period); with
    ``band``, under the profit-signal protocol."""
    stage, m = lineup.stage, int(lineup.stage.M)
    observe = OBSERVE_CODES["prices" if band is None else "own_profit"]
    rng = saved.rng[j].copy()
    session = SessionState(saved.Q[j].copy(), saved.greedy[j].copy(), saved.z[j].copy(), rng, saved.clock[j].copy(),
                           saved.triggers[j].copy(), saved.counts[j].copy(), saved.sums[j].copy())
    session.clock[1] = 0  # the counter of unchanged periods restarts: the session does not stop
    s, t = s0, int(session.clock[0])
    out = np.empty(periods + 1)
    out[0] = stage.prices[_last(s, m, lineup, band)].mean()
    for tau in range(periods):
        c, sg = (FORCED_SHOCK, forced) if forced is not None and tau == 0 else (code, sigma)
        _status, t, s = K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, session, s, _NEVER, t + 1,
                                      c, sg, observe, 0.0 if band is None else band)
        out[tau + 1] = stage.prices[_last(s, m, lineup, band)].mean()
    return out


def _last(s: int, m: int, lineup, band: float | None) -> int:
    """The profile of last period's prices in state ``s`` of either protocol."""
    return s % m if band is None else signal_profile(s, lineup)


def shock_response(result, theta: float, periods: int = 20) -> ShockResponse:
    """The price path after one adverse demand draw, in every converged session of a run with a demand shock.

    Parameters
    ----------
    result : sim.learning.results.LearningResult
        A run of :func:`sim.learning.session.learn` with ``demand_sigma > 0`` and ``keep=True``.
    theta : float
        The adverse shock forced on the first period, in ``[0, 1)`` (e.g. ``exp(-2 sigma - sigma^2 / 2)``, a draw
        two standard deviations below the median of a lognormal shock).
    periods : int
        Periods followed, at least 2.

    Returns
    -------
    ShockResponse

    Raises
    ------
    InputError
        ``demand_sigma`` without a shock, ``keep`` without saved sessions, ``theta`` or ``periods`` out of range.
    """
    st = result.settings
    if not st.get("demand_sigma"):
        raise InputError("demand_sigma", "the run has no demand shock (demand_sigma = 0)")
    if result.saved is None:
        raise InputError("keep", "the run kept no session states: run it with keep=True")
    if not 0.0 <= theta < 1.0:
        raise InputError("theta", f"must be an adverse shock in [0, 1), got {theta!r}")
    if int(periods) < 2:
        raise InputError("periods", f"must be at least 2, got {periods!r}")
    code, sigma = shock_code(st["demand_noise"], st["demand_sigma"], prefix="")
    saved, lu = result.saved, result.lineup
    done = np.flatnonzero(saved.status == STATUS_CONVERGED)
    band = st.get("signal_band") if st.get("observe") == "own_profit" else None
    w = np.array([_path(lu, saved, j, int(saved.history[j]), periods, code, sigma, theta, band) for j in done])
    wo = np.array([_path(lu, saved, j, int(saved.history[j]), periods, code, sigma, None, band) for j in done])
    w, wo = w.reshape(done.size, periods + 1), wo.reshape(done.size, periods + 1)
    level = float(st.get("confidence", 0.95))
    d = w - wo
    change = [mean_estimate(d[:, r], level) for r in range(periods + 1)]
    wars = int(np.sum((d[:, 2:] < -_TOL).any(axis=1)))
    return ShockResponse(float(theta), w, wo, change, wilson_estimate(wars, int(done.size), level))


@dataclass(frozen=True)
class PriceCuts:
    """Temporary price cuts after the adverse draw: how often, how deep, how long.

    Attributes
    ----------
    cut : Estimate
        Share of sessions whose mean price falls, against the path without the draw, in period 2 (the first period
        whose prices can react to the draw) (Wilson interval).
    temporary : Estimate
        Share of sessions with such a cut whose prices are those of the path without the draw again in the last
        ``tail`` periods followed (Wilson interval): a price war that ends.
    depth : Estimate
        Mean, over the sessions with a cut, of the change of the mean price in period 2 (negative: a cut).
    duration : Estimate
        Mean, over the temporary cuts, of the periods from period 2 to the last period whose prices differ from
        those without the draw, both counted.
    """

    cut: Estimate
    temporary: Estimate
    depth: Estimate
    duration: Estimate


def price_cuts(resp: ShockResponse, tail: int = 4, level: float = 0.95) -> PriceCuts:
    """Count the temporary price cuts of a shock response: prices fall at once and come back.

    Parameters
    ----------
    resp : ShockResponse
        With at least ``tail + 2`` periods followed.
    tail : int
        A cut is temporary when the prices of the last ``tail`` periods are those without the draw.
    level : float
        Confidence level of the intervals.

    Returns
    -------
    PriceCuts
    """
    d = resp.with_draw - resp.without_draw
    n = d.shape[0]
    if d.shape[1] < tail + 3:
        raise InputError("periods", f"must be at least {tail + 2} to tell a temporary cut, got {d.shape[1] - 1}")
    moved = np.abs(d) > _TOL
    cut = d[:, 2] < -_TOL
    temporary = cut & ~moved[:, -tail:].any(axis=1)
    last = np.array([np.flatnonzero(moved[j]).max() if moved[j].any() else 2 for j in range(n)])
    return PriceCuts(wilson_estimate(int(cut.sum()), n, level), wilson_estimate(int(temporary.sum()), n, level),
                     mean_estimate(d[cut, 2], level), mean_estimate((last[temporary] - 1).astype(float), level))
