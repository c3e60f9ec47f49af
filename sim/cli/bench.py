"""``supergame bench``: throughput of the kernels against their plain-Python references, in the same run.

The sections live in :mod:`sim.bench` (registered in :data:`sim.bench.SECTIONS`); this module parses the flags,
runs them and prints their figures.
"""

from __future__ import annotations

import argparse

import numba

from sim.bench import SECTIONS, BenchOptions, machine, section
from sim.cli._common import emit, parse_number
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import table

HELP = "throughput of the simulation kernels against their plain-Python references"
DESCRIPTION = (
    "Run the kernels on fixed workloads and print firm-periods per second of the numba kernel and of the "
    "plain-Python reference measured in the same run, their ratio, the speed-up with more threads and the "
    "peak memory with ten times as many periods. Timings are the best of --repeat runs."
)


# --------------------------------------------------------------------------------------------------
# command
# --------------------------------------------------------------------------------------------------


def configure(p: argparse.ArgumentParser) -> None:
    """Add the arguments of ``supergame bench`` to its parser.

    The command takes the sections to run, threads, repeats, the quick workload and JSON output.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's subparser.
    """
    p.add_argument("--only", action="append", metavar="NAME",
                   help=f"run only this section (repeatable): {', '.join(SECTIONS)}")
    p.add_argument("--threads", metavar="N", help="threads for the multi-thread timings (default 2)")
    p.add_argument("--repeat", metavar="N", help="timings are the best of N runs (default 3)")
    p.add_argument("--quick", action="store_true", help="small workloads (a smoke test; targets not meaningful)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of tables")


def run(args) -> int:
    """Run the benchmark sections asked for and print their measures, targets and the machine they ran on.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed command line.

    Returns
    -------
    int
        The exit status (0; a target not met is reported, not an error).

    Raises
    ------
    InputError
        ``--only`` for an unknown section, ``--threads`` outside [1, numba's thread count], ``--repeat``
        outside [1, 100].
    """
    names = args.only or list(SECTIONS)
    for nm in names:
        if nm not in SECTIONS:
            raise InputError("--only", f"unknown section {nm!r}; known: {', '.join(SECTIONS)}")
    threads = parse_number("threads", args.threads, integer=True) if args.threads else min(
        2, int(numba.config.NUMBA_NUM_THREADS))
    if not 1 <= threads <= int(numba.config.NUMBA_NUM_THREADS):
        raise InputError("--threads", f"must be an integer in [1, {numba.config.NUMBA_NUM_THREADS}], got {threads}")
    repeat = parse_number("repeat", args.repeat, integer=True) if args.repeat else 3
    if not 1 <= repeat <= 100:
        raise InputError("--repeat", f"must be an integer in [1, 100], got {repeat}")
    opts = BenchOptions(quick=bool(args.quick), threads=threads, repeat=repeat)
    results = {}
    for nm in names:
        results[nm] = section(nm)(opts)
    out = {"sections": results, "machine": machine()}
    if args.json:
        emit(dumps(out, indent=2))
    else:
        emit(render(out))
    return 0


def _flat(prefix: str, d: dict, rows: list) -> None:
    for k, v in d.items():
        if k in ("targets", "notes", "workload"):
            continue
        if isinstance(v, dict):
            _flat(f"{prefix}{k}.", v, rows)
        else:
            rows.append([f"{prefix}{k}", v])


def render(out: dict) -> str:
    """The benchmark results as text: per section its workload, a table of its measures (nested measures as
    dotted names), each target met or not and the notes; the machine last.

    Parameters
    ----------
    out : dict
        ``sections`` (section name -> the dict its function returned) and ``machine``
        (:func:`sim.bench.machine`).

    Returns
    -------
    str
    """

    lines = []
    for nm, sec in out["sections"].items():
        lines.append(f"[{nm}] {sec.get('workload', '')}")
        rows: list = []
        _flat("", sec, rows)
        lines.append(table(["measure", "value"], [[k, v if not isinstance(v, float) else _num(v)] for k, v in rows]))
        for t, ok in sec.get("targets", {}).items():
            lines.append(f"  target {'met' if ok else 'NOT met'}: {t}")
        for note in sec.get("notes", []):
            lines.append(f"  note: {note}")
        lines.append("")
    m = out["machine"]
    lines.append(f"python {m['python']}, numpy {m['numpy']}, numba {m['numba']}, {m['cpus']} cpus, "
                 f"threading layer {m['threading_layer']}")
    return "\n".join(lines)


def _num(v: float) -> str:
    if v != v:
        return "-"
    if abs(v) >= 1e5 or (v != 0 and abs(v) < 1e-3):
        return f"{v:.4g}"
    return f"{v:.4f}"
