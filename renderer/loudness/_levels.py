"""Level conversions, argument checks and value display shared by the loudness modules."""

from __future__ import annotations

import math
from typing import overload

import numpy as np
from numpy.typing import NDArray

from ..errors import AudioError, shown

__all__ = [
    "amplitude_db",
    "check_channels",
    "check_range",
    "finite_or_none",
    "power_lufs",
    "round_or_none",
]


@overload
def power_lufs(power: float) -> float: ...
@overload
def power_lufs(power: NDArray[np.float64]) -> NDArray[np.float64]: ...
def power_lufs(power: NDArray[np.float64] | float) -> NDArray[np.float64] | float:
    """BS.1770 loudness of a K-weighted mean square (minus infinity for 0)."""
    with np.errstate(divide="ignore"):
        out: NDArray[np.float64] | float = -0.691 + 10.0 * np.log10(power)
    return out


def amplitude_db(value: float) -> float:
    """A linear magnitude in dB (minus infinity for 0)."""
    return 20.0 * math.log10(value) if value > 0 else -math.inf


def finite_or_none(value: float) -> float | None:
    """``value``, or None where it is infinite (JSON carries no infinity)."""
    return value if math.isfinite(value) else None


def round_or_none(value: float | None, digits: int = 2) -> float | None:
    """``value`` rounded, None kept."""
    return None if value is None else round(float(value), digits)


def check_channels(channels: object) -> int:
    """A channel count as an ``int``; :class:`AudioError` unless a positive integer."""
    if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) or channels < 1:
        raise AudioError(f"channels must be a positive integer, not {shown(channels)}")
    return int(channels)


def check_range(name: str, value: object, lo: float, hi: float, unit: str) -> None:
    """:class:`AudioError` unless ``value`` is a finite number from ``lo`` to ``hi``."""
    if (
        isinstance(value, bool)
        or not isinstance(value, (int, float, np.number))
        or not math.isfinite(float(value))
        or not lo <= float(value) <= hi
    ):
        raise AudioError(
            f"{name} must be a number from {lo:g} to {hi:g} {unit}, not {shown(value)}"
        )
