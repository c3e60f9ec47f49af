"""``supergame run``: run an experiment file of any kind into a run folder (store, exports, manifest)."""

from __future__ import annotations

import argparse
import sys

from sim.cli._common import emit, parse_number
from sim.core.errors import InputError, Terminated
from sim.core.jsonutil import dumps
from sim.evidence.render import renderer_for
from sim.evidence.report import write_report
from sim.runner.cost import MAX_SECONDS, WARN_SECONDS, describe_seconds
from sim.runner.experiment import load_experiment
from sim.runner.kinds import load_plugins
from sim.runner.runs import default_folder, open_run, run_experiment

HELP = "run an experiment file (any kind, sweeps included) into a run folder; resumable"
DESCRIPTION = (
    "Validate the experiment file and every cell of its sweep, then run the cells on local worker processes (one "
    "per core by default) or on a Dask cluster, storing each finished cell in the run folder's SQLite store. The "
    "folder (default runs/<name>-<time>) gets the results as CSV (and Parquet with pyarrow), a copy of the "
    "experiment file and a manifest of hashes; --report adds the evidence bundle. A killed run is finished with "
    "--resume RUN_DIR, which computes only the missing cells. Results do not depend on the number of workers or "
    "the backend. --plugin loads Python code (strategies or experiment kinds): it runs that code."
)


def add_plugin_option(p: argparse.ArgumentParser, what: str = "strategies or kinds") -> None:
    """``--plugin FILE`` (repeatable), the same for every command that reads experiment files.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    what : str
        What the plugin registers, in the flag's help line.
    """
    p.add_argument("--plugin", action="append", metavar="FILE", default=[],
                   help=f"Python file registering {what} (runs its code; repeatable)")


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame run`` to its parser.

    The command takes the experiment file, the run folder or the one to resume, the backend, the report, plugins
    and output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("file", nargs="?", metavar="FILE", help="experiment file (TOML); optional with --resume")
    p.add_argument("--out", metavar="DIR", help="run folder to create (default runs/<name>-<time>); not with --resume")
    p.add_argument("--workers", metavar="N", help="worker processes (default: one per usable core)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="run the cells on Dask: 'local' for a local cluster, or a scheduler address (tcp://host:8786)")
    p.add_argument("--resume", metavar="RUN_DIR", help="finish an interrupted run: compute only the missing cells")
    p.add_argument("--retry-failed", action="store_true", help="with --resume, compute the failed cells again")
    p.add_argument("--report", action="store_true", help="write the evidence bundle (RUN_DIR/report) at the end")
    add_plugin_option(p)
    p.add_argument("--allow-long", action="store_true",
                   help="run even when the estimated time on one core is over thirty days")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--json", action="store_true", help="print the run summary as one JSON object")


def run(args) -> int:
    """Run (or resume) an experiment file into a run folder and print its summary, the answer of a single cell first.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status: 0 when cells finished, 1 when none did, 130 or 143 when interrupted or terminated
        (what finished is kept and the command to resume is printed).

    Raises
    ------
    InputError
        ``FILE`` when neither a file nor ``--resume`` is given, ``--workers`` outside [1, 4096]; for a file,
        run folder or plugin that cannot be read or validated.
    """

    if not args.file and not args.resume:
        raise InputError("FILE", "give an experiment file, or --resume RUN_DIR to finish a run")
    workers = parse_number("workers", args.workers, integer=True) if args.workers is not None else None
    if workers is not None and not 1 <= workers <= 4096:
        raise InputError("--workers", f"must be an integer in [1, 4096], got {workers}")
    plugins = load_plugins(args.plugin)
    exp = load_experiment(args.file) if args.file else None
    out = args.out
    if args.resume is None and out is None:
        out = str(default_folder(__import__("pathlib").Path("runs"), exp.name))
    folder = args.resume or out
    c = exp.cost if exp is not None else None
    if c and c["seconds"] > WARN_SECONDS and (c["seconds"] <= MAX_SECONDS or args.allow_long) and not args.json:
        print(f"supergame run: estimated {c['work']:.3g} {c['unit']}, about {describe_seconds(c['seconds'])} on one "
              "core (divide by the workers)", file=sys.stderr)
    try:
        s = run_experiment(exp, out, workers=workers, cluster=args.cluster,
                           resume=args.resume, retry_failed=args.retry_failed, report=args.report,
                           write_report=write_report, plugins=plugins,
                           progress=False if args.quiet else None, command=["supergame", *sys.argv[1:]]
                           if sys.argv and sys.argv[0].endswith(("supergame", "__main__.py")) else
                           ["supergame", "run", *([args.file] if args.file else [])], allow_long=args.allow_long)
    except KeyboardInterrupt as exc:
        how = f"supergame run {args.file + ' ' if args.file else ''}--resume {folder}"
        what = "terminated (SIGTERM)" if isinstance(exc, Terminated) else "interrupted"
        print(f"supergame run: {what}; finished cells are stored in {folder}; finish with: {how}", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130
    # exit status 1 when no cell finished: there is no result to use
    status = 1 if s.status == "failed" else 0
    if args.json:
        emit(dumps(s.to_dict(), indent=2))
        return status
    lines = [f"Run folder: {s.folder}",
             f"Cells: {s.ok + s.failed} of {s.n_cells} done ({s.failed} failed); {s.ran} computed now in "
             f"{s.seconds:.1f} s on {s.backend}"]
    if s.failed_cells:
        lines.append("Failed cells:")
        lines += [f"  cell {c}: {e}" for c, e in s.failed_cells[:20]]
        if len(s.failed_cells) > 20:
            lines.append(f"  ... and {len(s.failed_cells) - 20} more (see results.csv)")
    if s.status == "complete":
        lines.append("Files: " + ", ".join(f for f in s.files if not f.startswith("report/")))
        if s.report is not None:
            lines.append(f"Evidence bundle: {s.report}/summary.html (and summary.md, figures/, tables/, "
                         "manifest.json)")
    elif s.status == "failed":
        lines.append(f"Failed: none of the {s.n_cells} cells finished" + (", so no evidence bundle was written"
                                                                          if args.report else "")
                     + f"; after fixing the cause, run them again with supergame run --resume {s.folder} "
                       "--retry-failed")
    else:
        lines.append(f"Incomplete: finish with supergame run --resume {s.folder}")
    emit("\n\n".join([*_answer(s), "\n".join(lines)]))
    return status


def _answer(s) -> list[str]:
    """The terminal report of a finished single-cell run (its answer first), read from the stored cell, as the
    kind's own command prints it; nothing for a sweep, a failed cell or a kind without a renderer."""
    if s.status != "complete" or s.n_cells != 1:
        return []
    with open_run(s.folder) as rf:
        r = renderer_for(rf.experiment.kind)
        rows = rf.rows()
        if r is None or not rows or rows[0].status != "ok":
            return []
        return [r.console(rf.result(rows[0].cell))]
