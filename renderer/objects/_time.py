"""ADM time values (ITU-R BS.2076-2): ``hh:mm:ss.zzzzz`` and ``hh:mm:ss.nnnnnSddddd``.

A time is read exactly, as a :class:`fractions.Fraction` of seconds. The decimal form
gives seconds with a decimal fraction (``00:00:01.50000`` is 1.5 s); the sample form added
in BS.2076-2 gives the fraction as ``n`` samples of a rate ``d`` (``00:00:01.00480S48000``
is 1 + 480/48000 s), which keeps sample-exact block edges at any rate.
"""

from __future__ import annotations

import re
from fractions import Fraction

from ..errors import AdmError

__all__ = ["format_time", "parse_time"]

_TIME = re.compile(r"(\d{1,3}):([0-5]\d):([0-5]\d)(?:\.(\d{1,12})(?:S(\d{1,12}))?)?")


def parse_time(text: str, what: str) -> Fraction:
    """Seconds of an ADM time value, exactly.

    Parameters
    ----------
    text
        The attribute's text, e.g. ``"00:00:02.50000"`` or ``"00:00:02.24000S48000"``.
    what
        What the value is, for the error message (e.g. ``"rtime of AB_00031001_00000001"``).

    Raises
    ------
    AdmError
        If the text is not such a time, is negative, or its sample fraction reaches a whole
        second or has a zero rate.

    Examples
    --------
    >>> parse_time("00:01:02.50000", "start")
    Fraction(125, 2)
    >>> parse_time("00:00:01.00480S48000", "rtime")
    Fraction(101, 100)
    """
    value = text.strip()
    match = _TIME.fullmatch(value)
    if match is None:
        if value.startswith("-"):
            raise AdmError(f"{what}: {text!r} is negative; ADM times and durations are >= 0")
        raise AdmError(
            f"{what}: {text!r} is not an ADM time (hh:mm:ss.zzzzz, or hh:mm:ss.nnnnnSddddd "
            "with n samples of a rate d)"
        )
    hours, minutes, seconds, frac, rate = match.groups()
    # One Fraction made from whole integers (a master may hold tens of thousands of block
    # times; adding Fractions made each one three times as slow, measured).
    whole = int(hours) * 3600 + int(minutes) * 60 + int(seconds)
    if frac is None:
        return Fraction(whole)
    if rate is None:
        den = 10 ** len(frac)
        return Fraction(whole * den + int(frac), den)
    samples, per_second = int(frac), int(rate)
    if per_second == 0:
        raise AdmError(f"{what}: {text!r} gives a sample fraction of a rate of 0")
    if samples >= per_second:
        raise AdmError(
            f"{what}: {text!r} gives {samples} samples of a rate of {per_second}: "
            "the fraction must be less than a second"
        )
    return Fraction(whole * per_second + samples, per_second)


def format_time(seconds: Fraction) -> str:
    """``seconds`` in the decimal form, to five decimals (for summaries and messages).

    >>> format_time(Fraction(125, 2))
    '00:01:02.50000'
    """
    hundred_thousandths = round(seconds * 100_000)
    whole, frac = divmod(hundred_thousandths, 100_000)
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours:02d}:{minutes:02d}:{secs:02d}.{frac:05d}"
