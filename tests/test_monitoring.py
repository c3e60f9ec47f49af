"""Monitoring settings: validation with key paths."""

import pytest

from sim import InputError
from sim.monitoring import Monitoring, monitoring_from_dict


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
