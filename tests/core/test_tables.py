"""The shared check of experiment-file tables: one wording for unknown keys in every command."""

import pytest

from sim import InputError
from sim.core.tables import refuse_unknown


def test_known_keys_pass_and_the_table_comes_back():
    t = {"periods": 10, "seed": 1}
    assert refuse_unknown(t, "run", ("periods", "replications", "seed")) is t
    assert refuse_unknown({}, "run", ()) == {}


def test_unknown_key_named_with_the_allowed_ones_in_declared_order():
    with pytest.raises(InputError) as exc:
        refuse_unknown({"seed": 1, "warmup": 3}, "run", ("sessions", "seed", "workers"))
    assert exc.value.key == "run.warmup"
    assert exc.value.message == "unknown key; allowed: sessions, seed, workers"


def test_not_a_table():
    with pytest.raises(InputError) as exc:
        refuse_unknown([1, 2], "monitoring", ("signal",))
    assert exc.value.key == "monitoring" and "must be a table" in exc.value.message


@pytest.mark.parametrize("reader, doc, key", [
    ("simulate", {"run": {"warmup": 1}}, "run.warmup"),
    ("monitoring", {"errors": 0.1}, "monitoring.errors"),
])
def test_the_readers_use_it(reader, doc, key):
    """The simulation tables and the monitoring table word unknown keys the same way."""
    from sim.models.monitoring import monitoring_from_dict
    from sim.simulation.engine import simulation_from_dict

    with pytest.raises(InputError) as exc:
        if reader == "simulate":
            simulation_from_dict({"market": {"intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2},
                                  "strategies": [], **doc})
        else:
            monitoring_from_dict(doc)
    assert exc.value.key == key and exc.value.message.startswith("unknown key; allowed: ")
