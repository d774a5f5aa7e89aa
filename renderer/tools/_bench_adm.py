"""The benchmark's ADM master: a 7.1.4 bed and moving objects, written as a BW64 or RF64
broadcast WAV with ``axml`` and ``chna`` (ITU-R BS.2076-2, BS.2088) by the renderer's own
writer (:mod:`earfold.renderer.objects.writer`).

The bed is the 12 loudspeakers of ITU-R BS.2051 system J (4+7+0) as DirectSpeakers
channels defined in the file (labels and positions), on tracks 1-12. Each object circles
the listener on a track of its own: object ``k`` of ``K`` starts at azimuth ``360 k / K``,
turns at ``20 + 5 k`` degrees a second (the odd ones clockwise) at one of four elevations,
with a block every :data:`BLOCK_SECONDS` interpolated across its duration (no
``jumpPosition``, BS.2076-2 section 9). Every track holds white noise at -20 dBFS RMS,
like the other cases' stems: nothing is silent, so nothing can be skipped.
"""

from __future__ import annotations

import os
from collections.abc import Iterator

import numpy as np
from numpy.typing import NDArray

__all__ = ["ADM_BED", "BLOCK_SECONDS", "adm_master_xml", "make_adm_master"]

#: The bed: BS.2051 system J (4+7+0) labels with azimuth and elevation in degrees
#: (positive azimuth to the left), as the 7.1.4 layout places them.
ADM_BED: tuple[tuple[str, float, float], ...] = (
    ("M+030", 30.0, 0.0),
    ("M-030", -30.0, 0.0),
    ("M+000", 0.0, 0.0),
    ("LFE1", 0.0, -30.0),
    ("M+135", 135.0, 0.0),
    ("M-135", -135.0, 0.0),
    ("M+090", 90.0, 0.0),
    ("M-090", -90.0, 0.0),
    ("U+045", 45.0, 30.0),
    ("U-045", -45.0, 30.0),
    ("U+135", 135.0, 30.0),
    ("U-135", -135.0, 30.0),
)

#: Seconds between an object's blocks (positions).
BLOCK_SECONDS = 0.5

_ELEVATIONS = (0.0, 20.0, -10.0, 40.0)


def _uid(track: int) -> str:
    return f"ATU_{track:08X}"


def adm_master_xml(seconds: float, objects: int) -> tuple[str, bytes]:
    """The ``axml`` text and ``chna`` body of the benchmark master (tracks: the bed,
    then one per object)."""
    from ..objects.writer import (
        audio_object,
        channel,
        chna_body,
        content,
        document,
        object_block,
        pack,
        programme,
        speaker_block,
        stream_and_track,
    )
    from ..objects.writer import seconds as timecode

    parts: list[str] = []
    entries: list[tuple[int, str, str, str]] = []
    bed_pack = "AP_00011001"
    bed_channels = [f"AC_0001{0x1001 + i:04X}" for i in range(len(ADM_BED))]
    for i, ((label, az, el), ident) in enumerate(zip(ADM_BED, bed_channels)):
        parts.append(channel(ident, "DirectSpeakers", [speaker_block(ident, label, az, el)]))
        parts.append(stream_and_track(ident, bed_pack))
        entries.append((i + 1, _uid(i + 1), f"AT_{ident[3:]}_01", bed_pack))
    parts.append(pack(bed_pack, "DirectSpeakers", bed_channels))
    object_ids = ["AO_1001"]
    parts.append(
        audio_object(
            "AO_1001",
            "Bed 7.1.4",
            packs=[bed_pack],
            uids=[_uid(i + 1) for i in range(len(ADM_BED))],
        )
    )
    count = max(1, int(np.ceil(seconds / BLOCK_SECONDS)))
    for k in range(objects):
        track = len(ADM_BED) + k + 1
        ident = f"AC_0003{0x1001 + k:04X}"
        pack_id = f"AP_0003{0x1001 + k:04X}"
        speed = (20.0 + 5.0 * k) * (-1.0 if k % 2 else 1.0)
        start_az = 360.0 * k / objects
        el = _ELEVATIONS[k % len(_ELEVATIONS)]

        def az_at(t: float, a0: float = start_az, w: float = speed) -> float:
            return float((a0 + w * t + 180.0) % 360.0 - 180.0)

        # The first block holds the start position; each later one is reached at its end.
        start = timecode(0.0)
        blocks = [object_block(ident, 1, rtime=start, duration=start, az=az_at(0.0), el=el)]
        for b in range(count):
            t0 = b * BLOCK_SECONDS
            t1 = min((b + 1) * BLOCK_SECONDS, seconds)
            blocks.append(
                object_block(
                    ident,
                    b + 2,
                    rtime=timecode(t0),
                    duration=timecode(t1 - t0),
                    az=round(az_at(t1), 4),
                    el=el,
                )
            )
        parts.append(channel(ident, "Objects", blocks))
        parts.append(pack(pack_id, "Objects", [ident]))
        parts.append(stream_and_track(ident, pack_id))
        object_ids.append(f"AO_{0x1002 + k:04X}")
        parts.append(
            audio_object(object_ids[-1], f"Object {k + 1}", packs=[pack_id], uids=[_uid(track)])
        )
        entries.append((track, _uid(track), f"AT_{ident[3:]}_01", pack_id))
    parts.insert(0, content("ACO_1001", "Everything", object_ids))
    parts.insert(0, programme("APR_1001", "Bench", ["ACO_1001"]))
    xml = document(*parts)
    # An even length: libsndfile (1.2.2, measured) reads an RF64 file whose chunk before
    # the audio has an odd size, and so a pad byte, as having no data chunk.
    return xml + "\n" * (len(xml.encode()) % 2), chna_body(entries)


def make_adm_master(
    path: str | os.PathLike[str],
    seconds: float,
    *,
    objects: int = 16,
    samplerate: int = 48000,
    seed: int = 1,
    container: str = "RF64",
) -> None:
    """Write the benchmark master: a 7.1.4 bed and ``objects`` moving objects, white noise
    at -20 dBFS RMS on every track, PCM_24, in blocks (RF64 by default, which the I/O floor
    script's audio library reads as it is; ``BW64`` writes BS.2088's header)."""
    from ..objects.writer import write_master

    xml, chna = adm_master_xml(seconds, objects)
    channels = len(ADM_BED) + objects
    frames = int(seconds * samplerate)
    rng = np.random.default_rng(seed)
    step = 1 << 16

    def blocks() -> Iterator[NDArray[np.float32]]:
        for start in range(0, frames, step):
            n = min(step, frames - start)
            yield (0.1 * rng.standard_normal((n, channels))).astype(np.float32)

    write_master(
        path,
        audio=blocks(),
        frames=frames,
        channels=channels,
        rate=samplerate,
        chna=chna,
        axml=xml,
        container=container,
        subtype="PCM_24",
    )
