"""``supergame assess``: coordinated effects of a merger, before and after, with an evidence bundle."""

from __future__ import annotations

import argparse

from ._common import emit

HELP = "coordinated effects of a merger: calibration, thresholds, persistence and factors before and after"
DESCRIPTION = (
    "Calibrate a market to observed data (or take the market as given), build the post-merger market and "
    "compare the scope for tacit collusion before and after the merger: critical discount factors per "
    "scheme and firm with the binding firm, partial collusion, simulated persistence under the experiment's "
    "monitoring noise, asymmetry measures, the usual factors against the literature, and the sensitivity of "
    "the conclusion to the uncertain inputs. Reads the tables of FILE ([data] or [market], [merger], "
    "[collusion], [monitoring], [[strategies]], [run], [assess]) and writes an evidence bundle (summary in "
    "Markdown and HTML, figures, tables as CSV and LaTeX, the full result as JSON, a manifest with hashes)."
)


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="experiment file (kind = 'assess')")
    p.add_argument("--out", metavar="DIR", help="folder of the evidence bundle (default: runs/<name>-<time>)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")


def run(args) -> int:
    import sys
    import time

    from .._assessreport import bundle_target, write_assessment_bundle
    from .._jsonutil import dumps
    from ..assess import assess, assessment_from_dict
    from ..tomlfile import read_toml

    doc = read_toml(args.file)
    kw = assessment_from_dict(doc)
    name = kw.pop("name")
    target = bundle_target(args.out, name)
    start = time.time()
    result = assess(**kw)
    end = time.time()
    argv = ["supergame", *sys.argv[1:]] if sys.argv and sys.argv[0].endswith(("supergame", "__main__.py")) else None
    folder = write_assessment_bundle(target, result, args.file, name, start, end, argv)
    if args.json:
        out = result.to_dict()
        out["bundle"] = str(folder)
        emit(dumps(out, indent=2))
        return 0
    from .._assessreport import render_text

    emit(render_text(result, name) + f"\n\nEvidence bundle: {folder}")
    return 0

