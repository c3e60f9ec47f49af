"""``supergame report``: the evidence bundle of a finished run folder."""

from __future__ import annotations

import argparse

from sim.cli._common import emit
from sim.cli.run import add_plugin_option
from sim.core.errors import InputError
from sim.evidence.report import write_report
from sim.runner.kinds import load_plugins

HELP = "write the evidence bundle of a run folder (summary, HTML, figures, tables, manifest)"
DESCRIPTION = (
    "Read the store of a finished run folder and write an evidence bundle: a Markdown summary and a self-contained "
    "HTML page (figures embedded), the figures as PNG and PDF, the tables as CSV and LaTeX (booktabs), a copy of "
    "the experiment file and manifest.json with the SHA-256 of every file. Nothing is recomputed."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame report`` to its parser.

    The command takes the run folder, the bundle folder and plugins.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder made by supergame run")
    p.add_argument("--bundle", metavar="DIR", help="bundle folder to write (default RUN_DIR/report); outside every "
                   "other run folder")
    # --out names a run folder in every command; here it is refused with the flag to use instead
    p.add_argument("--out", dest="out_given", metavar="DIR", help=argparse.SUPPRESS)
    add_plugin_option(p, "the experiment's kind or strategies")


def run(args) -> int:
    """Write the evidence bundle of a finished run folder from its store (nothing is recomputed) and print where.

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
        ``out`` when ``--out`` is given (the bundle goes to ``--bundle``); for a run folder that cannot be
        read or is not finished, or a bundle folder that cannot be written.
    """

    if args.out_given is not None:
        raise InputError("out", "names a run folder in every command; supergame report writes its bundle to "
                                "--bundle DIR (default RUN_DIR/report)")
    load_plugins(args.plugin)
    # a bundle inside the run folder is recorded in its manifest (see sim.evidence.report.write_report)
    target = write_report(args.run_dir, args.bundle)
    emit(f"Evidence bundle: {target}/summary.html (and summary.md, figures/, tables/, manifest.json)")
    return 0
