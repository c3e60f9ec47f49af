"""``supergame tournament``: every rule for sustaining collusion against every other, in the market's terms."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from sim.cli._common import emit, parse_number
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.parallel import check_threads, usable_cores
from sim.core.tomlfile import read_toml
from sim.evidence.render import write_figures
from sim.evidence.report import write_report
from sim.evidence.tournament import RENDERER, answer
from sim.runner.experiment import load_experiment
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single

HELP = "tournament of collusive rules: profit gain of each rule, collusion within each pair, which rules spread"
DESCRIPTION = (
    "Play every group of rules (self-play included; every seating where firms differ) in the market of FILE, with "
    "its monitoring and noise, and report in the market's terms: each rule's profit gain between the static Nash "
    "and the collusive profit of its seats against rivals drawn at random from the rules, with intervals and how "
    "stable the order is when the replications are resampled; for each pair (or group) of rules, the share of the "
    "collusive profit it keeps and how long collusion lasts between them; and which rules spread under the "
    "replicator dynamics and which resist invasion in a large and in a finite population (Moran process). FILE has "
    "[market], [[entrants]] (label, strategy, parameters), [tournament], and optionally [collusion], [monitoring], "
    "[learning] (defaults of qlearning entrants and their sessions) and [run]. Without --out nothing is written "
    "but the figures of --plot; with --out DIR the run goes into the run folder DIR with its evidence bundle, as "
    "supergame run --report writes it."
)


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame tournament`` to its parser.

    The command takes the experiment file, the run folder, figures, workers and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("file", metavar="FILE", help="experiment file ([market], [[entrants]], [tournament], ...)")
    p.add_argument("--out", metavar="DIR", help="run into the run folder DIR (store, exports, manifest) and write its "
                                                "evidence bundle DIR/report, as supergame run --report does")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    p.add_argument("--plot", metavar="DIR", help="write the figures (PNG) into DIR: the rules' profit gain and "
                                                 "spread, collusion within each pair, replicator dynamics, invasion")
    p.add_argument("--workers", dest="threads", metavar="N",
                   help="parallel workers: threads of the kernels (the numbers do not depend on it)")


def _document(path: str) -> dict:
    """FILE's tables as an experiment of kind ``tournament`` (a file that names another kind is refused)."""
    doc = read_toml(path)
    exp = doc.get("experiment", {})
    if not isinstance(exp, dict):
        raise InputError("experiment", f"must be a table, got {exp!r}")
    if "kind" in exp and exp["kind"] != "tournament":
        raise InputError("experiment.kind", f"this command runs kind = 'tournament' experiments, got {exp['kind']!r}")
    doc["experiment"] = {**exp, "kind": "tournament"}
    return doc


def _threads(args) -> int | None:
    if not args.threads:
        return None
    return check_threads(parse_number("workers", args.threads, integer=True))


def _check_dir(path, flag: str) -> None:
    if path is not None and os.path.exists(path) and not os.path.isdir(path):
        raise InputError(flag, f"{path} exists and is not a directory")


def _into_folder(args, threads) -> tuple[object | None, list[str]]:
    """Run FILE into the run folder of ``--out`` with its bundle; the first cell's result and lines naming the
    files."""
    exp = load_experiment(args.file)
    s = run_experiment(exp, args.out, workers=threads, report=True, write_report=write_report,
                       progress=None, command=["supergame", "tournament", args.file, "--out", args.out])
    lines = [f"Run folder: {s.folder}"]
    if s.report is not None:
        lines.append(f"Evidence bundle: {s.report}/summary.html (and summary.md, figures/, tables/, manifest.json)")
    with open_run(s.folder) as rf:
        rows = rf.rows()
        ok = [r for r in rows if r.status == "ok"]
        if not ok:
            raise InputError("file", f"no cell finished ({rows[0].error if rows else 'no cells'}); see {s.folder}")
        if exp.n_cells == 1:
            return rf.result(0), lines
        lines += [f"Cell {r.number}: {answer(rf.result(r.cell))}" for r in ok]
        return None, lines


def run(args) -> int:
    """Play the tournament of FILE (in memory, or into a run folder with ``--out``) and print (and plot) its result.

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
        For a file that cannot be read or validated, ``--workers`` out of range, or ``--out`` or ``--plot``
        naming something that is not a folder.
    """
    threads = _threads(args)
    doc = _document(args.file)
    _check_dir(args.out, "out")
    _check_dir(args.plot, "plot")
    if args.out:
        res, lines = _into_folder(args, threads)
    else:
        stem = Path(args.file).stem
        one = run_single(doc, threads=threads or usable_cores(), progress=sys.stderr.isatty(), source=args.file,
                         default_name=stem if stem.replace("-", "").replace("_", "").isalnum() else "tournament")
        res, lines = one.result, []
    written = write_figures(RENDERER.figures(res), args.plot) if args.plot and res is not None else []
    if args.json:
        doc = RENDERER.as_json(res) if res is not None else {}
        if lines or written:
            doc["files"] = lines + [str(p) for p in written]
        emit(dumps(doc, indent=2))
        return 0
    text = RENDERER.console(res) if res is not None else ""
    extra = lines + (["Figures: " + ", ".join(str(p) for p in written)] if written else [])
    emit("\n\n".join(t for t in (text, "\n".join(extra)) if t))
    return 0
