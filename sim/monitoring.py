"""What firms observe, and the noise around it.

:class:`Monitoring` combines four independent sources of noise:

* ``signal``: ``"perfect"`` -- firms see every action played (conduct can be judged); ``"price"`` --
  firms see only the public market price (and their own profit), as in Green and Porter (1984).
  Strategies that watch conduct need ``"perfect"``.
* a multiplicative, mean-one demand shock ``theta`` each period: ``lognormal`` ``exp(sigma Z - sigma^2/2)``
  or ``normal`` ``1 + sigma Z`` (``Z`` standard normal; ``sigma = 0``: no shock). It scales the price
  under quantity competition and the quantity under price competition (see :mod:`sim.market`).
* ``perception_error``: each firm misreads each rival's conduct with this probability, independently
  (it sees compliance as a deviation or the reverse).
* ``implementation_error``: each period, each firm's intended action is replaced, with this
  probability, by its cheating action (its best one-shot deviation against the agreement).
"""

from __future__ import annotations

from ._params import Options, Parametrized, Real
from .errors import InputError

__all__ = ["NOISE_CODES", "Monitoring", "monitoring_from_dict"]

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
        """Checked parameters, plus ``noise_code`` for the kernel."""
        p = self._check_params(prefix)
        p["noise_code"] = NOISE_CODES[p["noise"]] if p["sigma"] > 0 else 0
        return p

    def to_dict(self) -> dict:
        return dict(self.get_params())


def monitoring_from_dict(table: dict, prefix: str = "monitoring") -> Monitoring:
    """Build a :class:`Monitoring` from an experiment file's ``[monitoring]`` table (unknown keys refused)."""
    if not isinstance(table, dict):
        raise InputError(prefix, f"must be a table, got {table!r}")
    for k in table:
        if k not in _KEYS:
            raise InputError(f"{prefix}.{k}", f"unknown key; allowed: {', '.join(_KEYS)}")
    m = Monitoring(**table)
    m.validated(prefix)
    return m
