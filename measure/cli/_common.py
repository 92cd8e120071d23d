"""Small helpers shared by the subcommand modules (argument types, output)."""

from __future__ import annotations

import argparse
import sys
from typing import Any


def positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from err
    if not (v > 0):
        raise argparse.ArgumentTypeError(f"{text!r} must be positive")
    return v


def print_json(obj: Any) -> None:
    from measure.audio_io import dumps

    sys.stdout.write(dumps(obj) + "\n")


def info(message: str) -> None:
    """A progress or status line on stderr (stdout is kept for results and JSON)."""
    print(message, file=sys.stderr)


def warn(message: str) -> None:
    """A warning the user should act on, on stderr."""
    print(f"warning: {message}", file=sys.stderr)
