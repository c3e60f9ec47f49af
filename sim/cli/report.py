"""``supergame report``: the evidence bundle of a finished run folder."""

from __future__ import annotations

import argparse

from ._common import emit

HELP = "write the evidence bundle of a run folder (summary, HTML, figures, tables, manifest)"
DESCRIPTION = (
    "Read the store of a finished run folder and write an evidence bundle: a Markdown summary and a self-contained "
    "HTML page (figures embedded), the figures as PNG and PDF, the tables as CSV and LaTeX (booktabs), a copy of "
    "the experiment file and manifest.json with the SHA-256 of every file. Nothing is recomputed."
)


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder made by supergame run")
    p.add_argument("--out", metavar="DIR", help="bundle folder (default RUN_DIR/report)")
    p.add_argument("--plugin", action="append", metavar="FILE", default=[],
                   help="Python file registering the experiment's kind or strategies (runs its code; repeatable)")


def run(args) -> int:
    from pathlib import Path

    from ..kinds import load_plugins
    from ..report import write_report
    from ..runs import write_manifest

    load_plugins(args.plugin)
    target = write_report(args.run_dir, args.out)
    if Path(target).resolve().parent == Path(args.run_dir).resolve():
        write_manifest(args.run_dir)
    emit(f"Evidence bundle: {target}/summary.html (and summary.md, figures/, tables/, manifest.json)")
    return 0
