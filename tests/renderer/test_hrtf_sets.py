"""The catalogue of shipped HRTF sets (hrtf_sets/) and the files it ships."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

import earfold.hrtf_sets
from earfold.hrtf_sets import DEFAULT_SET, SHIPPED, ShippedSet, get_shipped, list_shipped
from earfold.renderer.errors import HrirError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import cross_correlation_itd, interaural_time_difference, read_sofa
from earfold.renderer.hrtf import main as sphere_main

REPO_ROOT = Path(__file__).resolve().parents[2]
A = 0.0875  # head radius, m (REFERENCES.md)
C = 343.0  # speed of sound, m/s (REFERENCES.md)


def nearest(data, azimuth: float, elevation: float = 0.0) -> int:
    return int(np.argmax(data.directions @ direction_to_vector(azimuth, elevation)))


# -- the catalogue ----------------------------------------------------------------------


def test_names_are_unique_and_the_default_is_shipped():
    names = [s.name for s in SHIPPED]
    assert len(names) == len(set(names))
    assert len({s.filename for s in SHIPPED}) == len(SHIPPED)
    assert DEFAULT_SET == "mit-kemar"
    assert list_shipped()[0].name == DEFAULT_SET
    assert {s.name for s in list_shipped()} == {"mit-kemar", "rigid-sphere"}


def test_get_shipped_finds_each_set_by_name_in_any_case():
    for entry in SHIPPED:
        assert get_shipped(entry.name) is entry
        assert get_shipped(entry.name.upper()) is entry


def test_unknown_set_lists_the_shipped_names():
    expected = r"unknown HRTF set 'dummy-head'; shipped sets: 'mit-kemar', 'rigid-sphere'"
    with pytest.raises(HrirError, match=expected):
        get_shipped("dummy-head")


def test_entries_are_frozen():
    with pytest.raises(dataclasses.FrozenInstanceError):
        SHIPPED[0].name = "other"  # type: ignore[misc]


@pytest.mark.parametrize("entry", SHIPPED, ids=lambda s: s.name)
def test_files_and_citation_notes_exist(entry: ShippedSet):
    assert entry.path.parent == Path(earfold.hrtf_sets.__file__).resolve().parent
    assert entry.path.is_file()
    assert entry.notes_path.is_file()
    notes = entry.notes_path.read_text(encoding="utf-8")
    # The note carries the citation: first author's surname and the year.
    first_author = entry.citation.split(",")[0]
    year = entry.citation.split("(")[1][:4]
    assert first_author in notes and year in notes
    assert entry.title and entry.licence and entry.description


@pytest.mark.parametrize("entry", SHIPPED, ids=lambda s: s.name)
def test_every_shipped_set_loads(entry: ShippedSet):
    data = read_sofa(entry.path)
    assert data.convention == "SimpleFreeFieldHRIR"
    assert data.ir.ndim == 3 and data.ir.shape[1] == 2
    assert data.directions.shape == (data.ir.shape[0], 3)
    assert np.all(np.isfinite(data.ir))


def test_catalogue_imports_without_netcdf4():
    # netCDF4 is blocked in a fresh interpreter: the catalogue must still import, so that
    # listing sets never needs the SOFA reader.
    code = (
        "import sys; sys.modules['netCDF4'] = None; sys.modules['soundfile'] = None\n"
        "import earfold.hrtf_sets\n"
        "print(len(earfold.hrtf_sets.list_shipped()))\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], cwd=REPO_ROOT, capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == str(len(SHIPPED))


# -- the KEMAR set ------------------------------------------------------------------------


def test_kemar_itd_at_90_degrees():
    data = read_sofa(get_shipped("mit-kemar").path)
    left = nearest(data, 90.0)
    right = nearest(data, -90.0)
    # Measured dummy-head ITD at 90 degrees: about 0.6-0.75 ms (common practice;
    # REFERENCES.md), left ear leading for a source on the left.
    for index, sign in ((left, 1.0), (right, -1.0)):
        itd = sign * interaural_time_difference(data.ir[index], data.samplerate)
        assert 0.6e-3 < itd < 0.75e-3
        xcorr = sign * cross_correlation_itd(data.ir[index], data.samplerate)
        assert 0.6e-3 < xcorr < 0.75e-3


@pytest.mark.shared
@pytest.mark.parametrize("filename", ["MIT_KEMAR_large_pinna.sofa", "hrtf_c_nh898.sofa"])
def test_measured_set_itd_at_90_degrees(shared_sofa_dir: Path, filename: str):
    # The other KEMAR (large pinna) and one human subject of the ARI database
    # (../shared/sofa/README.md): ITD at 90 degrees about 0.6-0.75 ms (common practice).
    data = read_sofa(shared_sofa_dir / "measured" / filename)
    for azimuth, sign in ((90.0, 1.0), (-90.0, -1.0)):
        itd = sign * interaural_time_difference(data.ir[nearest(data, azimuth)], data.samplerate)
        assert 0.6e-3 < itd < 0.75e-3


# -- the rigid-sphere set -------------------------------------------------------------------


def test_sphere_set_names_its_model_and_parameters():
    attrs = read_sofa(get_shipped("rigid-sphere").path).attributes
    assert "Duda" in attrs["References"] and "1998" in attrs["References"]
    assert "0.0875 m" in attrs["Comment"] and "343.0 m/s" in attrs["Comment"]


def test_sphere_set_onset_itd_follows_woodworth():
    data = read_sofa(get_shipped("rigid-sphere").path)
    for azimuth in (20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0, 90.0):
        index = nearest(data, azimuth)
        assert_allclose(data.directions[index], direction_to_vector(azimuth, 0.0), atol=1e-9)
        theta = np.radians(azimuth)
        # Woodworth (a/c)(theta + sin theta), a = 8.75 cm, c = 343 m/s (REFERENCES.md).
        woodworth = A / C * (theta + np.sin(theta))
        itd = interaural_time_difference(data.ir[index], data.samplerate)
        assert_allclose(itd, woodworth, rtol=0.10)


def test_regenerated_sphere_set_matches_the_shipped_file(tmp_path: Path):
    out = tmp_path / "sphere.sofa"
    assert sphere_main([str(out)]) == 0
    fresh = read_sofa(out)
    shipped = read_sofa(get_shipped("rigid-sphere").path)
    assert fresh.samplerate == shipped.samplerate
    assert_allclose(fresh.directions, shipped.directions, atol=1e-12)
    assert_allclose(fresh.ir, shipped.ir, rtol=1e-12, atol=1e-15)


def test_generator_reports_bad_arguments_without_traceback(tmp_path: Path, capsys):
    assert sphere_main([str(tmp_path / "x.sofa"), "--grid", "7"]) == 2
    assert "grid spacing must divide 90 degrees" in capsys.readouterr().err
    assert not (tmp_path / "x.sofa").exists()
