"""The renderer's ADM master writer (``objects.writer``) and the benchmark's master, read
back through ``read_adm`` and the audio reader (chunk layouts: EBU Tech 3306, ITU-R
BS.2088; model: ITU-R BS.2076-2)."""

from __future__ import annotations

import struct

import numpy as np
import pytest
import soundfile as sf

from earfold.renderer.errors import AdmError
from earfold.renderer.io import Rf64View
from earfold.renderer.objects import object_positions, read_adm, read_wav_chunks
from earfold.renderer.objects.writer import chna_body, document, write_master
from earfold.renderer.tools._bench_adm import (
    ADM_BED,
    BLOCK_SECONDS,
    adm_master_xml,
    make_adm_master,
)

FS = 48000


@pytest.mark.parametrize("container", ["RIFF", "RF64", "BW64"])
def test_the_bench_master_reads_back_as_written(tmp_path, container):
    seconds, objects = 1.3, 3
    path = tmp_path / "m.wav"
    make_adm_master(path, seconds, objects=objects, container=container)
    master = read_adm(path)
    assert master.channels == len(ADM_BED) + objects
    assert [(b.label, b.position[:2]) for b in master.beds] == [
        (label, (az, el)) for label, az, el in ADM_BED
    ]
    assert [b.lfe for b in master.beds] == [label.startswith("LFE") for label, _, _ in ADM_BED]
    assert [o.object_name for o in master.objects] == [f"Object {k + 1}" for k in range(objects)]
    assert not master.ignored and not master.hoa
    # Object 2 (k = 1) starts at 120 degrees and turns clockwise at 25 degrees a second:
    # at each block's end it is where the block says (BS.2076-2: the block's position is
    # reached at its end when interpolated).
    ends = np.array([BLOCK_SECONDS, 2 * BLOCK_SECONDS, seconds])
    at = object_positions(master.objects[1], ends)
    expected = (120.0 - 25.0 * ends + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(at.positions[:, 0], expected, atol=1e-3)
    np.testing.assert_allclose(at.positions[:, 1], 20.0)
    # The audio: PCM_24 noise, every track, the announced length.
    chunks = read_wav_chunks(path)
    assert (chunks.channels, chunks.frames) == (master.channels, int(seconds * FS))
    source = Rf64View(path) if container == "BW64" else path
    with sf.SoundFile(source) as f:
        assert (f.channels, f.frames, f.subtype) == (master.channels, int(seconds * FS), "PCM_24")
        audio = f.read(dtype="float32")
    rms = np.sqrt(np.mean(audio**2, axis=0))
    np.testing.assert_allclose(rms, 0.1, rtol=0.05)  # -20 dBFS per track


def test_blocks_and_a_whole_array_write_the_same_file(tmp_path):
    rng = np.random.default_rng(3)
    audio = (0.2 * rng.standard_normal((1000, 3))).astype(np.float32)  # no clipping
    axml = document()
    chna = chna_body([(1, "ATU_00000001", "AT_00010001_01", "AP_00010002")])
    for subtype in ("FLOAT", "PCM_24"):
        whole = write_master(
            tmp_path / "a.wav", audio=audio, chna=chna, axml=axml, subtype=subtype, container="BW64"
        )
        parts = write_master(
            tmp_path / "b.wav",
            audio=(audio[i : i + 300] for i in range(0, 1000, 300)),
            frames=1000,
            channels=3,
            chna=chna,
            axml=axml,
            subtype=subtype,
            container="BW64",
        )
        assert whole.read_bytes() == parts.read_bytes()
        with sf.SoundFile(Rf64View(parts)) as f:
            back = f.read(dtype="float32")
        # PCM_24: within half a step of 2**-23 (rounded to the nearest integer).
        tolerance = 0.0 if subtype == "FLOAT" else 0.5 / 2**23 + 1e-9
        np.testing.assert_allclose(back, audio, rtol=0, atol=tolerance)


def test_pcm24_samples_are_rounded_and_clipped_to_the_integers(tmp_path):
    audio = np.array([[0.0], [1.0], [-1.0], [2.0], [0.5 / 2**23 + 1e-12], [-3.0]], np.float32)
    path = write_master(tmp_path / "m.wav", audio=audio, chna=None, axml=None, subtype="PCM_24")
    data = path.read_bytes()[-18:]
    values = [int.from_bytes(data[i : i + 3], "little", signed=True) for i in range(0, 18, 3)]
    assert values == [0, 2**23 - 1, -(2**23), 2**23 - 1, 1, -(2**23)]
    fmt = path.read_bytes()[20:36]
    assert struct.unpack("<HHIIHH", fmt) == (1, 1, FS, FS * 3, 3, 24)


def test_the_writer_refuses_what_it_cannot_write(tmp_path):
    audio = np.zeros((10, 2), np.float32)
    with pytest.raises(AdmError, match="unknown subtype 'PCM_8'; choose one of FLOAT, PCM_24"):
        write_master(tmp_path / "m.wav", audio=audio, chna=None, axml=None, subtype="PCM_8")
    with pytest.raises(AdmError, match="unknown container 'AIFF'"):
        write_master(tmp_path / "m.wav", audio=audio, chna=None, axml=None, container="AIFF")
    with pytest.raises(AdmError, match="held 10 frames, 12 were announced"):
        write_master(
            tmp_path / "m.wav", audio=iter([audio]), frames=12, channels=2, chna=None, axml=None
        )
    with pytest.raises(AdmError, match=r"audio blocks must be \(frames, 3\)"):
        write_master(
            tmp_path / "m.wav", audio=iter([audio]), frames=10, channels=3, chna=None, axml=None
        )


def test_the_bench_masters_axml_has_an_even_length():
    # libsndfile reads an RF64 file whose chunk before the audio is padded as having no
    # data chunk (measured with 1.2.2); the bench master's axml never needs the pad.
    for seconds, objects in ((0.05, 1), (1.0, 16), (7.3, 5)):
        xml, chna = adm_master_xml(seconds, objects)
        assert len(xml.encode()) % 2 == 0
        assert len(chna) == 4 + 40 * (len(ADM_BED) + objects)
