"""Common definitions (ITU-R BS.2094) that a file may reference without defining them.

SOURCE AND TRUST. Every entry below is written from memory of ITU-R BS.2094-1 "Common
definitions for the Audio Definition Model" and ITU-R BS.2051 "Advanced sound system for
programme production"; none was checked against the published tables while writing. The
speaker labels and their nominal directions (BS.2051 names: layer ``M`` 0 degrees,
``U`` 30, ``T`` 90, ``B`` -30; the number the azimuth, counter-clockwise) are the part
held with most confidence, since the label states the direction. The numbering of the
channel formats 0x15-0x17 (bottom layer) and of the HOA packs is held with least
confidence and marked ``uncertain`` below. An ID not listed here is reported as an unknown
reference, never guessed.

Track and stream formats follow the common definitions' numbering: ``AT_yyyyxxxx_01`` and
``AS_yyyyxxxx`` carry the PCM of channel format ``AC_yyyyxxxx`` (from memory).
"""

from __future__ import annotations

__all__ = [
    "COMMON_DIRECT_SPEAKERS",
    "COMMON_HOA_PACKS",
    "BS2051_SYSTEMS",
    "COMMON_SPEAKER_PACKS",
    "LFE_LOW_PASS_HZ",
    "UNCERTAIN",
]

LFE_LOW_PASS_HZ = 200.0
"""The ``frequency`` low-pass the common LFE channel formats carry (from memory)."""

#: DirectSpeakers channel formats: ID -> (name, speaker label, azimuth, elevation).
#: Azimuth counter-clockwise from the front, positive to the left (BS.2051, BS.2076).
COMMON_DIRECT_SPEAKERS: dict[str, tuple[str, str, float, float]] = {
    "AC_00010001": ("FrontLeft", "M+030", 30.0, 0.0),
    "AC_00010002": ("FrontRight", "M-030", -30.0, 0.0),
    "AC_00010003": ("FrontCentre", "M+000", 0.0, 0.0),
    "AC_00010004": ("LowFrequencyEffects", "LFE", 0.0, -30.0),
    "AC_00010005": ("SurroundLeft", "M+110", 110.0, 0.0),
    "AC_00010006": ("SurroundRight", "M-110", -110.0, 0.0),
    "AC_00010007": ("FrontLeftOfCentre", "M+022", 22.5, 0.0),
    "AC_00010008": ("FrontRightOfCentre", "M-022", -22.5, 0.0),
    "AC_00010009": ("BackCentre", "M+180", 180.0, 0.0),
    "AC_0001000A": ("SideLeft", "M+090", 90.0, 0.0),
    "AC_0001000B": ("SideRight", "M-090", -90.0, 0.0),
    "AC_0001000C": ("TopCentre", "T+000", 0.0, 90.0),
    "AC_0001000D": ("TopFrontLeft", "U+030", 30.0, 30.0),
    "AC_0001000E": ("TopFrontCentre", "U+000", 0.0, 30.0),
    "AC_0001000F": ("TopFrontRight", "U-030", -30.0, 30.0),
    "AC_00010010": ("TopBackLeft", "U+110", 110.0, 30.0),
    "AC_00010011": ("TopBackCentre", "U+180", 180.0, 30.0),
    "AC_00010012": ("TopBackRight", "U-110", -110.0, 30.0),
    "AC_00010013": ("TopSideLeft", "U+090", 90.0, 30.0),
    "AC_00010014": ("TopSideRight", "U-090", -90.0, 30.0),
    "AC_00010015": ("BottomFrontCentre", "B+000", 0.0, -30.0),
    "AC_00010016": ("BottomFrontLeft", "B+030", 30.0, -30.0),
    "AC_00010017": ("BottomFrontRight", "B-030", -30.0, -30.0),
    "AC_00010018": ("FrontLeftWide", "M+060", 60.0, 0.0),
    "AC_00010019": ("FrontRightWide", "M-060", -60.0, 0.0),
}

#: DirectSpeakers packs: ID -> (name, BS.2051 system, channel format numbers in order).
COMMON_SPEAKER_PACKS: dict[str, tuple[str, str, tuple[int, ...]]] = {
    "AP_00010001": ("mono", "0+1+0", (0x03,)),
    "AP_00010002": ("stereo", "A 0+2+0", (0x01, 0x02)),
    "AP_00010003": ("5.1", "B 0+5+0", (0x01, 0x02, 0x03, 0x04, 0x05, 0x06)),
    "AP_00010004": ("5.1+2H", "C 2+5+0", (0x01, 0x02, 0x03, 0x04, 0x05, 0x06, 0x0D, 0x0F)),
    "AP_00010005": (
        "5.1+4H",
        "D 4+5+0",
        (0x01, 0x02, 0x03, 0x04, 0x05, 0x06, 0x0D, 0x0F, 0x10, 0x12),
    ),
}

#: HOA packs: ID -> (name, order, normalisation). The channels of an order-N pack are the
#: common HOA channel formats AC_0004xxxx with xxxx = ACN + 1 for ACN 0 .. (N+1)^2 - 1.
COMMON_HOA_PACKS: dict[str, tuple[str, int, str]] = {
    "AP_00040001": ("HOA order 1, SN3D", 1, "SN3D"),
    "AP_00040002": ("HOA order 2, SN3D", 2, "SN3D"),
    "AP_00040003": ("HOA order 3, SN3D", 3, "SN3D"),
}

#: IDs whose numbering is held with least confidence (see the module's note).
UNCERTAIN: frozenset[str] = frozenset(
    {
        "AC_00010015",
        "AC_00010016",
        "AC_00010017",
        "AC_00010018",
        "AC_00010019",
        "AP_00010004",
        "AP_00010005",
        "AP_00040001",
        "AP_00040002",
        "AP_00040003",
    }
)

#: ITU-R BS.2051 systems A-J as speaker labels (from memory of the Recommendation's
#: tables; the order is the Recommendation's listing as remembered, not a channel order).
BS2051_SYSTEMS: dict[str, tuple[str, ...]] = {
    "A": ("M+030", "M-030"),
    "B": ("M+030", "M-030", "M+000", "LFE1", "M+110", "M-110"),
    "C": ("M+030", "M-030", "M+000", "LFE1", "M+110", "M-110", "U+030", "U-030"),
    "D": (
        "M+030",
        "M-030",
        "M+000",
        "LFE1",
        "M+110",
        "M-110",
        "U+030",
        "U-030",
        "U+110",
        "U-110",
    ),
    "E": (
        "M+030",
        "M-030",
        "M+000",
        "LFE1",
        "M+110",
        "M-110",
        "U+030",
        "U-030",
        "U+110",
        "U-110",
        "B+000",
    ),
    "F": (
        "M+000",
        "M+030",
        "M-030",
        "U+045",
        "U-045",
        "M+090",
        "M-090",
        "M+135",
        "M-135",
        "UH+180",
        "LFE1",
        "LFE2",
    ),
    "G": (
        "M+030",
        "M-030",
        "M+000",
        "LFE1",
        "M+090",
        "M-090",
        "M+135",
        "M-135",
        "U+045",
        "U-045",
        "U+135",
        "U-135",
        "M+SC",
        "M-SC",
    ),
    "H": (
        "M+060",
        "M-060",
        "M+000",
        "LFE1",
        "M+135",
        "M-135",
        "M+030",
        "M-030",
        "M+180",
        "LFE2",
        "M+090",
        "M-090",
        "U+045",
        "U-045",
        "U+000",
        "T+000",
        "U+135",
        "U-135",
        "U+090",
        "U-090",
        "U+180",
        "B+000",
        "B+045",
        "B-045",
    ),
    "I": ("M+030", "M-030", "M+000", "LFE1", "M+090", "M-090", "M+135", "M-135"),
    "J": (
        "M+030",
        "M-030",
        "M+000",
        "LFE1",
        "M+090",
        "M-090",
        "M+135",
        "M-135",
        "U+045",
        "U-045",
        "U+135",
        "U-135",
    ),
}
