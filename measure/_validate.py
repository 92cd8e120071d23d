"""Shared argument checks. Each raises :class:`ParameterError` with what, the rule, what to do."""

from __future__ import annotations

from typing import Any

import numpy as np

from measure.errors import ParameterError


def check_fs(fs: Any) -> int:
    """Return ``fs`` as a positive int, or raise.

    A sample rate must be a whole number of hertz; 44.1 kHz and 48 kHz are typical.
    """
    if isinstance(fs, bool) or not isinstance(fs, (int, np.integer, float, np.floating)):
        raise ParameterError(f"sample rate fs={fs!r} is not a number; give it in Hz, e.g. 48000")
    if not (fs > 0) or not np.isfinite(fs) or float(fs) != int(fs):
        raise ParameterError(
            f"sample rate fs={fs!r} must be a positive whole number of Hz; use e.g. 48000")
    return int(fs)


def check_positive(value: Any, name: str, *, unit: str = "") -> float:
    """Return ``value`` as a float if it is finite and > 0, else raise (NaN fails)."""
    try:
        v = float(value)
    except (TypeError, ValueError, OverflowError) as err:
        raise ParameterError(f"{name}={value!r} is not a number; give a positive value") from err
    if not (v > 0) or not np.isfinite(v):
        suffix = f" {unit}" if unit else ""
        raise ParameterError(f"{name}={value!r}{suffix} must be positive and finite; give a value > 0")
    return v


def check_nonnegative(value: Any, name: str, *, unit: str = "") -> float:
    """Return ``value`` as a float if it is finite and >= 0, else raise (NaN fails)."""
    try:
        v = float(value)
    except (TypeError, ValueError, OverflowError) as err:
        raise ParameterError(f"{name}={value!r} is not a number; give a value >= 0") from err
    if not (v >= 0) or not np.isfinite(v):
        suffix = f" {unit}" if unit else ""
        raise ParameterError(f"{name}={value!r}{suffix} must be >= 0 and finite; give a value >= 0")
    return v


def check_signal(x: Any, name: str = "signal", *, ndim: tuple[int, ...] = (1, 2)) -> np.ndarray:
    """Return ``x`` as a float64 array with time on the last axis; it must be finite.

    Raises
    ------
    ParameterError
        If ``x`` is empty, of the wrong number of dimensions, or holds NaN or Inf.
    """
    a = np.asarray(x)
    if a.dtype.kind not in "fiu":
        raise ParameterError(f"{name} has dtype {a.dtype}; give real-valued samples")
    a = a.astype(np.float64, copy=False)
    if a.ndim not in ndim:
        raise ParameterError(f"{name} has {a.ndim} dimensions; expected one of {ndim} with time last")
    if a.size == 0 or a.shape[-1] == 0:
        raise ParameterError(f"{name} is empty; give at least one sample")
    if not np.all(np.isfinite(a)):
        n_bad = int(np.count_nonzero(~np.isfinite(a)))
        raise ParameterError(
            f"{name} holds {n_bad} NaN or Inf samples; re-export or re-record the file")
    return a


def check_choice(value: Any, name: str, choices: tuple[str, ...]) -> str:
    """Return ``value`` if it is one of ``choices``, else raise listing them."""
    if value not in choices:
        raise ParameterError(f"{name}={value!r} is not one of {', '.join(choices)}; pick one of them")
    return value
