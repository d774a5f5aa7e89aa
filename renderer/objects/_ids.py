"""ADM identifiers (ITU-R BS.2076-2, the table of ID forms): checked with full-match patterns.

``yyyy`` is the type (0001 DirectSpeakers, 0002 Matrix, 0003 Objects, 0004 HOA,
0005 Binaural), ``xxxx`` the number within it; numbers 0001-0FFF are reserved for the
common definitions (ITU-R BS.2094), 1000-FFFF are the file's own. Hex digits may be
written in either case.
"""

from __future__ import annotations

import re

from ..errors import AdmError

__all__ = ["ID_FORMS", "TYPE_NAMES", "check_id", "is_common", "type_code"]

_H = "[0-9a-fA-F]"

#: element kind -> (pattern, the form written as the standard does)
ID_FORMS: dict[str, tuple[re.Pattern[str], str]] = {
    "audioProgramme": (re.compile(f"APR_{_H}{{4}}"), "APR_wwww"),
    "audioContent": (re.compile(f"ACO_{_H}{{4}}"), "ACO_wwww"),
    "audioObject": (re.compile(f"AO_{_H}{{4}}"), "AO_wwww"),
    "audioPackFormat": (re.compile(f"AP_{_H}{{8}}"), "AP_yyyyxxxx"),
    "audioChannelFormat": (re.compile(f"AC_{_H}{{8}}"), "AC_yyyyxxxx"),
    "audioBlockFormat": (re.compile(f"AB_{_H}{{8}}_{_H}{{8}}"), "AB_yyyyxxxx_zzzzzzzz"),
    "audioStreamFormat": (re.compile(f"AS_{_H}{{8}}"), "AS_yyyyxxxx"),
    "audioTrackFormat": (re.compile(f"AT_{_H}{{8}}_{_H}{{2}}"), "AT_yyyyxxxx_zz"),
    "audioTrackUID": (re.compile(f"ATU_{_H}{{8}}"), "ATU_xxxxxxxx"),
}

#: typeLabel -> typeDefinition (BS.2076-2, the table of typeDefinitions)
TYPE_NAMES: dict[str, str] = {
    "0001": "DirectSpeakers",
    "0002": "Matrix",
    "0003": "Objects",
    "0004": "HOA",
    "0005": "Binaural",
}


def check_id(kind: str, value: str, where: str) -> str:
    """``value``, hex digits in upper case, if it has the form of an ID of ``kind``.

    Raises :class:`AdmError` otherwise.

    >>> check_id("audioPackFormat", "AP_00031001", "an audioObject")
    'AP_00031001'
    """
    pattern, form = ID_FORMS[kind]
    if pattern.fullmatch(value) is None:
        raise AdmError(f"{where}: {value!r} is not an {kind} ID (the form is {form})")
    return value.upper()


def type_code(value: str) -> str:
    """The ``yyyy`` type of a pack, channel, stream, track or block format ID, upper case.

    >>> type_code("AC_00031001")
    '0003'
    """
    return value.split("_")[1][:4].upper()


def is_common(value: str) -> bool:
    """Whether a pack, channel, stream or track format ID is in the common range 0001-0FFF.

    >>> is_common("AP_00010002"), is_common("AP_00031001")
    (True, False)
    """
    number = int(value.split("_")[1][4:8], 16)
    return 0 < number < 0x1000
