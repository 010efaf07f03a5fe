"""Argument checks shared by every ``core`` module.

All raise :class:`ValueError` (or a subclass) with the parameter name, the allowed
range with its unit and the value received, e.g. ``b must be in [0, 2], got 2.5``.
"""

from __future__ import annotations

import math
import warnings
from typing import Any

import numpy as np


class DepletionDeskWarning(UserWarning):
    """Base class of the warnings this project raises."""


class OutOfRangeWarning(DepletionDeskWarning):
    """A correlation was evaluated outside its published data range."""


class InputError(ValueError):
    """A user input (file, option, override) cannot be used; message says why."""


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    return repr(value) if isinstance(value, str) else str(value)


def check_finite(name: str, value: Any) -> np.ndarray:
    """Return ``value`` as a float array; raise if any element is NaN or infinite."""
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite, got {_fmt(value) if arr.ndim == 0 else 'non-finite values'}")
    return arr


def check_range(
    name: str,
    value: Any,
    lo: float | None = None,
    hi: float | None = None,
    *,
    unit: str = "",
    lo_open: bool = False,
    hi_open: bool = False,
) -> np.ndarray:
    """Check ``lo <= value <= hi`` elementwise (open ends when asked); return a float array.

    The message reads ``name must be in [lo, hi] unit, got value``.
    """
    arr = check_finite(name, value)
    bad = np.zeros(arr.shape, dtype=bool)
    if lo is not None:
        bad |= (arr <= lo) if lo_open else (arr < lo)
    if hi is not None:
        bad |= (arr >= hi) if hi_open else (arr > hi)
    if np.any(bad):
        left = "(" if lo_open else "["
        right = ")" if hi_open else "]"
        lo_s = "-inf" if lo is None else _fmt(float(lo))
        hi_s = "inf" if hi is None else _fmt(float(hi))
        got = _fmt(float(arr)) if arr.ndim == 0 else _fmt(float(arr[bad].flat[0]))
        u = f" {unit}" if unit else ""
        raise ValueError(f"{name} must be in {left}{lo_s}, {hi_s}{right}{u}, got {got}")
    return arr


def check_positive(name: str, value: Any, *, unit: str = "") -> np.ndarray:
    """Check ``value > 0`` elementwise."""
    return check_range(name, value, 0.0, None, unit=unit, lo_open=True)


def warn_outside(name: str, value: Any, lo: float, hi: float, *, unit: str, source: str) -> None:
    """Warn (do not raise) when ``value`` leaves a correlation's published range."""
    arr = np.asarray(value, dtype=float)
    finite = arr[np.isfinite(arr)]
    if finite.size and (finite.min() < lo or finite.max() > hi):
        warnings.warn(
            f"{name} outside the range of {source} [{_fmt(lo)}, {_fmt(hi)}] {unit}: "
            f"got {_fmt(float(finite.min()))} to {_fmt(float(finite.max()))}",
            OutOfRangeWarning,
            stacklevel=3,
        )


def is_finite_number(x: Any) -> bool:
    """True for a real finite number (bools excluded)."""
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool) and math.isfinite(float(x))
