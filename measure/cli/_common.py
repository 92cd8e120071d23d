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


def channel_index(channel: int, n_channels: int, *, option: str, source: str) -> int:
    """0-based index of a 1-based channel number given on the command line, or an error."""
    from measure.errors import ParameterError

    if not 1 <= channel <= n_channels:
        raise ParameterError(
            f"{option} {channel} does not exist: {source} has {n_channels} channel(s); choose "
            f"one of 1..{n_channels}")
    return channel - 1


def refuse_overwriting_inputs(out: Any, *inputs: Any, option: str = "--out",
                              writes_sidecar: bool = False) -> None:
    """Raise ParameterError when ``out`` (or, for a command that writes one, its JSON sidecar)
    is one of ``inputs`` or one of their sidecars: no command writes over what it reads."""
    from pathlib import Path

    from measure.audio_io import sidecar_path
    from measure.errors import ParameterError

    def files(p: Any) -> set[Path]:
        p = Path(p).resolve()
        return {p, sidecar_path(p).resolve()} if p.suffix.lower() != ".json" else {p}

    written = files(out) if writes_sidecar else {Path(out).resolve()}
    for inp in inputs:  # an input's sidecar counts where it exists
        if inp is not None and written & {f for f in files(inp)
                                          if f == Path(inp).resolve() or f.exists()}:
            raise ParameterError(f"{option} {out} would overwrite the input {inp} (or its "
                                 "sidecar); write to a new file")


def signed(v: float, decimals: int = 1) -> str:
    """``v`` with its sign at ``decimals`` places, never "-0.0" (a value that rounds to zero
    reads "+0.0").

    Examples
    --------
    >>> signed(-0.03), signed(22.94), signed(-1.25, 2)
    ('+0.0', '+22.9', '-1.25')
    """
    r = round(float(v), decimals) + 0.0  # -0.0 + 0.0 is +0.0
    return f"{r:+.{decimals}f}"


def plural(n: int, word: str, words: str | None = None) -> str:
    """``n`` with the word in the right number: "1 echo", "3 echoes".

    Examples
    --------
    >>> plural(1, "echo", "echoes"), plural(0, "band"), plural(3, "echo", "echoes")
    ('1 echo', '0 bands', '3 echoes')
    """
    return f"{n} {word if n == 1 else (words or word + 's')}"
