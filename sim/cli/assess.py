"""``supergame assess``: coordinated effects of a merger, before and after, in a run folder with an
evidence bundle."""

from __future__ import annotations

import argparse
import sys

from sim.antitrust.assess import assessment_from_dict
from sim.cli._common import emit
from sim.core.errors import SolverError
from sim.core.jsonutil import dumps
from sim.core.tomlfile import read_toml
from sim.evidence.assess import render_text
from sim.evidence.report import write_report
from sim.runner.analyses.assess import keep_assessments
from sim.runner.experiment import load_experiment
from sim.runner.runs import run_experiment

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
    "the full result as JSON, a manifest with hashes)."
)


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="experiment file (kind = 'assess')")
    p.add_argument("--out", metavar="DIR",
                   help="run folder to create (default runs/<name>-<time>); the evidence bundle is DIR/report")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")


def run(args) -> int:


    # the assessment's own reading first (kind, one assessment, no [sweep] or [report]), then the
    # experiments layer's validation of the whole file; nothing is written before both pass
    assessment_from_dict(read_toml(args.file))
    exp = load_experiment(args.file)
    argv = (["supergame", *sys.argv[1:]] if sys.argv and sys.argv[0].endswith(("supergame", "__main__.py"))
            else ["supergame", "assess", args.file])
    # the evidence bundle is the run's report (sim.evidence.report.write_report), read from the stored cell as
    # supergame report RUN_DIR reads it, and recorded in the run's manifest; the terminal output is the
    # cell's assessment, kept as it was computed
    with keep_assessments() as kept:
        s = run_experiment(exp, args.out, command=argv, report=True, write_report=write_report)
    if s.failed_cells:
        raise SolverError(f"the assessment failed ({s.failed_cells[0][1]}); the run folder {s.folder} records it")
    if len(kept) != 1 or s.report is None:  # pragma: no cover - one cell, run in this process
        raise RuntimeError(f"expected one assessment and its report from the run, got {len(kept)}")
    result = kept[0][1]
    bundle = s.report
    if args.json:
        out = result.to_dict()
        out["run_folder"] = str(s.folder)
        out["bundle"] = str(bundle)
        emit(dumps(out, indent=2))
        return 0
    emit(render_text(result, exp.name) + f"\n\nRun folder: {s.folder} (check it with: supergame verify {s.folder})"
         f"\nEvidence bundle: {bundle}")
    return 0
