"""ADM masters for the service and browser tests, written by the renderer tests' generator
(tests/renderer/adm_factory.py, after ITU-R BS.2076-2 and BS.2088): a 5.1 bed from the
common definitions (ITU-R BS.2094 AP_00010003), an object circling overhead, one resting
at the right, and two programmes (the second without the resting object)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tests.renderer.adm_factory import (
    audio_object,
    channel,
    chna_body,
    content,
    document,
    object_block,
    pack,
    programme,
    seconds,
    stream_and_track,
    uid,
    write_master,
)

FS = 48000

#: The objects of :func:`write_harbour_master`: name, track (1-based).
OBJECTS = {"Gull": 7, "Bell": 8}


def harbour_xml(duration_s: float) -> str:
    """The axml of :func:`write_harbour_master`."""
    bed = [uid(k) for k in range(1, 7)]
    quarter = duration_s / 4
    gull = [  # from the front round the left to the back and the right, rising to 30 deg
        object_block("AC_00031001", k + 1, rtime=seconds(k * quarter), duration=seconds(quarter),
                     az=az, el=el)
        for k, (az, el) in enumerate([(0.0, 0.0), (90.0, 10.0), (180.0, 20.0), (-90.0, 30.0)])
    ]  # fmt: skip
    return document(
        programme("APR_1001", "Harbour", ["ACO_1001"]),
        programme("APR_1002", "Harbour without bell", ["ACO_1002"]),
        content("ACO_1001", "All", ["AO_1001", "AO_1002", "AO_1003"]),
        content("ACO_1002", "No bell", ["AO_1001", "AO_1002"]),
        audio_object("AO_1001", "Bed", packs=["AP_00010003"], uids=bed),
        audio_object("AO_1002", "Gull", packs=["AP_00031001"], uids=[uid(7)]),
        audio_object("AO_1003", "Bell", packs=["AP_00031002"], uids=[uid(8)]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        pack("AP_00031002", "Objects", ["AC_00031002"]),
        channel("AC_00031001", "Objects", gull),
        channel("AC_00031002", "Objects", [object_block("AC_00031002", 1, az=-90.0, el=0.0)]),
        stream_and_track("AC_00031001", "AP_00031001"),
        stream_and_track("AC_00031002", "AP_00031002"),
    )


def write_harbour_master(path: Path, duration_s: float = 0.5, seed: int = 2) -> Path:
    """An 8-track ADM master (tracks 1-6 a 5.1 bed, 7 Gull, 8 Bell) of quiet noise."""
    frames = int(duration_s * FS)
    audio = 0.02 * np.random.default_rng(seed).standard_normal((frames, 8))
    entries = [(k, uid(k), f"AT_0001000{k}_01", "AP_00010003") for k in range(1, 7)]
    entries += [(7, uid(7), "AT_00031001_01", "AP_00031001")]
    entries += [(8, uid(8), "AT_00031002_01", "AP_00031002")]
    return write_master(
        path,
        audio=audio.astype(np.float32),
        rate=FS,
        chna=chna_body(entries),
        axml=harbour_xml(duration_s),
    )
