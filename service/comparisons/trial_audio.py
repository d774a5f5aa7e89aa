"""The bytes of one trial's audio: the variant's level-matched file, with a dither of its own.

Every label of every trial has its own random token (:mod:`.assignment`). Were its audio
the variant's file as built, all trials of a variant would be one byte stream, and a
hash of the downloads would tell the variants apart (and, in ABX, which of A or B is
X) without listening. So each answer carries a fresh triangular (TPDF) dither of one
least significant bit, drawn from a generator seeded by the token:

* no two tokens give the same bytes (a 15 s stereo excerpt has ~1.4 million samples;
  two draws agree everywhere with probability ~0.6 ** 1.4e6);
* one token always gives the same bytes (a download resumed or repeated is no tell);
* the header and the length are untouched, and the level moves by far less than
  0.01 LU: the noise is one 24-bit step (about -144 dBFS), well under the excerpt.

It is done when the audio is asked for, not at build time: a session of 100 ABX trials
would otherwise store 300 copies of its excerpt, while the dither of a 15 s 24-bit
excerpt takes some tens of milliseconds.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np

__all__ = ["TrialAudioError", "dithered", "trial_bytes"]

#: Bits per sample of the trial files (the builder writes 24-bit PCM WAV).
_BITS = 24

#: WAVE format tags of integer PCM: plain, and WAVE_FORMAT_EXTENSIBLE.
_PCM_TAGS = (0x0001, 0xFFFE)


class TrialAudioError(ValueError):
    """The file is not a 24-bit PCM WAV as the builder writes them."""


def _data_chunk(data: bytes) -> tuple[int, int]:
    """Offset and size of the ``data`` chunk's samples; checks the format is 24-bit PCM."""
    if len(data) < 12 or data[:4] != b"RIFF" or data[8:12] != b"WAVE":
        raise TrialAudioError("the trial file is not a WAV file")
    pos, fmt_ok = 12, False
    while pos + 8 <= len(data):
        cid = data[pos : pos + 4]
        (size,) = struct.unpack_from("<I", data, pos + 4)
        body = pos + 8
        if cid == b"fmt ":
            tag, _, _, _, _, bits = struct.unpack_from("<HHIIHH", data, body)
            fmt_ok = tag in _PCM_TAGS and bits == _BITS
        elif cid == b"data":
            if not fmt_ok:
                raise TrialAudioError("the trial file is not 24-bit PCM")
            size = min(size, len(data) - body)
            return body, size - size % 3
        pos = body + size + (size & 1)
    raise TrialAudioError("the trial file has no audio data")


def dithered(data: bytes, token: str) -> bytes:
    """``data`` (a 24-bit PCM WAV file) with a one-LSB TPDF dither seeded by ``token``."""
    start, size = _data_chunk(data)
    raw = np.frombuffer(data, dtype=np.uint8, count=size, offset=start).reshape(-1, 3)
    samples = (
        raw[:, 0].astype(np.int32)
        | (raw[:, 1].astype(np.int32) << 8)
        | (raw[:, 2].astype(np.int32) << 16)
    )
    samples = (samples << 8) >> 8  # sign-extend the 24-bit values
    rng = np.random.Generator(np.random.PCG64(int(token, 16)))
    n = samples.size
    # triangular on {-1, 0, 1} (the difference of two uniform bits): zero mean, 1/2 LSB^2
    noise = rng.integers(0, 2, n, dtype=np.int32) - rng.integers(0, 2, n, dtype=np.int32)
    out = np.clip(samples + noise, -(1 << (_BITS - 1)), (1 << (_BITS - 1)) - 1)
    packed = np.empty((n, 3), dtype=np.uint8)
    packed[:, 0] = out & 0xFF
    packed[:, 1] = (out >> 8) & 0xFF
    packed[:, 2] = (out >> 16) & 0xFF
    return data[:start] + packed.tobytes() + data[start + size :]


def trial_bytes(path: Path, token: str) -> bytes:
    """The audio answered for ``token``: the file at ``path``, dithered for that token.

    Raises OSError if the file is gone, TrialAudioError if it is not a trial file.
    """
    return dithered(path.read_bytes(), token)
