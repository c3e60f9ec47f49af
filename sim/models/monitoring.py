"""What firms observe, and the noise around it.

:class:`Monitoring` combines four independent sources of noise:

* ``signal``: ``"perfect"`` -- firms see every action played (conduct can be judged); ``"price"`` --
  firms see only the public market price (and their own profit), as in Green and Porter (1984).
  Strategies that watch conduct need ``"perfect"``.
* a multiplicative, mean-one demand shock ``theta`` each period: ``lognormal`` ``exp(sigma Z - sigma^2/2)``
  or ``normal`` ``1 + sigma Z`` (``Z`` standard normal; ``sigma = 0``: no shock). It scales the price
  under quantity competition and the quantity under price competition (see :mod:`sim.models.market`).
  A normal shock is negative with probability ``Phi(-1/sigma)``, which would mean negative prices
  (30 % of periods at ``sigma = 2``), so ``sigma`` is at most :data:`NORMAL_SIGMA_MAX` = 1/3 with
  ``noise = "normal"`` (three standard deviations above zero: ``Phi(-3)`` = 0.135 % of periods); in
  those rare periods the kernel floors the shock at zero (no demand; prices are floored at zero by
  the linear demands too), which leaves every probability ``P(theta < x)``, ``x > 0``, unchanged
  (so trigger-price war probabilities are exact) and raises the mean of the shock by
  ``sigma phi(1/sigma) - Phi(-1/sigma)``, at most 1.3e-4. Larger shocks: use ``"lognormal"``.
* ``perception_error``: each firm misreads each rival's conduct with this probability, independently
  (it sees compliance as a deviation or the reverse).
* ``implementation_error``: each period, each firm's intended action is replaced, with this
  probability, by its cheating action (its best one-shot deviation against the agreement).
"""

from __future__ import annotations

from scipy.special import ndtr

from sim.core.errors import InputError
from sim.core.params import Options, Parametrized, Real
from sim.core.tables import refuse_unknown

__all__ = ["NOISE_CODES", "NORMAL_SIGMA_MAX", "Monitoring", "monitoring_from_dict"]

#: largest standard deviation of a normal shock ``1 + sigma Z`` (its mean is three of them above zero)
NORMAL_SIGMA_MAX = 1.0 / 3.0

#: kernel codes of the shock distribution (0: no shock)
NOISE_CODES = {"none": 0, "lognormal": 1, "normal": 2}
_KEYS = ("signal", "noise", "sigma", "perception_error", "implementation_error")


class Monitoring(Parametrized):
    """Monitoring and noise (see the module notes).

    Parameters
    ----------
    signal : {"perfect", "price"}
    noise : {"lognormal", "normal"}
    sigma : float >= 0
        Standard deviation of the demand shock (0: none).
    perception_error : float in [0, 1]
    implementation_error : float in [0, 1]
    """

    _constraints = {
        "signal": Options("perfect", "price"),
        "noise": Options("lognormal", "normal"),
        "sigma": Real(0, 10),
        "perception_error": Real(0, 1),
        "implementation_error": Real(0, 1),
    }

    def __init__(self, signal="perfect", noise="lognormal", sigma=0.0, perception_error=0.0,
                 implementation_error=0.0):
        self.signal = signal
        self.noise = noise
        self.sigma = sigma
        self.perception_error = perception_error
        self.implementation_error = implementation_error

    def validated(self, prefix: str = "monitoring") -> dict:
        """Checked parameters, plus ``noise_code`` for the kernel.

        Parameters
        ----------
        prefix : str
            Key path of the table in error messages.

        Returns
        -------
        dict
            The parameters by name and ``noise_code`` (:data:`NOISE_CODES`; 0 without a shock).
        """
        p = self._check_params(prefix)
        if p["noise"] == "normal" and p["sigma"] > NORMAL_SIGMA_MAX:
            key = f"{prefix}.sigma" if prefix else "sigma"
            raise InputError(key, f"must be at most 1/3 with noise = 'normal' (the shock 1 + sigma Z would be "
                                  f"negative, i.e. prices below zero, in {_share_negative(p['sigma'])} of periods); "
                                  f"use noise = 'lognormal' for larger shocks, got {p['sigma']:g}")
        p["noise_code"] = NOISE_CODES[p["noise"]] if p["sigma"] > 0 else 0
        return p

    def to_dict(self) -> dict:
        """The parameters, in the layout of an experiment file's ``[monitoring]`` table.

        Returns
        -------
        dict
        """
        return dict(self.get_params())


def monitoring_from_dict(table: dict, prefix: str = "monitoring") -> Monitoring:
    """Build a :class:`Monitoring` from an experiment file's ``[monitoring]`` table (unknown keys refused).

    Parameters
    ----------
    table : dict
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    Monitoring
    """
    refuse_unknown(table, prefix, _KEYS)
    m = Monitoring(**table)
    m.validated(prefix)
    return m


def _share_negative(sigma: float) -> str:
    """``P(1 + sigma Z < 0)`` as a percentage, for error messages."""

    return f"{100 * float(ndtr(-1.0 / sigma)):.2g} %"
