"""What a delivery aims at: the loudness target and the true-peak ceiling, read and checked."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from ..defaults import LOUDNESS_RANGE_LUFS, TRUE_PEAK_RANGE_DBTP
from ..errors import DeliveryError, shown

__all__ = ["MATCH", "DeliveryOptions", "parse_loudness", "parse_true_peak"]

MATCH = "match"
"""The loudness target that keeps the input stem's programme loudness."""

_OFF_WORDS = ("none", "off")
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+))\s*([a-z]*)\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class DeliveryOptions:
    """How a render is delivered.

    Attributes
    ----------
    loudness : float, "match" or None
        Integrated loudness target in LUFS (``-70 < x < 0``); ``"match"`` keeps the input
        stem's programme loudness; ``None`` applies no gain.
    true_peak : float or None
        Limiter ceiling in dBTP (``-30 <= x <= 0``); ``None`` turns the limiter off (the
        report then says so, and warns if the output exceeds 0 dBTP).
    """

    loudness: float | str | None = MATCH
    true_peak: float | None = -1.0

    def __post_init__(self) -> None:
        loud = self.loudness
        if isinstance(loud, str):
            if loud != MATCH:
                raise DeliveryError(
                    f"loudness must be a LUFS number, {MATCH!r} or None, "
                    f"not {shown(loud)}; use parse_loudness() for text"
                )
        elif loud is not None:
            object.__setattr__(
                self,
                "loudness",
                _check_number(
                    "loudness target", loud, LOUDNESS_RANGE_LUFS, "LUFS", open_interval=True
                ),
            )
        if self.true_peak is not None:
            object.__setattr__(
                self,
                "true_peak",
                _check_number("true-peak ceiling", self.true_peak, TRUE_PEAK_RANGE_DBTP, "dBTP"),
            )


def parse_loudness(value: str) -> float | str | None:
    """Read a loudness target from CLI or HTTP text.

    Parameters
    ----------
    value : str
        ``"-23"`` (optionally with ``LUFS`` or ``LKFS``), ``"match"``, or ``"none"`` /
        ``"off"``; case and surrounding spaces do not matter.

    Returns
    -------
    float, "match" or None

    Raises
    ------
    DeliveryError
        Naming the value and the choices.
    """
    text = value.strip().lower() if isinstance(value, str) else None
    if text == MATCH:
        return MATCH
    if text in _OFF_WORDS:
        return None
    number = _parse_number(value, ("", "lufs", "lkfs"))
    if number is None:
        raise DeliveryError(
            f"invalid loudness target {shown(value)}; give a level in LUFS between "
            f"{LOUDNESS_RANGE_LUFS[0]:g} and {LOUDNESS_RANGE_LUFS[1]:g} (e.g. -23), "
            "'match' to keep the input's loudness, or 'none' for no gain"
        )
    return _check_number(
        "loudness target", number, LOUDNESS_RANGE_LUFS, "LUFS", open_interval=True, text=value
    )


def parse_true_peak(value: str) -> float | None:
    """Read a true-peak ceiling from CLI or HTTP text.

    Parameters
    ----------
    value : str
        ``"-1"`` (optionally with ``dBTP``), or ``"off"`` / ``"none"`` for no limiter.

    Returns
    -------
    float or None

    Raises
    ------
    DeliveryError
        Naming the value and the choices.
    """
    text = value.strip().lower() if isinstance(value, str) else None
    if text in _OFF_WORDS:
        return None
    number = _parse_number(value, ("", "dbtp"))
    if number is None:
        raise DeliveryError(
            f"invalid true-peak ceiling {shown(value)}; give a level in dBTP from "
            f"{TRUE_PEAK_RANGE_DBTP[0]:g} to {TRUE_PEAK_RANGE_DBTP[1]:g} (e.g. -1), "
            "or 'off' for no limiter"
        )
    return _check_number("true-peak ceiling", number, TRUE_PEAK_RANGE_DBTP, "dBTP", text=value)


def _parse_number(value: object, units: tuple[str, ...]) -> float | None:
    if not isinstance(value, str):
        return None
    match = _NUMBER.match(value)
    if match is None or match.group(2).lower() not in units:
        return None
    return float(match.group(1))


def _check_number(
    what: str,
    value: object,
    bounds: tuple[float, float],
    unit: str,
    *,
    open_interval: bool = False,
    text: object = None,
) -> float:
    lo, hi = bounds
    text = value if text is None else text
    if (
        isinstance(value, bool)
        or not isinstance(value, (int, float, np.number))
        or not math.isfinite(float(value))
    ):
        raise DeliveryError(f"invalid {what} {shown(text)}; expected a number of {unit}")
    v = float(value)
    inside = lo < v < hi if open_interval else lo <= v <= hi
    if not inside:
        interval = f"between {lo:g} and {hi:g}" if open_interval else f"from {lo:g} to {hi:g}"
        raise DeliveryError(f"{what} {shown(text)} is out of range; choose {interval} {unit}")
    return v
