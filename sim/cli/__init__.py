"""Command line: ``supergame <command> ...`` (also ``python -m sim``).

Each command lives in its own module exposing ``HELP`` (one line), ``configure(parser)`` and
``run(args) -> int``. Command modules import heavy dependencies inside ``run`` only, so that
``supergame --help`` answers quickly.

Exit status: 0 success, 1 a computation failed or an internal error (printed as one line; set
``SUPERGAME_DEBUG=1`` for the traceback of an internal error), 2 bad input (one line naming the
field), 130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from sim.core.errors import InputError, SolverError

# name -> module; the order is the order of ``supergame --help``
COMMANDS = {
    "thresholds": "sim.cli.thresholds",
    "learn": "sim.cli.learn",
    "simulate": "sim.cli.simulate",
    "tournament": "sim.cli.tournament",
    "bench": "sim.cli.bench",
    "assess": "sim.cli.assess",
    "check": "sim.cli.check",
    "run": "sim.cli.run",
    "report": "sim.cli.report",
    "verify": "sim.cli.verify",
}


class _Parser(argparse.ArgumentParser):
    """Argument parser whose errors are one line on stderr with exit status 2."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    from sim import __version__

    parser = _Parser(
        prog="supergame",
        description="Tacit-collusion analysis for oligopoly markets: stage games, critical discount "
        "factors, repeated-game simulation, learning agents, tournaments, sweeps and evidence bundles.",
    )
    parser.add_argument("--version", action="version", version=f"supergame {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, modname in COMMANDS.items():
        mod = importlib.import_module(modname)
        p = sub.add_parser(name, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP))
        mod.configure(p)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version and argument errors (one line, status 2)
        return int(exc.code or 0)
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        print(f"supergame {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except SolverError as exc:
        print(f"supergame {args.command}: computation failed: {exc}", file=sys.stderr)
        return 1
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

