"""Common definitions (ITU-R BS.2094) as model objects, from the table in ``_common_data``."""

from __future__ import annotations

from ._common_data import (
    COMMON_DIRECT_SPEAKERS,
    COMMON_HOA_PACKS,
    COMMON_SPEAKER_PACKS,
    LFE_LOW_PASS_HZ,
)
from ._model import ChannelFormat, HoaBlock, PackFormat, SpeakerBlock

__all__ = ["common_channel", "common_pack", "common_track_channel"]

_HOA_CHANNELS = 16  # ACN 0-15: up to order 3


def common_channel(channel_id: str) -> ChannelFormat | None:
    """The common audioChannelFormat ``channel_id``, or None if the table lacks it."""
    key = "AC_" + channel_id[3:].upper()
    if key in COMMON_DIRECT_SPEAKERS:
        name, label, azimuth, elevation = COMMON_DIRECT_SPEAKERS[key]
        block = SpeakerBlock(
            f"AB_{key[3:]}_00000001", None, None, (label,), False, (azimuth, elevation, 1.0)
        )
        low_pass = LFE_LOW_PASS_HZ if label.startswith("LFE") else None
        return ChannelFormat(key, name, "DirectSpeakers", (block,), low_pass, common=True)
    if key.startswith("AC_0004"):
        acn = int(key[7:], 16) - 1
        if 0 <= acn < _HOA_CHANNELS:
            order = int(acn**0.5)
            degree = acn - order * order - order
            harmonic = HoaBlock(f"AB_{key[3:]}_00000001", order, degree, None, None, None)
            return ChannelFormat(key, f"ACN{acn}", "HOA", (harmonic,), None, common=True)
    return None


def common_pack(pack_id: str) -> PackFormat | None:
    """The common audioPackFormat ``pack_id``, or None if the table lacks it."""
    key = "AP_" + pack_id[3:].upper()
    if key in COMMON_SPEAKER_PACKS:
        name, _system, numbers = COMMON_SPEAKER_PACKS[key]
        channels = tuple(f"AC_0001{n:04X}" for n in numbers)
        return PackFormat(key, name, "DirectSpeakers", channels, (), common=True)
    if key in COMMON_HOA_PACKS:
        name, order, norm = COMMON_HOA_PACKS[key]
        channels = tuple(f"AC_0004{acn + 1:04X}" for acn in range((order + 1) ** 2))
        return PackFormat(key, name, "HOA", channels, (), normalization=norm, common=True)
    return None


def common_track_channel(track_id: str) -> str | None:
    """The channel format a common ``AT_yyyyxxxx_01`` carries (``AC_yyyyxxxx``), or None."""
    head, _, tail = track_id.rpartition("_")
    if tail != "01":
        return None
    return "AC_" + head[3:].upper()
