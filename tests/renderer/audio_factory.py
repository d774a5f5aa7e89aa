"""Generators of test audio files, written byte by byte.

These writers use only ``struct`` and numpy, not the module under test nor soundfile,
so that reading them checks ``earfold.renderer.io.audio`` against an independent encoding of
the formats (RIFF/WAVE as Microsoft documents it, Sun AU; common practice). They can
also write files no careful encoder would: headers that promise more data than follows,
zero channels, rates out of range.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np

WAVE_FORMAT_PCM = 0x0001
WAVE_FORMAT_IEEE_FLOAT = 0x0003


def pcm_codes(x: np.ndarray, bits: int) -> np.ndarray:
    """Float samples in [-1, 1) to signed integer codes, scale 2**(bits-1), rounded."""
    scale = 2 ** (bits - 1)
    return np.clip(np.rint(np.asarray(x, dtype=np.float64) * scale), -scale, scale - 1).astype(
        np.int64
    )


def encode_samples(codes_or_float: np.ndarray, bits: int, *, floating: bool = False) -> bytes:
    """Little-endian interleaved sample bytes of a frames x channels array."""
    a = np.asarray(codes_or_float)
    if floating:
        return a.astype("<f4").tobytes()
    if bits == 16:
        return a.astype("<i2").tobytes()
    if bits == 24:
        b = a.astype("<i4").reshape(-1).view(np.uint8).reshape(-1, 4)[:, :3]
        return b.tobytes()
    raise ValueError(f"bits must be 16 or 24, not {bits!r}")


def wav_bytes(
    data: bytes,
    *,
    channels: int,
    samplerate: int,
    bits: int,
    format_tag: int = WAVE_FORMAT_PCM,
    declared_data_bytes: int | None = None,
) -> bytes:
    """A canonical RIFF/WAVE file: ``fmt `` chunk (16 bytes) and ``data`` chunk.

    ``declared_data_bytes`` lets the header claim a different data size than follows.
    """
    block_align = channels * bits // 8
    fmt = struct.pack(
        "<HHIIHH", format_tag, channels, samplerate, samplerate * block_align, block_align, bits
    )
    declared = len(data) if declared_data_bytes is None else declared_data_bytes
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt
    body += b"data" + struct.pack("<I", declared) + data
    riff_size = len(body) - len(data) + declared
    return b"RIFF" + struct.pack("<I", riff_size) + body


def write_wav(
    path: Path,
    samples: np.ndarray,
    samplerate: int,
    bits: int = 16,
    *,
    floating: bool = False,
    channels: int | None = None,
    declared_frames: int | None = None,
) -> Path:
    """Write frames x channels ``samples`` (float in [-1, 1)) as a WAV file.

    ``channels`` overrides the channel count in the header (e.g. 0 for a broken file);
    ``declared_frames`` the frame count the header claims.
    """
    x = np.asarray(samples, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    nch = x.shape[1] if channels is None else channels
    if floating:
        bits = 32
        data = encode_samples(x, 32, floating=True)
        tag = WAVE_FORMAT_IEEE_FLOAT
    else:
        data = encode_samples(pcm_codes(x, bits), bits)
        tag = WAVE_FORMAT_PCM
    declared = None
    if declared_frames is not None:
        declared = declared_frames * max(nch, 1) * bits // 8
    path.write_bytes(
        wav_bytes(
            data,
            channels=nch,
            samplerate=samplerate,
            bits=bits,
            format_tag=tag,
            declared_data_bytes=declared,
        )
    )
    return path


def write_pattern_wav(
    path: Path, frames: int, channels: int, samplerate: int = 48000, chunk_frames: int = 1 << 16
) -> Path:
    """A long 16-bit WAV written in chunks (constant memory): channel c holds code c+1.

    Used where only the size of a file matters (memory tests).
    """
    block_align = channels * 2
    chunk = np.tile(np.arange(1, channels + 1, dtype="<i2"), chunk_frames).tobytes()
    header = wav_bytes(
        b"",
        channels=channels,
        samplerate=samplerate,
        bits=16,
        declared_data_bytes=frames * block_align,
    )
    with open(path, "wb") as fh:
        fh.write(header)
        left = frames
        while left > 0:
            n = min(left, chunk_frames)
            fh.write(chunk[: n * block_align])
            left -= n
    return path


def write_au(path: Path, samples: np.ndarray, samplerate: int) -> Path:
    """A Sun/NeXT AU file, 16-bit big-endian linear PCM (encoding 3)."""
    x = np.asarray(samples, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    data = pcm_codes(x, 16).astype(">i2").tobytes()
    header = struct.pack(">4sIIIII", b".snd", 24, len(data), 3, samplerate, x.shape[1])
    path.write_bytes(header + data)
    return path


def sine(
    frequency: float, amplitude: float, frames: int, samplerate: int, phase: float = 0.0
) -> np.ndarray:
    """A float64 sine, one column."""
    t = np.arange(frames) / samplerate
    return (amplitude * np.sin(2 * np.pi * frequency * t + phase))[:, None]
