"""The ``measure`` command line: one module per subcommand, no numerical work here.

Each subcommand module defines ``NAME``, ``HELP``, ``add_arguments(parser)`` and
``run(args) -> int``; heavy imports (numpy, scipy, soundfile) happen inside ``run`` so that
``measure --help`` starts fast. Only :class:`~measure.errors.MeasureError` is caught: it is
printed as one ``error: ...`` line and the exit status is 2. Anything else is a bug and keeps its
traceback.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import sys
from collections.abc import Sequence
from typing import NoReturn

from measure._version import __version__

EXIT_OK = 0
EXIT_FAILURE = 1  # the job ran but its result is not usable (e.g. a take marked for redo)
EXIT_USAGE = 2  # bad input: a MeasureError or an argparse usage error

#: Subcommand modules, in the order ``measure --help`` lists them (the pipeline's order).
COMMANDS: tuple[str, ...] = (
    "measure.cli.cmd_demo",
    "measure.cli.cmd_sweep",
    "measure.cli.cmd_devices",
    "measure.cli.cmd_level",
    "measure.cli.cmd_capture",
    "measure.cli.cmd_import",
    "measure.cli.cmd_ir",
    "measure.cli.cmd_analyze",
    "measure.cli.cmd_attenuation",
    "measure.cli.cmd_compare",
    "measure.cli.cmd_predict",
    "measure.cli.cmd_batch",
    "measure.cli.cmd_report",
    "measure.cli.cmd_fit",
    "measure.cli.cmd_render",
    "measure.cli.cmd_auralize",
)


class _Parser(argparse.ArgumentParser):
    """argparse with its usage errors in the tool's one-line form: ``error: what; what to do``
    (the command's usage stays on ``--help``), exit status 2."""

    def error(self, message: str) -> NoReturn:
        message = " ".join(message.split())
        sys.stderr.write(f"error: {message}; see `{self.prog} --help`\n")
        raise SystemExit(EXIT_USAGE)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="measure",
        description="Measure rooms with sine sweeps, report ISO 3382-1 figures and fit compact "
                    "room models for interactive audio.",
    )
    parser.add_argument("--version", action="version", version=f"measure {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for modname in COMMANDS:
        mod = importlib.import_module(modname)
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP),
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


class _Terminated(BaseException):
    """SIGTERM, raised where the program is, so that every atomic writer removes its
    temporary file on the way out (as for KeyboardInterrupt)."""


def _on_sigterm(signum: int, frame: object) -> None:
    raise _Terminated


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    import signal

    try:
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread: leave the signal alone
        previous = None
    try:
        code = _main(argv)
        sys.stdout.flush()  # here, where a reader gone away is caught, not at exit
        return code
    except _Terminated:
        print("error: terminated; nothing half-written was kept", file=sys.stderr)
        return 143
    except BrokenPipeError:
        # The reader of stdout went away (`measure analyze IR.wav | head`): stop quietly, as a
        # program killed by SIGPIPE would (128 + 13); stdout goes to /dev/null so that Python's
        # own flush at exit does not print a traceback (Python docs, "Note on SIGPIPE").
        import os

        with contextlib.suppress(OSError, ValueError):
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
        return 141
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _main(argv: Sequence[str] | None) -> int:
    from measure.errors import MeasureError

    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra:  # reported by the command's own parser, which names the command
        sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
        target = sub.choices.get(getattr(args, "command", None) or "", parser)
        target.error(f"unrecognized arguments: {' '.join(extra)}")
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args._run(args) or EXIT_OK)
    except MeasureError as err:
        message = " ".join(str(err).split())
        print(f"error: {message}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("error: interrupted; nothing half-written was kept", file=sys.stderr)
        return 130
