"""``supergame list``: what the package ships -- strategies, learners, experiment kinds, demand models -- with
their parameters, the values each accepts and its default, read from the constraint tables the validator uses."""

from __future__ import annotations

import argparse

from sim.cli._common import emit
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.params import describe_parameters
from sim.core.text import table
from sim.learning.tables import settings_listing
from sim.models.demand import Demand
from sim.runner.kinds import get_kind, known_kinds, load_plugins
from strategies.registry import LEARNERS, known_names, strategy_class

HELP = "list the shipped strategies, learners, experiment kinds and demand models with their parameters"
DESCRIPTION = (
    "Print what the package ships and what each item accepts: every parameter with its allowed values and "
    "default, read from the same constraint tables the validator uses. Give one or more of: strategies, learners, "
    "kinds, models (default: all). --plugin adds a plugin's own strategies and kinds."
)
WHAT = ("strategies", "learners", "kinds", "models")
_LABEL = {"strategies": "strategy", "learners": "learner", "models": "demand model"}


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame list`` to its parser.

    The command takes what to list, plugins and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("what", nargs="*", metavar="WHAT", help=f"one or more of {', '.join(WHAT)} (default: all)")
    p.add_argument("--plugin", action="append", metavar="FILE", default=[],
                   help="Python file registering strategies or kinds (runs its code)")
    p.add_argument("--json", action="store_true", help="print one JSON object")


def _demands() -> list[type]:
    out, todo = [], list(Demand.__subclasses__())
    while todo:
        c = todo.pop(0)
        if getattr(c, "name", ""):
            out.append(c)
        todo.extend(c.__subclasses__())
    return sorted(out, key=lambda c: c.name)


def catalogue(what=WHAT) -> dict:
    """What the package ships, as plain data.

    Parameters
    ----------
    what : sequence of str
        Among ``strategies``, ``learners``, ``kinds`` and ``models``.

    Returns
    -------
    dict
    """
    out: dict = {}
    if "strategies" in what:
        out["strategies"] = [{"name": n, "summary": getattr(strategy_class(n), "summary", ""),
                              "parameters": describe_parameters(strategy_class(n))} for n in known_names()]
    if "learners" in what:
        out["learners"] = [{"name": n, "summary": getattr(c, "summary", ""), "parameters": describe_parameters(c)}
                           for n, c in sorted(LEARNERS.items())]
        out["learn_settings"] = settings_listing()
    if "kinds" in what:
        out["kinds"] = [{"name": n, "summary": get_kind(n).summary, "tables": list(get_kind(n).tables)}
                        for n in known_kinds()]
    if "models" in what:
        out["models"] = [{"name": c.name, "competition": list(getattr(c, "models", ())),
                          "parameters": describe_parameters(c)} for c in _demands()]
    return out


def _default(p: dict) -> str:
    """A parameter's default as listed: its value, or in words what none stands for."""
    if p.get("default_words"):
        return p["default_words"]
    return "-" if p["default"] is None else repr(p["default"])


def _text(doc: dict) -> str:
    lines = []
    for section in ("strategies", "learners", "models"):
        for item in doc.get(section, []):
            head = f"{_LABEL[section]} {item['name']}"
            extra = item.get("summary") or ", ".join(item.get("competition", []))
            lines.append(f"{head}: {extra}" if extra else head)
            rows = [[p["name"], p["allowed"], _default(p)] for p in item["parameters"]]
            if rows:
                lines.append(table(["parameter", "allowed", "default"], rows, "lll"))
            lines.append("")
        if section == "learners" and doc.get("learn_settings"):
            lines.append("settings of a learn experiment besides the learners' (key path in the experiment file)")
            lines.append(table(["key", "allowed", "default"], [[p["name"], p["allowed"], _default(p)]
                                                               for p in doc["learn_settings"]], "lll"))
            lines.append("")
    if "kinds" in doc:
        lines.append(table(["experiment kind", "tables", "what a cell computes"],
                           [[k["name"], ", ".join(k["tables"]), k["summary"]] for k in doc["kinds"]], "lll"))
    return "\n".join(lines).rstrip()


def run(args) -> int:
    """Print the strategies, learners, experiment kinds and demand models asked for, with their parameters.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status (0).

    Raises
    ------
    InputError
        ``WHAT`` for a name that is not one of strategies, learners, kinds, models; ``plugins`` for a plugin
        that cannot be loaded.
    """
    load_plugins(args.plugin)
    for w in args.what:
        if w not in WHAT:
            raise InputError("WHAT", f"must be among {', '.join(WHAT)}, got {w!r}")
    doc = catalogue(tuple(args.what) or WHAT)
    emit(dumps(doc, indent=2) if args.json else _text(doc))
    return 0
