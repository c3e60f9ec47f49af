"""Monitoring settings: validation with key paths."""

import pytest

from sim import InputError
from sim.models.monitoring import Monitoring, monitoring_from_dict


def test_noise_code():
    assert Monitoring().validated()["noise_code"] == 0
    assert Monitoring(sigma=0.2).validated()["noise_code"] == 1
    assert Monitoring(noise="normal", sigma=0.2).validated()["noise_code"] == 2


@pytest.mark.parametrize("table, key", [
    ({"signal": "rumour"}, "monitoring.signal"), ({"noise": "cauchy"}, "monitoring.noise"),
    ({"sigma": -0.1}, "monitoring.sigma"), ({"perception_error": 1.01}, "monitoring.perception_error"),
    ({"implementation_error": -1e-9}, "monitoring.implementation_error"), ({"errors": 0.1}, "monitoring.errors"),
])
def test_bad_values_name_the_key(table, key):
    with pytest.raises(InputError) as exc:
        monitoring_from_dict(table)
    assert exc.value.key == key


def test_normal_shock_standard_deviation_is_capped():
    """A normal shock 1 + sigma Z is negative with probability Phi(-1/sigma) (30.9 % at sigma = 2,
    scipy.stats.norm): the cap 1/3 keeps it at Phi(-3) = 0.135 %; larger shocks must be lognormal."""
    from scipy import stats

    assert stats.norm.cdf(-1 / 2) == pytest.approx(0.3085, abs=1e-4)
    assert stats.norm.cdf(-3) < 0.0015
    assert Monitoring(noise="normal", sigma=1 / 3).validated()["noise_code"] == 2
    assert Monitoring(noise="lognormal", sigma=2.0).validated()["noise_code"] == 1
    with pytest.raises(InputError) as exc:
        monitoring_from_dict({"noise": "normal", "sigma": 0.34})
    assert exc.value.key == "monitoring.sigma"
    assert "at most 1/3" in exc.value.message and "0.34" in exc.value.message
