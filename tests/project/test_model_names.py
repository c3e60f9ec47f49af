"""No code outside the models layer decides anything by a demand model's name or class.

Every decision that depends on the model goes through a method of the model
(:class:`sim.models.demand_spec.DemandSpec`), so that a new model -- a user's plugin included -- gets the
generic method or a clear refusal, never another model's formula. Read from the code (ast): a comparison with
a model's name, a table keyed by model names, an ``isinstance`` test against a model class and an import of a
stage-core code are refused outside ``sim/models/``; a failure prints the offending line.

The word "linear" also names a fitness map of the evolutionary dynamics (``1 - w + w * payoff``); comparisons
whose other side is that setting (its source mentions ``fitness`` or ``mapping``) are not about demand.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from sim.models.demand import DEMAND_TYPES

ROOT = Path(__file__).resolve().parents[2]
NAMES = frozenset(DEMAND_TYPES)
CLASSES = frozenset(cls.__name__ for cls in DEMAND_TYPES.values())
#: the other side of a comparison with "linear" that is the evolutionary fitness map, not a demand
NOT_DEMAND = ("fitness", "mapping")


def _modules() -> list[Path]:
    paths = sorted([*ROOT.glob("sim/**/*.py"), *ROOT.glob("strategies/**/*.py")])
    return [p for p in paths if not p.relative_to(ROOT).as_posix().startswith("sim/models/")]


def _strings(node) -> set:
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return {node.value}
    if isinstance(node, ast.Tuple | ast.List | ast.Set):
        return set().union(*(_strings(e) for e in node.elts)) if node.elts else set()
    return set()


def _offences(path: Path, where: str) -> list[str]:
    src = path.read_text()
    lines = src.splitlines()
    out = []
    for node in ast.walk(ast.parse(src)):
        what = None
        if isinstance(node, ast.Compare):
            operands = [node.left, *node.comparators]
            if set().union(*(_strings(o) for o in operands)) & NAMES:
                others = " ".join(ast.get_source_segment(src, o) or "" for o in operands if not _strings(o))
                if not any(word in others for word in NOT_DEMAND):
                    what = "compares with a demand model's name"
        elif isinstance(node, ast.Dict):
            if set().union(set(), *(_strings(k) for k in node.keys if k is not None)) & NAMES:
                what = "is a table keyed by demand model names"
        elif isinstance(node, ast.MatchValue) and _strings(node.value) & NAMES:
            what = "matches a demand model's name"
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "isinstance":
            if len(node.args) == 2 and {n.id for n in ast.walk(node.args[1]) if isinstance(n, ast.Name)} & CLASSES:
                what = "tests for a demand model's class"
        elif isinstance(node, ast.ImportFrom) and any(a.name.startswith("CODE_") for a in node.names):
            what = "imports a stage-core code (the model names its own)"
        if what:
            out.append(f"{where}:{node.lineno}: {lines[node.lineno - 1].strip()}  <- {what}")
    return out


@pytest.mark.parametrize("path", _modules(), ids=lambda p: p.relative_to(ROOT).as_posix())
def test_no_decision_by_a_demand_models_name_outside_the_models_layer(path):
    offences = _offences(path, path.relative_to(ROOT).as_posix())
    assert not offences, "decide through a method of the demand model instead:\n" + "\n".join(offences)


def test_the_scan_catches_what_it_looks_for(tmp_path):
    """The checks fire on the patterns they look for (a scan that finds nothing proves nothing)."""
    bad = tmp_path / "probe.py"
    bad.write_text('def f(ms, mapping):\n'
                   '    if ms.demand.kind == "logit":\n        return 1\n'
                   '    if mapping == "linear":\n        return 2\n'
                   '    table = {"linear": 1, "isoelastic": 2}\n'
                   '    return isinstance(ms, LinearDemand), table\n')
    found = _offences(bad, "probe.py")
    assert [f.split(":")[1] for f in found] == ["2", "6", "7"]
