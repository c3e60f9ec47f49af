"""``supergame check``: validate experiment files (every sweep cell) without running anything."""

from __future__ import annotations

import argparse

from sim.cli._common import emit
from sim.cli.run import add_plugin_option
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.runner.cost import describe_bytes, describe_seconds
from sim.runner.experiment import load_experiment
from sim.runner.kinds import load_plugins

HELP = "validate experiment files, every sweep cell included, without running them"
DESCRIPTION = (
    "Read each experiment file, check every table, key and value against its kind's schema, expand the sweep and "
    "validate every cell, and print what a run would do. Nothing is computed and nothing is written. An error is "
    "one line naming the key path, the allowed values and what was given (exit status 2). --plugin loads Python "
    "code (strategies or experiment kinds) the files use: it runs that code."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame check`` to its parser.

    The command takes the experiment files, plugins and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("files", nargs="+", metavar="FILE", help="experiment files (TOML)")
    add_plugin_option(p)
    p.add_argument("--json", action="store_true", help="print one JSON object per file")


def describe(exp) -> str:
    """One line on a valid experiment: its source, kind and name, cells and sweep, metrics, figures and the
    estimated cost of running it.

    Parameters
    ----------
    exp : Experiment
        The validated experiment file.

    Returns
    -------
    str
    """
    parts = [f"{exp.source}: valid {exp.kind} experiment {exp.name!r}"]
    if exp.parameters:
        sweep = ", ".join(f"{p.path} ({len(p)} value{'s' if len(p) != 1 else ''})" for p in exp.parameters)
        parts.append(f"{exp.n_cells} cells ({exp.mode}: {sweep})")
    else:
        parts.append("1 cell (no sweep)")
    if exp.metric_names:
        parts.append(f"{len(exp.metric_names)} metrics per cell")
    if exp.report.figures:
        parts.append(f"{len(exp.report.figures)} figure{'s' if len(exp.report.figures) != 1 else ''}")
    if exp.cost:
        c = exp.cost
        parts.append(f"estimated cost: {c['work']:.3g} {c['unit']}, about {describe_seconds(c['seconds'])} on one "
                     f"core, at most {describe_bytes(c['cell_memory'])} of arrays per cell")
    wait = waiting(exp)
    if wait:
        parts.append(f"not ready to run yet: {wait}")
    return "; ".join(parts)


def waiting(exp) -> str | None:
    """What a valid experiment still waits for before it can run (``Kind.ready``: a file an earlier run writes),
    as the run would refuse it, or None.

    Parameters
    ----------
    exp : Experiment

    Returns
    -------
    str or None
        ``key: message`` of the first cell that is not ready.
    """
    ready = exp.kind_spec().ready
    if ready is None:
        return None
    for i in range(exp.n_cells):
        try:
            ready(exp.cell(i).doc)
        except InputError as exc:
            return f"{exc.key}: {exc.message}"
    return None


def run(args) -> int:
    """Validate each experiment file, every sweep cell included, and print what it would run; nothing is run.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status (0 when every file is valid).

    Raises
    ------
    InputError
        At the first file that cannot be read or validated, or a plugin that cannot be loaded.
    """

    load_plugins(args.plugin)
    for f in args.files:
        exp = load_experiment(f)
        if args.json:
            emit(dumps({"file": f, "valid": True, "name": exp.name, "kind": exp.kind, "cells": exp.n_cells,
                        "parameters": [{"path": p.path, "values": list(p.values)} for p in exp.parameters],
                        "metrics": list(exp.metric_names), "sha256": exp.sha256, "cost": exp.cost,
                        "waiting": waiting(exp)}))
        else:
            emit(describe(exp))
    return 0
