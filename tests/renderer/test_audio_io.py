"""Streaming audio I/O: probing, block reading, atomic dithered writing."""

from __future__ import annotations

import json
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import soundfile
from audio_factory import pcm_codes, sine, write_au, write_pattern_wav, write_wav
from numpy.testing import assert_allclose, assert_array_equal

import earfold.renderer.io._probe as probe_module
import earfold.renderer.io._writer as writer_module
import earfold.renderer.io.audio as aio
from earfold.renderer.errors import AudioError
from earfold.renderer.io import (
    OutputWriter,
    StemInfo,
    StemReader,
    audio_formats,
    probe_stem,
    read_audio,
    subtype_for,
    write_audio,
)

FS = 48000
LSB16 = 2.0**-15
LSB24 = 2.0**-23

# File signatures: RIFF/WAVE (Microsoft RIFF specification), RF64 (EBU Tech 3306, from
# memory), Sony Wave64 starts with the GUID whose first bytes spell "riff" (from memory),
# FLAC "fLaC" (RFC 9639).
MAGIC = {"WAV": b"RIFF", "RF64": b"RF64", "W64": b"riff", "FLAC": b"fLaC"}

OUTPUT_COMBOS = [
    (ext, entry["format"], subtype)
    for ext, entry in audio_formats()["output"].items()
    for subtype in entry["subtypes"]
]


def _noise(frames: int, channels: int, seed: int = 3, amplitude: float = 0.9) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (amplitude * rng.uniform(-1, 1, (frames, channels))).astype(np.float32)


def _parts(folder: Path) -> list[Path]:
    return sorted(folder.glob(".*.part"))


# ---------------------------------------------------------------- round trips


@pytest.mark.parametrize(("ext", "fmt", "subtype"), OUTPUT_COMBOS)
def test_round_trip_every_listed_format_and_subtype(tmp_path, ext, fmt, subtype):
    x = _noise(3000, 2)
    path = tmp_path / f"out.{ext}"
    with OutputWriter(path, FS, 2, subtype=subtype) as w:
        w.write(x[:1234])
        w.write(x[1234:])
    assert w.format == fmt and w.frames_written == 3000
    assert path.read_bytes()[:4] == MAGIC[fmt]
    info = probe_stem([path])
    assert (info.format, info.subtype, info.samplerate, info.channels, info.frames) == (
        fmt,
        subtype,
        FS,
        2,
        3000,
    )
    y, rate = read_audio(path)
    assert rate == FS and y.dtype == np.float32 and y.shape == x.shape
    if subtype == "FLOAT":
        assert_array_equal(y, x)  # float32 stored as float32: exact
    elif subtype == "PCM_24":
        assert_allclose(y, x, rtol=0, atol=0.5 * LSB24 * (1 + 1e-6))  # rounding only
    else:
        # Within 1 LSB of the dithered value: rounding (0.5 LSB) + TPDF peak (1 LSB).
        assert_allclose(y, x, rtol=0, atol=1.5 * LSB16 * (1 + 1e-6))


def test_values_on_the_pcm_grid_come_back_exactly(tmp_path):
    codes = np.array([[-(2**23)], [-1], [0], [1], [2**23 - 1], [12345]], dtype=np.float64)
    x = (codes / 2**23).astype(np.float32)  # exact in float32 (24-bit mantissa)
    write_audio(tmp_path / "g.wav", x, FS, subtype="PCM_24")
    y, _ = read_audio(tmp_path / "g.wav")
    assert_array_equal(y, x)


def test_pcm24_writer_matches_an_independent_reading_of_the_data_chunk(tmp_path):
    # RIFF/WAVE, PCM: little-endian signed 24-bit, scale 2**23 (common practice).
    x = _noise(500, 2, seed=11)
    path = tmp_path / "p.wav"
    write_audio(path, x, FS, subtype="PCM_24")
    raw = path.read_bytes()
    start = raw.index(b"data") + 8
    b = np.frombuffer(raw[start : start + 500 * 2 * 3], dtype=np.uint8).reshape(-1, 3)
    codes = (
        b[:, 0].astype(np.int32)
        | (b[:, 1].astype(np.int32) << 8)
        | (b[:, 2].astype(np.int32) << 16)
    )
    codes = np.where(codes >= 2**23, codes - 2**24, codes).reshape(500, 2)
    assert_array_equal(codes, pcm_codes(x, 24))


@pytest.mark.parametrize(("bits", "floating"), [(16, False), (24, False), (32, True)])
def test_reads_independently_encoded_wav(tmp_path, bits, floating):
    x = _noise(700, 3, seed=5)
    path = write_wav(tmp_path / "f.wav", x, FS, bits, floating=floating)
    y, rate = read_audio(path)
    assert rate == FS
    if floating:
        assert_array_equal(y, x)
    else:
        # Integer code / 2**(bits-1): the usual PCM normalisation (common practice).
        assert_array_equal(y, (pcm_codes(x, bits) / 2 ** (bits - 1)).astype(np.float32))


# ---------------------------------------------------------------- dither


def _quantisation_error(
    tmp_path: Path, x: np.ndarray, seed: int = 0, subtype: str = "PCM_16", blocks: int = 1
) -> np.ndarray:
    path = tmp_path / f"e{seed}_{subtype}_{blocks}.wav"
    with OutputWriter(path, FS, x.shape[1], subtype=subtype, seed=seed) as w:
        for part in np.array_split(x, blocks):
            w.write(part)
    y, _ = read_audio(path)
    lsb = LSB16 if subtype == "PCM_16" else LSB24
    return (y.astype(np.float64) - x.astype(np.float64)) / lsb


def test_tpdf_dither_error_has_zero_mean_and_quarter_lsb_variance(tmp_path):
    # -60 dBFS 997 Hz sine, 4 s: error = rounding (LSB^2/12) + TPDF (LSB^2/6) = LSB^2/4,
    # signal-independent, mean 0 (common practice). N = 192000: the standard error of
    # the mean is 0.5/sqrt(N) ~ 0.001 LSB, of the variance about 0.3 %.
    x = sine(997.0, 10 ** (-60 / 20), 4 * FS, FS).astype(np.float32)
    e = _quantisation_error(tmp_path, x)
    assert abs(e.mean()) < 0.01
    assert_allclose(e.var(), 0.25, rtol=0.03)
    assert np.max(np.abs(e)) <= 1.5 + 1e-6  # 0.5 rounding + 1 LSB triangular peak
    # Signal-independent: the same variance on silence, where only the dither acts.
    e0 = _quantisation_error(tmp_path, np.zeros((4 * FS, 1), np.float32), seed=1)
    assert_allclose(e0.var(), 0.25, rtol=0.03)


def test_dither_is_deterministic_per_seed_and_independent_of_block_split(tmp_path):
    x = sine(440.0, 0.01, 20000, FS).astype(np.float32)
    a = _quantisation_error(tmp_path, x, seed=7, blocks=1)
    b = _quantisation_error(tmp_path, x, seed=7, blocks=13)
    c = _quantisation_error(tmp_path, x, seed=8, blocks=1)
    assert_array_equal(a, b)
    assert np.count_nonzero(a != c) > 1000


def test_pcm24_and_float_are_not_dithered(tmp_path):
    silence = np.zeros((5000, 2), np.float32)
    for subtype in ("PCM_24", "FLOAT"):
        write_audio(tmp_path / f"s_{subtype}.wav", silence, FS, subtype=subtype)
        y, _ = read_audio(tmp_path / f"s_{subtype}.wav")
        assert_array_equal(y, silence)
    x = sine(997.0, 1e-3, 20000, FS).astype(np.float32)
    e = _quantisation_error(tmp_path, x, subtype="PCM_24")
    assert np.max(np.abs(e)) <= 0.5 + 1e-6  # plain rounding


# ---------------------------------------------------------------- clipping and peak


def test_pcm_clips_to_full_scale_and_counts_float_does_not(tmp_path):
    x = np.array([[0.5, 1.5], [-2.0, 1.0], [0.25, -1.0]], np.float32)
    with OutputWriter(tmp_path / "c.wav", FS, 2, subtype="PCM_24") as w:
        w.write(x)
    assert w.clipped_samples == 3  # 1.5, 1.0 and -2.0 lie outside [-1, 1); -1.0 does not
    y, _ = read_audio(tmp_path / "c.wav")
    top = 1 - LSB24
    assert_allclose(y, [[0.5, top], [-1.0, top], [0.25, -1.0]], rtol=0, atol=0)
    assert w.peak == 2.0

    with OutputWriter(tmp_path / "f.wav", FS, 2, subtype="FLOAT") as w:
        w.write(x)
    assert w.clipped_samples == 0 and w.peak == 2.0
    assert_array_equal(read_audio(tmp_path / "f.wav")[0], x)


# ---------------------------------------------------------------- several mono files


def _mono(tmp_path: Path, name: str, value: float, frames: int, rate: int = FS) -> Path:
    return write_wav(tmp_path / name, np.full((frames, 1), value), rate, 24)


def test_mono_files_stack_in_the_given_order_and_pad_the_shorter(tmp_path):
    a = _mono(tmp_path, "mix.L.wav", 0.25, 1000)
    b = _mono(tmp_path, "mix.R.wav", -0.5, 1000)
    c = _mono(tmp_path, "mix.C.wav", 0.125, 700)
    info = probe_stem([c, a, b])
    assert info.channels == 3 and info.frames == 1000
    assert info.frames_per_file == (700, 1000, 1000)
    assert info.channel_mask is None
    assert any("padded with silence" in w and "'mix.C.wav' (700)" in w for w in info.warnings)
    with StemReader(info) as r:
        blocks = list(r.blocks(256))
        assert r.frames_read == 1000
    assert [len(b) for b in blocks] == [256, 256, 256, 232]
    y = np.concatenate(blocks)
    expected = np.empty((1000, 3), np.float32)
    expected[:, 0] = np.where(np.arange(1000) < 700, 0.125, 0.0)
    expected[:, 1] = 0.25
    expected[:, 2] = -0.5
    assert_array_equal(y, expected)


def test_blocks_concatenate_to_the_whole_file_and_restart(tmp_path):
    x = _noise(10007, 6, seed=9)
    path = write_wav(tmp_path / "six.wav", x, FS, floating=True)
    info = probe_stem(path)  # a single path is accepted too
    whole, _ = read_audio(path)
    with StemReader(info) as r:
        for blocksize in (1, 4096, 20000):
            blocks = list(r.blocks(blocksize))
            assert all(b.shape[1] == 6 and len(b) <= blocksize for b in blocks)
            assert all(b.dtype == np.float32 for b in blocks)
            assert_array_equal(np.concatenate(blocks), whole)
            assert r.frames_read == 10007


def test_reuse_yields_views_of_one_buffer(tmp_path):
    path = write_wav(tmp_path / "r.wav", _noise(5000, 2), FS, 24)
    with StemReader(probe_stem([path])) as r:
        bases = {id(b.base) for b in r.blocks(1024, reuse=True)}
    assert len(bases) == 1


def test_reuse_cycles_through_the_buffers_asked_for(tmp_path):
    # A block is overwritten `buffers` blocks later, not before: a queue of blocks between
    # two threads may hold that many.
    x = _noise(5000, 2)
    path = write_wav(tmp_path / "r.wav", x, FS, floating=True)
    whole, _ = read_audio(path)
    with StemReader(probe_stem([path])) as r:
        blocks = r.blocks(512, reuse=True, buffers=3)
        held = [next(blocks) for _ in range(3)]
        assert len({id(b.base) for b in held}) == 3
        assert_array_equal(np.concatenate(held), whole[:1536])
        fourth = next(blocks)
        assert fourth.base is held[0].base
        assert_array_equal(held[1], whole[512:1024])  # still intact
        assert_array_equal(fourth, whole[1536:2048])
    with pytest.raises(AudioError, match="buffers"):
        StemReader(probe_stem([path])).blocks(512, reuse=True, buffers=0)


def test_blocks_not_wanted_are_silence_and_the_rest_is_read_in_place(tmp_path):
    x = _noise(10000, 2, seed=4)
    for name, paths in (
        ("one", [write_wav(tmp_path / "st.wav", x, FS, floating=True)]),
        (
            "mono",
            [
                write_wav(tmp_path / "a.wav", x[:, :1], FS, floating=True),
                write_wav(tmp_path / "b.wav", x[:7000, 1:], FS, floating=True),
            ],
        ),
    ):
        expected = np.zeros((10000, 2), dtype=np.float32)
        whole = np.concatenate(list(StemReader(probe_stem(paths)).blocks(4096)))
        asked: list[tuple[int, int]] = []

        def wanted(first: int, stop: int, asked: list[tuple[int, int]] = asked) -> bool:
            asked.append((first, stop))
            return first // 1000 % 3 != 1  # blocks 1, 4, 7 are skipped

        with StemReader(probe_stem(paths)) as r:
            got = np.concatenate([b.copy() for b in r.blocks(1000, reuse=True, wanted=wanted)])
            assert r.frames_read == 10000
        for k in range(10):
            if k % 3 != 1:
                expected[k * 1000 : (k + 1) * 1000] = whole[k * 1000 : (k + 1) * 1000]
        assert asked == [(k * 1000, (k + 1) * 1000) for k in range(10)], name
        assert_array_equal(got, expected, err_msg=name)


def test_encode_then_write_encoded_is_write(tmp_path):
    # The delivery stage encodes on one thread and writes on another: the file, the peak
    # and the clipping count are those of write().
    x = _noise(9000, 2, seed=8, amplitude=1.2)
    for subtype in ("PCM_16", "PCM_24", "FLOAT"):
        with OutputWriter(tmp_path / "a.wav", FS, 2, subtype=subtype, seed=3) as one:
            for start in range(0, len(x), 2500):
                one.write(x[start : start + 2500])
        with OutputWriter(tmp_path / "b.wav", FS, 2, subtype=subtype, seed=3) as two:
            encoded = [two.encode(x[start : start + 2500]) for start in range(0, len(x), 2500)]
            assert two.frames_written == 0
            for data in encoded:
                two.write_encoded(data)
            assert two.frames_written == len(x)
        assert (one.peak, one.clipped_samples) == (two.peak, two.clipped_samples)
        assert two.clipped_samples > 0 or subtype == "FLOAT"
        a, _ = soundfile.read(tmp_path / "a.wav", dtype="float64")
        b, _ = soundfile.read(tmp_path / "b.wav", dtype="float64")
        assert_array_equal(a, b, err_msg=subtype)


def test_blocks_memory_does_not_grow_with_file_length(tmp_path):
    # 60 s of 12 channels at 48 kHz: 138 MB as float32. Reading it in 4096-frame blocks
    # should hold about two blocks (2 x 197 kB) at a time.
    frames, channels = 60 * FS, 12
    path = write_pattern_wav(tmp_path / "long.wav", frames, channels)
    info = probe_stem([path])
    with StemReader(info) as r:
        tracemalloc.start()
        try:
            count = 0
            for block in r.blocks(4096):
                assert len(block) <= 4096
                count += len(block)
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
    assert count == frames
    assert_allclose(block[-1], (np.arange(1, 13) / 2**15).astype(np.float32))
    assert peak < 3 * 2**20, f"peak {peak} bytes while reading a {frames * channels * 4} B stem"


def test_durable_writer_flushes_early_on_a_thread_and_still_commits(tmp_path, monkeypatch):
    # Every _SYNC_BYTES a thread flushes what was written; the file is the same, the
    # thread is gone after close, and a small file starts no thread at all.
    monkeypatch.setattr(writer_module, "_SYNC_BYTES", 6000)
    synced = []
    real = writer_module.os.fdatasync
    monkeypatch.setattr(writer_module.os, "fdatasync", lambda fd: (synced.append(fd), real(fd)))
    x = _noise(10000, 2, amplitude=0.5)
    with OutputWriter(tmp_path / "big.wav", FS, 2) as w:
        for start in range(0, len(x), 1000):
            w.write(x[start : start + 1000])
        thread = w._sync._thread
        # the thread flushes while the file is still being written (it runs when the
        # scheduler lets it: waited for here, not assumed)
        deadline = time.monotonic() + 10.0
        while not synced and time.monotonic() < deadline:
            time.sleep(0.005)
        assert synced
    assert not thread.is_alive()
    with OutputWriter(tmp_path / "small.wav", FS, 2) as w:
        w.write(x[:500])
        assert w._sync is None
    assert_allclose(soundfile.read(tmp_path / "big.wav", dtype="float32")[0], x, atol=2**-23)
    assert _parts(tmp_path) == []
    # Not durable: no early flushing either.
    with OutputWriter(tmp_path / "scratch.wav", FS, 2, durable=False) as w:
        w.write(x)
        assert w._sync is None


def test_a_failed_early_flush_fails_the_write_and_leaves_no_file(tmp_path, monkeypatch):
    monkeypatch.setattr(writer_module, "_SYNC_BYTES", 6000)

    def broken(fd: int) -> None:
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(writer_module.os, "fdatasync", broken)
    w = OutputWriter(tmp_path / "out.wav", FS, 2)
    w.write(_noise(4000, 2, amplitude=0.5))
    w._sync._thread.join()  # the thread stops at its failure
    with pytest.raises(AudioError, match="Input/output error"):
        w.close()
    assert not (tmp_path / "out.wav").exists() and _parts(tmp_path) == []


# ---------------------------------------------------------------- channel mask


def test_channel_mask_is_read_from_the_header_of_one_interleaved_file(tmp_path, monkeypatch):
    monkeypatch.setattr(probe_module, "read_channel_mask", lambda path: 0x3F)
    path = write_wav(tmp_path / "six.wav", _noise(100, 6), FS, 16)
    assert probe_stem([path]).channel_mask == 0x3F
    a = _mono(tmp_path, "a.wav", 0.1, 10)
    b = _mono(tmp_path, "b.wav", 0.1, 10)
    assert probe_stem([a, b]).channel_mask is None  # a mask describes one interleaved file


# ---------------------------------------------------------------- RF64 and atomic writes


def test_wav_switches_to_rf64_when_frames_hint_exceeds_the_riff_limit(tmp_path, monkeypatch):
    # Lower the limit so that 1000 stereo 24-bit frames (6000 bytes) "exceed" it.
    monkeypatch.setattr(writer_module, "RIFF_LIMIT_BYTES", writer_module._HEADER_ALLOWANCE + 5000)
    x = _noise(1000, 2)
    big = tmp_path / "big.wav"
    with OutputWriter(big, FS, 2, frames_hint=1000) as w:
        w.write(x)
    assert w.format == "RF64" and big.read_bytes()[:4] == b"RF64"
    assert probe_stem([big]).format == "RF64"
    assert_allclose(read_audio(big)[0], x, rtol=0, atol=0.5 * LSB24 * (1 + 1e-6))

    small = tmp_path / "small.wav"
    with OutputWriter(small, FS, 2, frames_hint=500) as w:
        w.write(x[:500])
    assert w.format == "WAV" and small.read_bytes()[:4] == b"RIFF"

    # Without a hint, a WAV that outgrows the limit is refused rather than corrupted.
    blind = tmp_path / "blind.wav"
    with pytest.raises(AudioError, match=r"blind\.wav.*4 GiB WAV limit; pass frames_hint"):
        with OutputWriter(blind, FS, 2) as w:
            w.write(x[:500])
            w.write(x[500:])
    assert not blind.exists() and _parts(tmp_path) == []


def test_exception_mid_write_leaves_existing_output_and_no_temp(tmp_path):
    out = tmp_path / "render.wav"
    out.write_bytes(b"previous render")
    with pytest.raises(RuntimeError, match="worker died"):
        with OutputWriter(out, FS, 2) as w:
            w.write(_noise(100, 2))
            assert len(_parts(tmp_path)) == 1  # the temporary file sits beside the output
            raise RuntimeError("worker died")
    assert out.read_bytes() == b"previous render"
    assert _parts(tmp_path) == []

    bad = _noise(100, 2)
    bad[40, 1] = np.nan
    with pytest.raises(AudioError, match=r"NaN or infinity at frame 140 of .*render\.wav"):
        with OutputWriter(out, FS, 2) as w:
            w.write(_noise(100, 2))
            w.write(bad)
    assert out.read_bytes() == b"previous render"
    assert _parts(tmp_path) == []

    with OutputWriter(out, FS, 2) as w:
        w.write(_noise(100, 2))
    assert out.read_bytes()[:4] == b"RIFF" and _parts(tmp_path) == []


def test_writer_without_with_commits_on_close_and_discards_on_abort(tmp_path):
    w = OutputWriter(tmp_path / "a.flac", FS, 2, subtype="PCM_16")
    w.write(_noise(10, 2))
    w.abort()
    assert not (tmp_path / "a.flac").exists() and _parts(tmp_path) == []
    w = OutputWriter(tmp_path / "a.flac", FS, 2, subtype="PCM_16")
    w.write(_noise(10, 2))
    w.close()
    assert probe_stem([tmp_path / "a.flac"]).frames == 10
    with pytest.raises(AudioError, match=r"writer of .*a\.flac' is closed"):
        w.write(_noise(10, 2))


# ---------------------------------------------------------------- probe errors


def _text_as_wav(d: Path) -> list[Path]:
    p = d / "notes.wav"
    p.write_text("session notes, not audio\n" * 20)
    return [p]


def _zero_frames(d: Path) -> list[Path]:
    return [write_wav(d / "empty.wav", np.zeros((0, 2)), FS)]


def _zero_channels(d: Path) -> list[Path]:
    return [write_wav(d / "nochan.wav", np.zeros((10, 1)), FS, channels=0)]


def _too_many_channels(d: Path) -> list[Path]:
    return [write_wav(d / "wide.wav", np.zeros((2, 129)), FS)]


def _mono_too_many(d: Path) -> list[Path]:
    return [write_wav(d / f"m{i}.wav", np.zeros((2, 1)), FS) for i in range(129)]


def _low_rate(d: Path) -> list[Path]:
    return [write_wav(d / "phone.wav", np.zeros((10, 1)), 4000)]


def _high_rate(d: Path) -> list[Path]:
    return [write_wav(d / "fast.wav", np.zeros((10, 1)), 400000)]


def _multichannel_among_mono(d: Path) -> list[Path]:
    return [_mono(d, "L.wav", 0.1, 10), write_wav(d / "pair.wav", np.zeros((10, 2)), FS)]


def _differing_rates(d: Path) -> list[Path]:
    return [_mono(d, "L.wav", 0.1, 10), _mono(d, "R.wav", 0.1, 10, rate=44100)]


def _missing(d: Path) -> list[Path]:
    return [d / "absent.wav"]


def _directory(d: Path) -> list[Path]:
    (d / "stems.wav").mkdir()
    return [d / "stems.wav"]


def _twice(d: Path) -> list[Path]:
    p = _mono(d, "L.wav", 0.1, 10)
    return [p, p]


def _au(d: Path) -> list[Path]:
    return [write_au(d / "old.au", np.zeros((10, 1)), FS)]


@pytest.mark.parametrize(
    ("build", "match"),
    [
        (_missing, r"audio file '.*absent\.wav' does not exist"),
        (_directory, r"'.*stems\.wav' is a directory"),
        (_text_as_wav, r"'.*notes\.wav' is not a readable audio file: Format not recognised"),
        (_zero_channels, r"'.*nochan\.wav' is not a readable audio file: Channel count is zero"),
        (_zero_frames, r"'.*empty\.wav' has no audio frames"),
        (_too_many_channels, r"'.*wide\.wav' hold 129 channels; at most 128"),
        (_mono_too_many, r"the 129 files together hold 129 channels; at most 128"),
        (
            _low_rate,
            r"'.*phone\.wav' has an unsupported sample rate of 4000 Hz; supported: "
            r"8000 to 384000",
        ),
        (_high_rate, r"'.*fast\.wav' has an unsupported sample rate of 400000 Hz"),
        (_multichannel_among_mono, r"'.*pair\.wav' has 2 channels; .* each must be mono"),
        (_differing_rates, r"differ in sample rate \('L\.wav': 48000 Hz, 'R\.wav': 44100 Hz\)"),
        (_twice, r"'.*L\.wav' is given twice"),
        (_au, r"'.*old\.au' is AU .*not accepted as a stem; accepted formats: WAV, WAVEX"),
    ],
)
def test_probe_errors_name_the_file(tmp_path, build, match):
    with pytest.raises(AudioError, match=match):
        probe_stem(build(tmp_path))


def test_probe_rejects_an_empty_list():
    with pytest.raises(AudioError, match="no audio files given"):
        probe_stem([])


def test_zero_channel_count_is_refused_even_if_the_decoder_allowed_it(tmp_path, monkeypatch):
    # libsndfile refuses such headers itself; our own check stays for other decoders.
    path = write_wav(tmp_path / "x.wav", np.zeros((10, 1)), FS)
    real = soundfile.info

    def zero_channels(p):
        i = real(p)
        i.channels = 0
        return i

    monkeypatch.setattr(soundfile, "info", zero_channels)
    with pytest.raises(AudioError, match=r"'.*x\.wav' has no channels"):
        probe_stem([path])


def test_truncated_wav_reads_the_frames_present_and_warns(tmp_path):
    # The header claims 2000 frames; only 600 follow (a copy cut short).
    x = _noise(600, 2, seed=2)
    path = write_wav(tmp_path / "cut.wav", x, FS, 16, declared_frames=2000)
    info = probe_stem([path])
    assert info.frames == 600 and info.frames_per_file == (600,)
    assert any(
        "'cut.wav' is cut short" in w and "8000 bytes" in w and "2400" in w for w in info.warnings
    )
    y, _ = read_audio(path)
    assert_array_equal(y, (pcm_codes(x, 16) / 2**15).astype(np.float32))


def test_stem_info_duration_and_frozen():
    info = StemInfo(("a.wav",), "WAV", "PCM_24", 48000, 2, 72000)
    assert_allclose(info.duration, 1.5)
    with pytest.raises(AttributeError):
        info.frames = 1  # type: ignore[misc]


def test_reader_rejects_bad_blocksize(tmp_path):
    path = write_wav(tmp_path / "b.wav", _noise(10, 1), FS)
    with StemReader(probe_stem([path])) as r:
        for bad in (0, -5, 2.5, True):
            with pytest.raises(AudioError, match=r"blocksize must be a positive integer, not"):
                r.blocks(bad)


# ---------------------------------------------------------------- writer errors


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (
            {"path": "out.mp3"},
            r"cannot tell the output format from '.*out\.mp3'; use one of the "
            r"extensions \.wav, \.flac, \.w64, \.rf64",
        ),
        ({"format": "ogg"}, r"unsupported output format 'ogg'; choose one of wav, flac, w64, rf64"),
        (
            {"subtype": "PCM_32"},
            r"unsupported output subtype 'PCM_32'; choose one of PCM_16, "
            r"PCM_24, FLOAT",
        ),
        (
            {"path": "out.flac", "subtype": "FLOAT"},
            r"FLAC cannot hold subtype 'FLOAT'; valid combinations: wav: PCM_16, PCM_24, FLOAT; "
            r"flac: PCM_16, PCM_24; w64",
        ),
        ({"path": "out.flac", "channels": 9}, r"FLAC holds at most 8 channels, not 9"),
        ({"channels": 0}, r"channels must be an integer from 1 to 128, not 0"),
        ({"samplerate": 1000}, r"unsupported output sample rate 1000; supported: 8000 to 384000"),
        ({"path": "nowhere/out.wav"}, r"the folder of output '.*out\.wav' does not exist"),
    ],
)
def test_writer_argument_errors(tmp_path, kwargs, match):
    args = {"path": "out.wav", "samplerate": FS, "channels": 2, **kwargs}
    args["path"] = tmp_path / args["path"]
    with pytest.raises(AudioError, match=match):
        OutputWriter(args.pop("path"), args.pop("samplerate"), args.pop("channels"), **args)
    assert _parts(tmp_path) == []


def test_writer_refuses_a_directory_as_output(tmp_path):
    (tmp_path / "out.wav").mkdir()
    with pytest.raises(AudioError, match=r"output path '.*out\.wav' is a directory"):
        OutputWriter(tmp_path / "out.wav", FS)


def test_writer_block_errors(tmp_path):
    with pytest.raises(AudioError, match=r"expected a block of shape \(frames, 2\), got \(10,\)"):
        with OutputWriter(tmp_path / "o.wav", FS) as w:
            w.write(np.zeros(10, np.float32))
    with pytest.raises(AudioError, match=r"expected float samples, got dtype 'int16'"):
        with OutputWriter(tmp_path / "o.wav", FS) as w:
            w.write(np.zeros((10, 2), np.int16))
    assert not (tmp_path / "o.wav").exists() and _parts(tmp_path) == []


def test_format_argument_overrides_the_extension(tmp_path):
    with OutputWriter(tmp_path / "o.bin", FS, format="FLAC", subtype="pcm_16") as w:
        w.write(_noise(10, 2))
    assert (tmp_path / "o.bin").read_bytes()[:4] == b"fLaC"
    assert w.subtype == "PCM_16"


# ---------------------------------------------------------------- helpers


def test_subtype_for_is_case_insensitive_and_lists_choices():
    assert [subtype_for(s) for s in ("pcm_16", "PCM_24", "Float")] == ["PCM_16", "PCM_24", "FLOAT"]
    with pytest.raises(
        AudioError,
        match=r"unsupported output subtype 'DOUBLE'; choose one of "
        r"PCM_16, PCM_24, FLOAT",
    ):
        subtype_for("DOUBLE")
    with pytest.raises(AudioError, match=r"unsupported output subtype 24"):
        subtype_for(24)  # type: ignore[arg-type]


def test_write_audio_accepts_1d_as_mono(tmp_path):
    write_audio(tmp_path / "m.wav", np.linspace(-0.5, 0.5, 64, dtype=np.float32), FS, "FLOAT")
    y, rate = read_audio(tmp_path / "m.wav")
    assert y.shape == (64, 1) and rate == FS
    assert_array_equal(y[:, 0], np.linspace(-0.5, 0.5, 64, dtype=np.float32))


def test_audio_formats_is_json_and_consistent_with_the_writer():
    formats = audio_formats()
    json.dumps(formats)
    assert set(formats["output"]) == {"wav", "flac", "w64", "rf64"}
    assert "FLOAT" not in formats["output"]["flac"]["subtypes"]
    assert formats["input"]["channels"]["max"] == aio.MAX_CHANNELS
    assert set(formats["input"]["formats"]) == set(aio.INPUT_FORMATS)


def test_reader_refuses_a_file_changed_since_it_was_probed(tmp_path):
    path = write_wav(tmp_path / "s.wav", _noise(10, 1), FS)
    info = probe_stem([path])
    write_wav(path, _noise(10, 2), FS)
    with pytest.raises(
        AudioError,
        match=r"'.*s\.wav' changed since it was probed: now 2 "
        r"channel\(s\) at 48000 Hz, expected 1",
    ):
        StemReader(info)
