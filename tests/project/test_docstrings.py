"""numpydoc docstrings (numpydoc's format, "Sections": https://numpydoc.readthedocs.io/en/latest/format.html), with
the rules of :mod:`tests.numpydoc_rules` applied in one place:

- every public function, class, method and property of every public module of every layer (``sim.core``,
  ``sim.models``, ``sim.theory``, ``strategies``, ``sim.simulation``, ``sim.learning``, ``sim.tournament``,
  ``sim.antitrust``, ``sim.runner`` with ``sim.runner.analyses``, ``sim.evidence``, ``sim.bench`` and ``sim.cli``:
  the packages in ``DOCUMENTED``);
- every callable exported by ``sim`` and ``strategies`` (``__all__``), wherever it is defined.
"""

from __future__ import annotations

import importlib
import inspect

import pytest

import sim
import strategies
from tests.numpydoc_rules import modules, problems, public_objects

# the walk goes one level into a package: a package inside a layer (``sim.runner.analyses``) is listed by itself
DOCUMENTED = ("sim.core", "sim.models", "sim.theory", "strategies", "sim.simulation", "sim.learning", "sim.tournament",
              "sim.antitrust", "sim.runner", "sim.runner.analyses", "sim.evidence", "sim.bench", "sim.cli")
LAYERS = public_objects(modules(importlib.import_module(p) for p in DOCUMENTED))


def _exported() -> list[tuple[str, object, str]]:
    out = []
    for pkg in (sim, strategies):
        for name in getattr(pkg, "__all__", ()):
            obj = getattr(pkg, name)
            if inspect.isfunction(obj) or inspect.isclass(obj):
                out.append((f"{pkg.__name__}.{name}", obj, "class" if inspect.isclass(obj) else "function"))
                if inspect.isclass(obj):
                    out += [(f"{pkg.__name__}.{name}.{q.rsplit('.', 1)[-1]}", o, k)
                            for q, o, k in public_objects([inspect.getmodule(obj)])
                            if q.startswith(f"{obj.__module__}.{obj.__name__}.")]
    return out


EXPORTED = _exported()


def test_the_walk_finds_the_layers_callables():
    """The walk reaches functions, classes, methods (numba kernels through their Python function) and records."""
    names = {q for q, _o, _k in LAYERS}
    assert {"sim.simulation.engine.simulate", "sim.simulation.kernel.simulate_chunks", "strategies.base.Automaton",
            "strategies.base.Automaton.table", "sim.learning.session.learn", "sim.learning.lineup.Lineup.play",
            "sim.learning.analysis.LearnResult", "sim.theory.analysis.ThresholdsResult",
            "sim.core.rng.ReferenceStream.next_u64", "sim.runner.store.Store.rows", "sim.bench.section",
            "sim.cli.main", "sim.cli.run.run", "sim.runner.analyses.common.collusion_of"} <= names
    assert len(EXPORTED) > 50


@pytest.mark.parametrize(("qualname", "obj", "kind"), LAYERS, ids=[q for q, _o, _k in LAYERS])
def test_every_public_callable_of_the_documented_layers(qualname, obj, kind):
    found = problems(qualname, obj, kind)
    assert not found, "\n".join(found)


@pytest.mark.parametrize(("qualname", "obj", "kind"), EXPORTED, ids=[q for q, _o, _k in EXPORTED])
def test_every_exported_callable_is_documented(qualname, obj, kind):
    found = problems(qualname, obj, kind)
    assert not found, "\n".join(found)
