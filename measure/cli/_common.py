"""Small helpers shared by the subcommand modules (argument types, output)."""

from __future__ import annotations

import argparse
import math
import sys
from typing import Any


def finite_float(text: str) -> float:
    """argparse type: a finite number (``float`` alone accepts "nan" and "inf", which no option
    of this tool can use; a NaN temperature was stored in a take's sidecar as null)."""
    try:
        v = float(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from err
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number; give a number")
    return v


def add_condition_arguments(p: Any) -> None:
    """The conditions of a take, kept in its sidecar: --distance, --angle, --temperature,
    --humidity, --notes, --label (capture and import)."""
    p.add_argument("--distance", type=positive_float, metavar="M",
                   help="source-microphone distance in m (> 0)")
    p.add_argument("--angle", type=finite_float, metavar="DEG",
                   help="angle of the microphone off the source's axis, in degrees")
    p.add_argument("--temperature", type=finite_float, metavar="C",
                   help="air temperature in deg C")
    p.add_argument("--humidity", type=finite_float, metavar="PERCENT",
                   help="relative humidity in %% (0..100)")
    p.add_argument("--notes", metavar="TEXT", help="free text kept in the sidecar")
    p.add_argument("--label", action="append", default=[], metavar="TEXT",
                   help="extra label kept in the sidecar (repeatable)")


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0."""
    v = finite_float(text)
    if not (v > 0):
        raise argparse.ArgumentTypeError(f"{text!r} must be positive")
    return v


#: ISO 9613-1:1993 computes the absorption of sound by the air for -20..+50 °C and
#: 10..100 % relative humidity (clause 1 and the ranges of Table 1; from memory). A value
#: outside it is kept, with a warning that the air absorption computed from it is an
#: extrapolation.
ISO9613_TEMPERATURE_C = (-20.0, 50.0)
ISO9613_HUMIDITY_PERCENT = (10.0, 100.0)
#: Air temperatures a room measurement can meet, as a room description accepts them
#: (measure.predict.RoomDescription); outside them the value is a typo, refused.
TEMPERATURE_LIMITS_C = (-50.0, 60.0)


def check_air(temperature_c: float | None, humidity_percent: float | None) -> list[str]:
    """Refuse an impossible air temperature or relative humidity (ParameterError); return
    warnings for values outside the range ISO 9613-1 covers. None means not given."""
    from measure.errors import ParameterError

    warnings: list[str] = []
    if humidity_percent is not None:
        if not 0.0 <= humidity_percent <= 100.0:
            raise ParameterError(
                f"--humidity {humidity_percent:g} is not a relative humidity: it lies in "
                "0..100 %; give the reading of the hygrometer in %")
        lo, hi = ISO9613_HUMIDITY_PERCENT
        if not lo <= humidity_percent <= hi:
            warnings.append(
                f"--humidity {humidity_percent:g} % is outside the {lo:g}..{hi:g} % that "
                "ISO 9613-1 covers: air absorption computed from it is an extrapolation")
    if temperature_c is not None:
        lo, hi = TEMPERATURE_LIMITS_C
        if not lo <= temperature_c <= hi:
            raise ParameterError(
                f"--temperature {temperature_c:g} °C is outside {lo:g}..{hi:g} °C; give the "
                "air temperature in degrees Celsius")
        lo, hi = ISO9613_TEMPERATURE_C
        if not lo <= temperature_c <= hi:
            warnings.append(
                f"--temperature {temperature_c:g} °C is outside the {lo:g}..{hi:g} °C that "
                "ISO 9613-1 covers: air absorption computed from it is an extrapolation")
    return warnings


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
    """Raise ParameterError when ``out`` (or, for a command that writes one, its JSON sidecar;
    or a stale sidecar that writing ``out`` removes) is one of ``inputs`` or one of their
    sidecars: no command writes over what it reads."""
    from pathlib import Path

    from measure.audio_io import names_its_wav, sidecar_path
    from measure.errors import ParameterError

    def files(p: Any) -> set[Path]:
        p = Path(p).resolve()
        return {p, sidecar_path(p).resolve()} if p.suffix.lower() != ".json" else {p}

    written = files(out) if writes_sidecar or names_its_wav(sidecar_path(out)) \
        else {Path(out).resolve()}
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
