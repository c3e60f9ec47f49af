"""``supergame verify``: check a run folder's hashes and re-run a sample of its cells."""

from __future__ import annotations

import argparse

from sim.cli._common import emit, parse_number
from sim.cli.run import add_plugin_option
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.runner.kinds import load_plugins
from sim.runner.runs import verify_run

HELP = "check a run folder: file hashes against the manifest, and re-run a sample of cells"
DESCRIPTION = (
    "Check that every file of a run folder still has the SHA-256 its manifest records (and that no file was added), "
    "that every stored row is the cell it claims to be, and that the exports (results.csv, results.parquet, "
    "arrays.json, the report's results table) are what the store gives, byte for byte; then re-run a sample of "
    "cells from the folder's copy of the experiment file and compare every metric with the stored one. Exit status "
    "0 when everything checks out, 1 when a file was altered, the folder is damaged or a number does not "
    "reproduce. --plugin loads Python code the experiment needs: it runs that code."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame verify`` to its parser.

    The command takes the run folder, the cells to re-run, the tolerance, plugins and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder made by supergame run")
    p.add_argument("--sample", metavar="N",
                   help="cells to re-run, drawn with the store's digest as seed (default: all when 12 or fewer, "
                        "else 12; 0: no re-run)")
    p.add_argument("--cells", metavar="LIST",
                   help="re-run these cells instead (comma-separated numbers, counted from 1 as in results.csv)")
    p.add_argument("--tolerance", metavar="R", help="relative tolerance of the comparison (default 1e-9)")
    add_plugin_option(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")


def run(args) -> int:
    """Check a run folder (hashes, stored rows, exports, re-run cells) and print each check.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status: 0 when everything checks out, 1 when a check failed.

    Raises
    ------
    InputError
        ``--sample`` below 0, ``--tolerance`` outside [0, 1), a ``--cells`` entry that is not a number or not a
        cell, or a plugin that cannot be loaded.
    """

    load_plugins(args.plugin)
    sample = parse_number("sample", args.sample, integer=True) if args.sample is not None else None
    if sample is not None and sample < 0:
        raise InputError("--sample", f"must be an integer >= 0, got {sample}")
    cells = None
    if args.cells:
        cells = [parse_number("cells", t.strip(), integer=True) for t in args.cells.split(",")]
    rtol = parse_number("tolerance", args.tolerance) if args.tolerance is not None else 1e-9
    if not 0 <= rtol < 1:
        raise InputError("--tolerance", f"must be a number in [0, 1), got {rtol:g}")
    res = verify_run(args.run_dir, sample=sample, cells=cells, rtol=rtol)
    if args.json:
        emit(dumps(res.to_dict(), indent=2))
    else:
        lines = [("ok      " if ok else "FAILED  ") + text for ok, text in res.checks]
        lines.append(f"verify: {'the run checks out' if res.ok else 'the run does NOT check out'}")
        emit("\n".join(lines))
    return 0 if res.ok else 1
