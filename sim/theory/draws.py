"""Reference draws for the simulation: detection events and demand-state paths, in plain Python.

These functions fix the order in which random numbers are used, so that a compiled kernel can reproduce
them draw for draw (same seed, same path):

* detection -- one uniform ``u`` per colluding period, in period order; the cartel is detected when
  ``u < rho``; no draw in a period of competition (:func:`draw_detection`, :func:`simulate_detections`);
* demand states -- one uniform per period (period 0 from the initial distribution unless a first state
  is given, then from the previous state's row of the transition matrix), the state being the first
  whose cumulative probability exceeds the draw; a deterministic cycle draws nothing
  (:func:`draw_state_path`).

``rng`` is a :class:`numpy.random.Generator` (its ``random()``) or the package's own generator twin
(its ``next_double()``): either source gives the same sequence of decisions for the same uniforms.
Long-run frequencies to check them against: the detection rate itself, and
:func:`sim.theory.demand_states.stationary_distribution`.
"""

from __future__ import annotations

import numpy as np

from ..core.params import Integer, Real
from .demand_states import DemandStates

__all__ = ["draw_detection", "draw_state_path", "simulate_detections"]



def _uniform(rng) -> float:
    """One uniform draw on [0, 1): ``rng.random()`` of a numpy Generator, or ``next_double()`` of the
    package's own stream twin, so a kernel on either source follows the same order."""
    return float(rng.random()) if hasattr(rng, "random") else float(rng.next_double())


def draw_detection(rng, rho: float) -> bool:
    """Whether a colluding period is detected: one uniform ``u``, detected when ``u < rho``.

    Parameters
    ----------
    rng : numpy.random.Generator or an object with ``next_double()``
    rho : float in [0, 1]

    Returns
    -------
    bool
    """
    return _uniform(rng) < rho


def simulate_detections(rng, n_periods: int, rho: float, after_detection: int | None = None,
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Collusion under the default detection convention, period by period.

    Order of draws: periods in order; in each colluding period exactly one uniform (detection when it
    is below ``rho``); no draw in a period of competition. After a detection the firms compete for
    ``after_detection`` periods (forever when None), then collude again.

    Parameters
    ----------
    rng : numpy.random.Generator or an object with ``next_double()``
    n_periods : int >= 1
    rho : float in [0, 1]
    after_detection : int >= 1 or None

    Returns
    -------
    colluding : ndarray of bool, shape (n_periods,)
    detected : ndarray of bool, shape (n_periods,)
    """
    n_periods = Integer(1, 10**9).check("n_periods", n_periods)
    rho = Real(0, 1).check("enforcement.detection", rho)
    if after_detection is not None:
        after_detection = Integer(1, 10_000_000).check("enforcement.after_detection", after_detection)
    colluding = np.zeros(n_periods, dtype=bool)
    detected = np.zeros(n_periods, dtype=bool)
    wait = 0  # periods of competition left; -1: competition forever
    for t in range(n_periods):
        if wait != 0:
            wait = wait - 1 if wait > 0 else wait
            continue
        colluding[t] = True
        if draw_detection(rng, rho):
            detected[t] = True
            wait = -1 if after_detection is None else after_detection
    return colluding, detected


def _pick(u: float, cumulative: np.ndarray) -> int:
    """The first state whose cumulative probability exceeds ``u`` (the last state if rounding leaves
    the total a hair below ``u``)."""
    k = 0
    last = cumulative.size - 1
    while k < last and u >= cumulative[k]:
        k += 1
    return k


def draw_state_path(rng, states: DemandStates, n_periods: int, initial_state: int | None = None) -> np.ndarray:
    """Draw a path of demand states.

    Order of draws: period 0 takes ``initial_state`` when given, otherwise one uniform ``u`` picks the
    first state ``k`` with ``u < cumsum(initial)[k]``; every later period takes one uniform and picks
    from the cumulative row of the previous state the same way (cumulative sums accumulated from state
    0 up, as ``numpy.cumsum`` does). A deterministic cycle draws nothing.

    Parameters
    ----------
    rng : numpy.random.Generator or an object with ``next_double()``
    states : DemandStates
    n_periods : int >= 1
    initial_state : int, optional
        Index (0-based) of the first period's state.

    Returns
    -------
    ndarray of int64, shape (n_periods,)
    """
    n_periods = Integer(1, 10**9).check("n_periods", n_periods)
    S = states.n_states
    if initial_state is not None:
        initial_state = Integer(0, S - 1).check("demand_states.initial_state", initial_state)
    path = np.empty(n_periods, dtype=np.int64)
    if states.kind == "cycle":
        start = int(np.argmax(states.initial)) if initial_state is None else initial_state
        path[:] = (start + np.arange(n_periods)) % S
        return path
    rows = np.cumsum(states.transition, axis=1)
    s = _pick(_uniform(rng), np.cumsum(states.initial)) if initial_state is None else initial_state
    path[0] = s
    for t in range(1, n_periods):
        s = _pick(_uniform(rng), rows[s])
        path[t] = s
    return path
