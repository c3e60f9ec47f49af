"""Demand shocks during learning: each period one market-size shock scales every firm's realised profit.

After Calvano, Calzolari, Denicolò and Pastorello (2021), "Algorithmic collusion with imperfect monitoring",
International Journal of Industrial Organization 79 (abstract read: Q-learners learn to collude in a market with
imperfect monitoring adapted from Green and Porter, 1984, sustained by finite "price wars" that deviations and
adverse demand shocks both trigger). What the learners see here is stated, not taken from the paper's text:

* each period, after every seat has chosen, one mean-one shock ``theta`` is drawn for the whole market from the
  session's stream, with the distributions of the simulation engine (:mod:`sim.models.monitoring`):
  ``lognormal`` ``exp(sigma Z - sigma^2 / 2)`` or ``normal`` ``1 + sigma Z`` floored at zero (``sigma`` at most
  :data:`sim.models.monitoring.NORMAL_SIGMA_MAX`), ``Z`` by the ziggurat (:func:`sim.core.rng.next_normal_zig`);
* a shock to the market size of logit demand multiplies every firm's quantity, hence its profit: a learner's
  reward is ``theta * payoff[profile, i]`` (its own realised profit), in the value of the action played, in
  the counterfactual values of the synchronous and mixed rules and in a bandit's statistics;
* the state a Q-learner conditions on stays the last periods' prices: the shock enters only the rewards. Greedy
  play after learning therefore reacts to prices, never to a shock, and the limit analysis reports expected
  profits (the shock has mean one); a learned price war after a bad draw would need a state that the shock
  moves (a coarse own-profit signal, or a noisy price), which this protocol does not have: the profit-signal
  protocol of :mod:`sim.learning.signals` (``observe = "own_profit"``) gives the learners such a state;
* automata seated with learners judge the profile's expected profit (the shock reaches the learners only).

With ``sigma = 0`` nothing is drawn and every reward is the payoff itself, so results are those of a run without
the setting, bit for bit.
"""

from __future__ import annotations

import math

from numba import njit

from sim.core.errors import InputError
from sim.core.params import Options, Real
from sim.core.rng import next_normal_zig
from sim.models.monitoring import NOISE_CODES, NORMAL_SIGMA_MAX

__all__ = ["DEMAND_NOISES", "FORCED_SHOCK", "SHOCK_CONSTRAINTS", "demand_shock", "measures_price_wars", "shock_code",
           "twin_shock"]

#: the shock distributions a learning run may use (the names of the simulation engine's ``monitoring.noise``)
DEMAND_NOISES = ("lognormal", "normal")
#: the settings of the demand shock, as data (keys of ``[learning]``)
SHOCK_CONSTRAINTS = {"demand_noise": Options(*DEMAND_NOISES), "demand_sigma": Real(0, 10)}
#: the code of a forced shock: ``theta`` is the given value (``sigma``), and the period's normal is drawn all the same
FORCED_SHOCK = 3


def shock_code(demand_noise: str, demand_sigma: float, prefix: str = "learning") -> tuple[int, float]:
    """The kernel's code of a demand shock and its checked standard deviation.

    Parameters
    ----------
    demand_noise : {"lognormal", "normal"}
        The shock's distribution.
    demand_sigma : float
        Its standard deviation, in ``[0, 10]`` (at most 1/3 for ``"normal"``); 0: no shock.
    prefix : str
        Key path of the table in error messages (``""``: bare names).

    Returns
    -------
    code : int
        0 (no shock: ``demand_sigma = 0``), 1 lognormal, 2 normal (:data:`sim.models.monitoring.NOISE_CODES`).
    sigma : float

    Raises
    ------
    InputError
        ``learning.demand_noise`` or ``learning.demand_sigma``.
    """
    def key(name):
        return f"{prefix}.{name}" if prefix else name

    noise = SHOCK_CONSTRAINTS["demand_noise"].check(key("demand_noise"), demand_noise)
    sigma = float(SHOCK_CONSTRAINTS["demand_sigma"].check(key("demand_sigma"), demand_sigma))
    if noise == "normal" and sigma > NORMAL_SIGMA_MAX:
        raise InputError(key("demand_sigma"), f"must be at most 1/3 with demand_noise = 'normal' (the shock 1 + sigma "
                                              f"Z would often be negative); use 'lognormal', got {sigma:g}")
    return (NOISE_CODES[noise] if sigma > 0 else 0), sigma


@njit(cache=True, nogil=True, inline="always")
def demand_shock(code, sigma, rng):
    """This period's shock ``theta`` (1.0 without a draw when ``code == 0``).

    Parameters
    ----------
    code : int
        :func:`shock_code`'s code, or :data:`FORCED_SHOCK`.
    sigma : float
        The standard deviation; with :data:`FORCED_SHOCK`, the shock itself.
    rng : ndarray of uint64, shape (4,)
        The session's generator state, advanced by one ziggurat normal when ``code > 0``.

    Returns
    -------
    float
    """
    if code == 0:
        return 1.0
    z = next_normal_zig(rng)
    if code == FORCED_SHOCK:
        # a forced draw still uses up its normal, so that the paths with and without it share their random numbers
        return sigma
    if code == 1:
        return math.exp(sigma * z - 0.5 * sigma * sigma)
    theta = 1.0 + sigma * z
    return theta if theta > 0.0 else 0.0


def twin_shock(code, sigma, stream):
    """Plain-Python twin of :func:`demand_shock`.

    Parameters
    ----------
    code : int
    sigma : float
    stream : sim.core.rng.ReferenceStream

    Returns
    -------
    float
    """
    if code == 0:
        return 1.0
    z = stream.next_normal_zig()
    if code == FORCED_SHOCK:
        return sigma
    if code == 1:
        return math.exp(sigma * z - 0.5 * sigma * sigma)
    return max(1.0 + sigma * z, 0.0)


def measures_price_wars(settings: dict, event=None) -> bool:
    """Whether a run measures the learned response to one adverse demand draw (:func:`signal_response`): a demand
    shock, simultaneous moves, no event, and learners that see past prices or the profit signal.

    Parameters
    ----------
    settings : dict
        The run's settings (``demand_sigma``, ``timing`` and ``observe`` as :func:`sim.learning.session.learn`
        takes them).
    event : optional
        The run's event (None: none).

    Returns
    -------
    bool
    """
    return (bool(settings.get("demand_sigma")) and settings.get("timing", "simultaneous") == "simultaneous"
            and event is None and settings.get("observe", "prices") in ("prices", "own_profit"))
