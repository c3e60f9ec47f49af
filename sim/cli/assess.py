"""``supergame assess``: coordinated effects of a merger, before and after, in a run folder with an
evidence bundle."""

from __future__ import annotations

import argparse
import sys

from sim.antitrust.options import assessment_from_dict
from sim.cli._common import emit
from sim.core.errors import SolverError
from sim.core.jsonutil import dumps
from sim.core.tomlfile import read_toml
from sim.evidence.assess import RENDERER
from sim.evidence.capacity import RENDERER as CAPACITY_RENDERER
from sim.evidence.render import output_dir, write_figures
from sim.evidence.report import write_report
from sim.runner.experiment import load_experiment
from sim.runner.runs import open_run, run_experiment
from sim.theory.capacity_analysis import is_capacity_market

HELP = "coordinated effects of a merger: calibration, thresholds, persistence and factors before and after"
DESCRIPTION = (
    "Calibrate a market to observed data (or take the market as given), build the post-merger market and "
    "compare the scope for tacit collusion before and after the merger: critical discount factors per "
    "scheme and firm with the binding firm, partial collusion, simulated persistence under the experiment's "
    "monitoring noise, asymmetry measures, the usual factors against the literature, and the sensitivity of "
    "the conclusion to the uncertain inputs. Reads the tables of FILE ([data] or [market], [merger], "
    "[collusion], [monitoring], [[strategies]], [run], [assess]) and runs it as supergame run does, into a run "
    "folder (the same numbers for the same file and seed; check it with supergame verify RUN_DIR), whose "
    "report/ folder is the evidence bundle (summary in Markdown and HTML, figures, tables as CSV and LaTeX, "
    "the full result as JSON, a manifest with hashes). Prints the assessment stored in the run folder."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame assess`` to its parser.

    The command takes the experiment file FILE, the run folder, figures and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("file", metavar="FILE", help="experiment file (kind = 'assess')")
    p.add_argument("--out", metavar="DIR",
                   help="run folder to create (default runs/<name>-<time>); the evidence bundle is DIR/report")
    p.add_argument("--plot", metavar="DIR", help="also write the assessment's figures (PNG) into DIR")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")


def run(args) -> int:
    """Run the merger assessment of FILE into a run folder with its evidence bundle and print the stored result.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status (0; a failed assessment raises SolverError, which the command prints with status 1).

    Raises
    ------
    InputError
        For a file that cannot be read or validated, or a figures folder that cannot be written; nothing is
        computed then.
    """
    # the assessment's own reading first (kind, one assessment, no [sweep] or [report]), then the
    # experiments layer's validation of the whole file; nothing is written before both pass
    doc = read_toml(args.file)
    # a market of price competition with capacities is assessed by its own kind (kind = 'capacity')
    capacity = is_capacity_market(doc.get("market")) and doc.get("experiment", {}).get("kind") == "capacity"
    renderer = CAPACITY_RENDERER if capacity else RENDERER
    if not capacity:
        assessment_from_dict(doc)
    exp = load_experiment(args.file)
    if args.plot:
        output_dir(args.plot)
    argv = (["supergame", *sys.argv[1:]] if sys.argv and sys.argv[0].endswith(("supergame", "__main__.py"))
            else ["supergame", "assess", args.file])
    s = run_experiment(exp, args.out, command=argv, report=True, write_report=write_report)
    if s.failed_cells:
        raise SolverError(f"the assessment failed ({s.failed_cells[0][1]}); the run folder {s.folder} records it")
    # what the run folder holds is what is printed: the result stored with the cell, as the bundle shows it
    with open_run(s.folder) as rf:
        result = rf.result(0)
    if args.plot:
        write_figures(renderer.figures(result), args.plot)
    if args.json:
        emit(dumps(renderer.as_json(result) | {"run_folder": str(s.folder), "bundle": str(s.report)}, indent=2))
        return 0
    emit(renderer.console(result) + f"\n\nRun folder: {s.folder} (check it with: supergame verify {s.folder})"
         f"\nEvidence bundle: {s.report}")
    return 0
