"""The common test over every parametrised class: constraints match the constructor signature, bad
values raise InputError naming the parameter, and clones round-trip (the estimator-library
convention described in the project's design notes)."""

import inspect

import pytest

import sim
from sim.core.params import Parametrized, optional
from sim.models.demand import DEMAND_TYPES

CLASSES = list(DEMAND_TYPES.values()) + [sim.Market]


def _instances():
    for cls in DEMAND_TYPES.values():
        yield cls()
    yield sim.Market(sim.LinearDemand(), cost=1.0, n_firms=3)


@pytest.mark.parametrize("cls", CLASSES, ids=lambda c: c.__name__)
def test_constraints_cover_the_signature(cls):
    names = [p for p in inspect.signature(cls.__init__).parameters if p != "self"]
    declared = set(cls._constraints)
    # a market's demand is an object validated by its own class; an owner map has its own checker
    exempt = {"demand", "owner"} if cls is sim.Market else set()
    assert set(names) - exempt == declared


@pytest.mark.parametrize("obj", list(_instances()), ids=lambda o: type(o).__name__)
def test_bad_values_raise_naming_the_parameter(obj):
    n = 3
    for name, constraint in obj._constraints.items():
        if isinstance(constraint, optional):
            constraint = constraint.inner
        bad = obj.clone(**{name: constraint.example_bad()})
        with pytest.raises(sim.InputError) as err:
            if isinstance(bad, sim.Market):
                bad.spec()
            else:
                bad.spec(n)
        assert err.value.key.endswith(name) or err.value.key.endswith("n_firms")


@pytest.mark.parametrize("obj", list(_instances()), ids=lambda o: type(o).__name__)
def test_clone_round_trips_and_unknown_parameters_raise(obj):
    twin = obj.clone()
    assert twin == obj and twin is not obj
    assert twin.get_params().keys() == obj.get_params().keys()
    with pytest.raises(sim.InputError):
        obj.clone().set_params(no_such_parameter=1)
    assert isinstance(obj, Parametrized)
