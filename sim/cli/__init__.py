"""Command line: ``supergame <command> ...`` (also ``python -m sim``).

Each command lives in its own module exposing ``HELP`` (one line), ``configure(parser)`` and
``run(args) -> int``, registered in :data:`COMMANDS` with its help line. Only the module of the command
being run is imported, so that ``supergame --help`` answers at once and loads neither numba nor matplotlib.

Exit status: 0 success, 1 a computation failed or an internal error (printed as one line; set
``SUPERGAME_DEBUG=1`` for the traceback of an internal error), 2 bad input (one line naming the
field), 130 interrupted (Ctrl-C), 143 terminated (SIGTERM; handled like Ctrl-C: what finished is kept, the
attempt is recorded as interrupted).
"""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
import threading

from sim import __version__
from sim.core.errors import InputError, SolverError, Terminated

# name -> (module, one line of ``supergame --help``); the order is the order of ``supergame --help``. Only the
# module of the command being run is imported, so that ``supergame --help`` loads none of the computing packages
# (tests/cli/test_cli_layout.py checks that each line here is the module's own ``HELP``).
COMMANDS = {
    "thresholds": ("sim.cli.thresholds", "stage game and critical discount factors of a market (analytic baseline)"),
    "learn": ("sim.cli.learn", "let Q-learning firms learn to price; limit outcomes, profit gain and impulse response"),
    "simulate": ("sim.cli.simulate",
                 "simulate a line-up of strategies: persistence of collusion against the analytic baseline"),
    "tournament": ("sim.cli.tournament",
                   "tournament of collusive rules: profit gain of each rule, collusion within each pair, which rules "
                   "spread"),
    "bench": ("sim.cli.bench", "throughput of the simulation kernels against their plain-Python references"),
    "assess": ("sim.cli.assess",
               "coordinated effects of a merger: calibration, thresholds, persistence and factors before and after"),
    "check": ("sim.cli.check", "validate experiment files, every sweep cell included, without running them"),
    "run": ("sim.cli.run", "run an experiment file (any kind, sweeps included) into a run folder; resumable"),
    "report": ("sim.cli.report",
               "write the evidence bundle of a run folder (summary, HTML, figures, tables, manifest)"),
    "verify": ("sim.cli.verify", "check a run folder: file hashes against the manifest, and re-run a sample of cells"),
}


#: settings of the library's functions named in its errors -> the flag (or argument) that gives them here; the
#: library speaks in key paths only, the command line translates (document keys such as ``market.cost`` are
#: renamed by each command when a flag gave the value)
ARGUMENT_OF = {"out": "--out", "resume": "--resume", "plugins": "--plugin", "retry_failed": "--retry-failed",
               "file": "FILE", "folder": "RUN_DIR", "cells": "--cells", "workers": "--workers", "cluster": "--cluster",
               "plot": "--plot", "threads": "--threads"}


def flag_of(key: str) -> str:
    """The command-line name of a library key (``out`` -> ``--out``); other keys unchanged.

    Parameters
    ----------
    key : str

    Returns
    -------
    str
    """
    head, bracket, rest = key.partition("[")
    if head in ARGUMENT_OF:
        return ARGUMENT_OF[head] + bracket + rest
    return key


class _Parser(argparse.ArgumentParser):
    """Argument parser whose errors are one line on stderr with exit status 2."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The parser of ``supergame``.

    Parameters
    ----------
    command : str or None
        The subcommand to build in full (its module is imported); the others get their help line only.
        None builds every subcommand.

    Returns
    -------
    argparse.ArgumentParser
    """
    parser = _Parser(
        prog="supergame",
        description="Tacit-collusion analysis for oligopoly markets: stage games, critical discount "
        "factors, repeated-game simulation, learning agents, tournaments, sweeps and evidence bundles.",
    )
    parser.add_argument("--version", action="version", version=f"supergame {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, (modname, line) in COMMANDS.items():
        if command is not None and name != command:
            sub.add_parser(name, help=line)
            continue
        mod = importlib.import_module(modname)
        p = sub.add_parser(name, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP))
        mod.configure(p)
        p.set_defaults(_run=mod.run)
    return parser


def _command_of(argv: list[str]) -> str:
    """The subcommand named in ``argv`` ("" when none is: ``supergame --help`` builds no subcommand)."""
    for a in argv:
        if not a.startswith("-"):
            return a if a in COMMANDS else ""
    return ""


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(_command_of(argv))
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version and argument errors (one line, status 2)
        return int(exc.code or 0)
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    previous = signal.signal(signal.SIGTERM, _terminate) if threading.current_thread() is threading.main_thread() \
        else None
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        where = f"{flag_of(exc.key)}: " if exc.key else ""
        print(f"supergame {args.command}: error: {where}{exc.message}", file=sys.stderr)
        return 2
    except SolverError as exc:
        print(f"supergame {args.command}: computation failed: {exc}", file=sys.stderr)
        return 1
    except Terminated:
        print(f"supergame {args.command}: terminated (SIGTERM); what had finished is kept", file=sys.stderr)
        return 143
    except KeyboardInterrupt:
        print(f"supergame {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # pragma: no cover - e.g. piping into head
        return 0
    except Exception as exc:  # a defect, not a user error: one line, the traceback on request
        if os.environ.get("SUPERGAME_DEBUG"):
            raise
        print(f"supergame {args.command}: internal error ({type(exc).__name__}: {exc}); please report it "
              "(set SUPERGAME_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _terminate(signum, frame):
    raise Terminated()

