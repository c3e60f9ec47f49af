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
import difflib
import importlib
import json
import os
import re
import signal
import sys
import threading

from sim import __version__
from sim.core.errors import InputError, SolverError, Terminated

# name -> (module, one line of ``supergame --help``); the order is the order of ``supergame --help``. Only the
# module of the command being run is imported, so that ``supergame --help`` loads none of the computing packages
# (a test of the command line checks that each line here is the module's own ``HELP``).
COMMANDS = {
    "thresholds": ("sim.cli.thresholds", "stage game and critical discount factors of a market (analytic baseline)"),
    "learn": ("sim.cli.learn",
              "let pricing algorithms (Q-learning, bandits) learn; limit outcomes, profit gain, impulse response"),
    "simulate": ("sim.cli.simulate",
                 "simulate a line-up of strategies: persistence of collusion against the analytic baseline"),
    "tournament": ("sim.cli.tournament",
                   "tournament of collusive rules: profit gain of each rule, collusion within each pair, which rules "
                   "spread"),
    "bench": ("sim.cli.bench", "throughput of the simulation kernels against their plain-Python references"),
    "assess": ("sim.cli.assess",
               "coordinated effects of a merger: calibration, thresholds, persistence and factors before and after"),
    "list": ("sim.cli.listing",
             "list the shipped strategies, learners, experiment kinds and demand models with their parameters"),
    "check": ("sim.cli.check", "validate experiment files, every sweep cell included, without running them"),
    "run": ("sim.cli.run", "run an experiment file (any kind, sweeps included) into a run folder; resumable"),
    "report": ("sim.cli.report",
               "write the evidence bundle of a run folder (summary, HTML, figures, tables, manifest)"),
    "verify": ("sim.cli.verify", "check a run folder: file hashes against the manifest, and re-run a sample of cells"),
}


#: settings of the library's functions named in its errors -> the flag (or argument) that gives them here; the
#: library speaks in key paths only, the command line translates (document keys such as ``market.cost`` are
#: renamed by each command when a flag gave the value)
ARGUMENT_OF = {"out": "--out", "bundle": "--bundle", "resume": "--resume",
               "plugins": "--plugin", "retry_failed": "--retry-failed",
               "file": "FILE", "folder": "RUN_DIR", "cells": "--cells", "workers": "--workers", "cluster": "--cluster",
               "plot": "--plot", "threads": "--workers", "allow_long": "--allow-long"}


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


class ArgumentError(Exception):
    """A command line that does not parse: the flag it concerns (if any) and what is wrong.

    Parameters
    ----------
    prog : str
        The command, as the error line starts (``supergame run``).
    key : str
        The flag or argument concerned (``--workers``), or ``""`` when the error concerns none.
    message : str
        What is wrong, in one line.
    """

    def __init__(self, prog: str, key: str, message: str):
        super().__init__(message)
        self.prog, self.key, self.message = prog, key, message


class _Parser(argparse.ArgumentParser):
    """Argument parser that accepts no abbreviated flag and whose errors are raised (one line, exit status 2)."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message: str):
        m = re.match(r"argument (\S+?)(?:/\S+)?: (.*)", message)
        raise ArgumentError(self.prog, m.group(1) if m else "", m.group(2) if m else message)


def _unknown(parser: argparse.ArgumentParser, extras: list[str]) -> ArgumentError:
    """The error for arguments the command does not know, with the closest known flag."""
    flags = sorted(o for o in parser._option_string_actions if o.startswith("--"))
    first = extras[0].split("=", 1)[0]
    if first.startswith("-"):
        close = difflib.get_close_matches(first, flags, n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]}?" if close else f"; see {parser.prog} --help"
        return ArgumentError(parser.prog, first, f"unknown flag{hint}")
    return ArgumentError(parser.prog, "", f"unexpected argument {first!r}; see {parser.prog} --help")


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
    parser.commands = {}
    for name, (modname, line) in COMMANDS.items():
        if command is not None and name != command:
            sub.add_parser(name, help=line)
            continue
        mod = importlib.import_module(modname)
        p = sub.add_parser(name, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP))
        mod.configure(p)
        p.set_defaults(_run=mod.run)
        parser.commands[name] = p
    return parser


def _fail(prog: str, key: str, message: str, as_json: bool, status: int = 2, kind: str = "input") -> int:
    """Report an error: one line on stderr, or with ``--json`` one JSON object on stdout."""
    if as_json:
        sys.stdout.write(json.dumps({"error": {"key": key or None, "message": message, "kind": kind}}) + "\n")
    else:
        where = f"{key}: " if key else ""
        print(f"{prog}: error: {where}{message}", file=sys.stderr)
    return status


def _command_of(argv: list[str]) -> str:
    """The subcommand named in ``argv`` ("" when none is: ``supergame --help`` builds no subcommand)."""
    for a in argv:
        if not a.startswith("-"):
            return a if a in COMMANDS else ""
    return ""


def main(argv: list[str] | None = None) -> int:
    """Run ``supergame`` with the given arguments: parse them, run the command, and turn every error into one line
    and an exit status (see the module notes); with ``--json`` errors are printed as one JSON object on stdout.

    Parameters
    ----------
    argv : list of str or None
        The arguments after the program name; None reads ``sys.argv``.

    Returns
    -------
    int
        The exit status: 0 success, 1 a failed computation or an internal error, 2 bad input or no command,
        130 interrupted, 143 terminated.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    as_json = "--json" in argv
    command = _command_of(argv)
    parser = build_parser(command)
    try:
        args, extras = parser.parse_known_args(argv)
        if extras:
            raise _unknown(parser.commands.get(command, parser), extras)
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0)
    except ArgumentError as exc:
        return _fail(exc.prog, exc.key, exc.message, as_json)
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    previous = signal.signal(signal.SIGTERM, _terminate) if threading.current_thread() is threading.main_thread() \
        else None
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        return _fail(f"supergame {args.command}", flag_of(exc.key), exc.message, as_json)
    except SolverError as exc:
        if as_json:
            return _fail("", "", str(exc), True, 1, "computation")
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
        msg = (f"internal error ({type(exc).__name__}: {exc}); please report it (set SUPERGAME_DEBUG=1 for the "
               "traceback)")
        if as_json:
            return _fail("", "", msg, True, 1, "internal")
        print(f"supergame {args.command}: {msg}", file=sys.stderr)
        return 1
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _terminate(signum, frame):
    raise Terminated()


def entry() -> None:
    """The ``supergame`` program: :func:`main`, then exit with its status.

    After an interrupt or SIGTERM a learning session may still be running in a kernel thread, which nothing can
    stop from Python; waiting for it at exit would keep the process alive for as long as the session lasts. So the
    process ends at once (the streams flushed first), leaving nothing behind; what had finished was written before.
    """
    status = main()
    if status in (130, 143) and any(t.is_alive() and t is not threading.main_thread() for t in threading.enumerate()):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(status)
    sys.exit(status)

