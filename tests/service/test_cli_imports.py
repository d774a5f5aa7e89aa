"""The command line stays lean: only ``serve`` and ``worker`` load the web and queue stack.

Each command runs in a fresh interpreter through the CLI's ``main``; at exit the test
reads which modules were loaded. A render from cached filters and a loudness measurement
load no part of scipy but ``scipy.fft`` (and what it takes); a render that prepares filters
filters with ``scipy.signal``, whose own import would load all of ``scipy.stats``: the
renderer imports it with ``scipy.stats`` deferred to a first use that a render never makes
(``earfold.renderer.signals.scipy_signal``).
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from earfold.renderer.io import write_audio

#: Packages of the web and queue stack, and the service's own web and queue modules.
WEB_AND_QUEUE = (
    "fastapi",
    "starlette",
    "uvicorn",
    "pydantic",
    "pydantic_core",
    "dramatiq",
    "redis",
    "httpx",
    "anyio",
    "python_multipart",
    "multipart",
    "swagger_ui_bundle",
)
OUR_WEB_AND_QUEUE = (
    "earfold.service.app",
    "earfold.service.routes",
    "earfold.service.jobs",
    "earfold.service.problems",
    "earfold.service.storage",
)

_RUN = """
import json, sys
from earfold.service.cli import main
rc = main(sys.argv[2:])
with open(sys.argv[1], "w") as fh:
    json.dump({"rc": rc, "modules": sorted(sys.modules)}, fh)
"""


def _modules_after(tmp_path, *args: str) -> list[str]:
    out = tmp_path / "modules.json"
    proc = subprocess.run(
        [sys.executable, "-c", _RUN, str(out), *args],
        capture_output=True,
        text=True,
        timeout=180,
        cwd=tmp_path,
    )
    assert proc.returncode == 0, proc.stderr
    result = json.loads(out.read_text())
    assert result["rc"] == 0, proc.stderr
    return result["modules"]


def _heavy(modules: list[str]) -> list[str]:
    return [
        m
        for m in modules
        if m.split(".")[0] in WEB_AND_QUEUE
        or any(m == ours or m.startswith(ours + ".") for ours in OUR_WEB_AND_QUEUE)
    ]


@pytest.fixture
def stem(tmp_path):
    rate = 48000
    t = np.arange(int(0.2 * rate)) / rate
    data = np.stack([0.1 * np.sin(2 * np.pi * 440 * t), 0.1 * np.sin(2 * np.pi * 660 * t)], 1)
    path = tmp_path / "tiny.wav"
    write_audio(path, data.astype(np.float32), rate)
    return path


@pytest.mark.parametrize("args", [["layouts"], ["rooms"], ["hrtf", "list"]])
def test_listings_load_no_web_or_queue_module(tmp_path, args):
    modules = _modules_after(tmp_path, *args)
    assert _heavy(modules) == []
    # Nor the signal library: the renderer imports it only in the functions that filter.
    assert "scipy.signal" not in modules and "scipy.stats" not in modules


def test_render_loads_no_web_or_queue_module(tmp_path, stem):
    out = tmp_path / "tiny.bin.wav"
    modules = _modules_after(tmp_path, "render", str(stem), "-o", str(out), "--layout", "2.0")
    assert out.is_file()
    assert "earfold.renderer.render" in modules  # the render did run in that interpreter
    assert _heavy(modules) == []


#: What a render from cached filters never needs: filter design, the limiter's running
#: maximum (it is bypassed here), the direction grid, the SOFA reader, and what they load.
NOT_FOR_A_CACHED_RENDER = (
    "scipy.signal",
    "scipy.ndimage",
    "scipy.spatial",
    "scipy.interpolate",
    "scipy.optimize",
    "scipy.stats",
    "netCDF4",
)


def _stats(modules: list[str]) -> list[str]:
    return [m for m in modules if m == "scipy.stats" or m.startswith("scipy.stats.")]


@pytest.mark.parametrize("extra", [[], ["--room", "small"]])
def test_a_render_that_prepares_filters_loads_scipy_signal_but_not_scipy_stats(
    tmp_path, stem, extra
):
    out = tmp_path / "tiny.bin.wav"
    args = ["render", str(stem), "-o", str(out), "--layout", "2.0", "--no-cache", *extra]
    modules = _modules_after(tmp_path, *args)
    assert out.is_file()
    assert "scipy.signal" in modules  # it filtered: the check below means something
    assert _stats(modules) == []


@pytest.mark.parametrize("extra", [["--layout", "2.0"], ["--layout", "5.1", "--room", "small"]])
def test_a_repeated_render_loads_only_what_it_computes_with(tmp_path, extra, monkeypatch):
    monkeypatch.setenv("EARFOLD_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("EARFOLD_NO_CACHE", raising=False)
    rate = 48000
    channels = 2 if "2.0" in extra else 6
    noise = 0.05 * np.random.default_rng(3).standard_normal((rate // 2, channels))
    stem = tmp_path / "stem.wav"
    write_audio(stem, noise.astype(np.float32), rate)
    first = _modules_after(tmp_path, "render", str(stem), "-o", str(tmp_path / "a.wav"), *extra)
    again = _modules_after(tmp_path, "render", str(stem), "-o", str(tmp_path / "b.wav"), *extra)
    assert "scipy.signal" in first  # the first render prepared its filters
    assert (tmp_path / "a.wav").read_bytes() == (tmp_path / "b.wav").read_bytes()
    assert "scipy.fft" in again and "earfold.renderer.render" in again
    assert [
        m
        for m in again
        if m.split(".")[0] == "netCDF4"
        or any(m == heavy or m.startswith(heavy + ".") for heavy in NOT_FOR_A_CACHED_RENDER)
    ] == []


def test_loudness_loads_no_scipy_signal_or_stats(tmp_path, stem):
    modules = _modules_after(tmp_path, "loudness", str(stem), "--json")
    assert "earfold.renderer.loudness" in modules
    assert "scipy.signal" not in modules and _stats(modules) == []


_DEFERRED = """
import json, sys
import numpy as np
if sys.argv[1] == "deferred":
    from earfold.service.cli_imports import import_signal_deferring_stats
    import_signal_deferring_stats()
import scipy.signal
before = "scipy.stats" in sys.modules
x = np.sin(np.linspace(0, 6 * np.pi, 500)) + np.linspace(0, 1, 500)
peaks = scipy.signal.find_peaks_cwt(x, np.arange(5, 30)).tolist()  # calls scoreatpercentile
import scipy.stats
print(json.dumps({"before": before, "peaks": peaks, "after": "scipy.stats" in sys.modules,
                  "real": scipy.stats.norm.cdf(0.0), "file": scipy.stats.__file__ is not None}))
"""


def test_deferred_stats_load_on_first_use_and_give_the_same_results(tmp_path):
    """scipy.signal imported with scipy.stats deferred: scipy.stats is absent until a
    function that needs it runs, then the real module loads and the result is the one a
    plain import gives."""
    out = {}
    for how in ("deferred", "plain"):
        proc = subprocess.run(
            [sys.executable, "-c", _DEFERRED, how],
            capture_output=True,
            text=True,
            timeout=120,
            cwd=tmp_path,
            check=True,
        )
        out[how] = json.loads(proc.stdout)
    assert out["deferred"]["before"] is False and out["plain"]["before"] is True
    assert out["deferred"]["peaks"] == out["plain"]["peaks"] != []
    assert out["deferred"]["after"] is True and out["deferred"]["real"] == 0.5
    assert out["deferred"]["file"] is True


def test_loudness_loads_no_web_or_queue_module(tmp_path, stem):
    assert _heavy(_modules_after(tmp_path, "loudness", str(stem), "--json")) == []


def test_the_check_itself_sees_the_web_stack(tmp_path):
    """The same probe after importing the app finds the stack: an empty list above means
    something."""
    code = _RUN.replace("rc = main(sys.argv[2:])", "import earfold.service.app\nrc = 0")
    out = tmp_path / "modules.json"
    subprocess.run([sys.executable, "-c", code, str(out)], check=True, timeout=120)
    heavy = _heavy(json.loads(out.read_text())["modules"])
    assert "fastapi" in heavy and "earfold.service.app" in heavy


def test_hrtf_inspect_and_demo_load_no_web_or_queue_module(tmp_path, repo_root):
    sofa = repo_root / "hrtf_sets" / "rigid_sphere.sofa"
    assert _heavy(_modules_after(tmp_path, "hrtf", "inspect", str(sofa), "--json")) == []
    assert _heavy(_modules_after(tmp_path, "demo", str(tmp_path / "demo"))) == []


def test_a_repeated_render_of_an_adm_master_loads_only_what_it_computes_with(tmp_path, monkeypatch):
    # A master of moving point objects, free field, from cached filters (the bed's feeds,
    # the moving engine's pair grid): no filter design, no scenes wing, no VBAP hull.
    sys.path.insert(0, str(__import__("pathlib").Path(__file__).parents[1] / "renderer"))
    from adm_factory import (  # the tests' masters
        audio_object,
        channel,
        chna_body,
        content,
        document,
        object_block,
        pack,
        programme,
        stream_and_track,
        write_master,
    )

    monkeypatch.setenv("EARFOLD_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("EARFOLD_NO_CACHE", raising=False)
    uid = "ATU_00000001"
    axml = document(
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", ["AO_1001"]),
        audio_object("AO_1001", "Kite", packs=["AP_00031001"], uids=[uid]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel(
            "AC_00031001",
            "Objects",
            [
                object_block(
                    "AC_00031001", 1, rtime="00:00:00.00000", duration="00:00:00.20000", az=60.0
                ),
                object_block(
                    "AC_00031001", 2, rtime="00:00:00.20000", duration="00:00:00.30000", az=-60.0
                ),
            ],
        ),
        stream_and_track("AC_00031001", "AP_00031001"),
    )
    noise = 0.05 * np.random.default_rng(3).standard_normal((24000, 1))
    master = write_master(
        tmp_path / "master.wav",
        audio=noise.astype(np.float32),
        chna=chna_body([(1, uid, "AT_00031001_01", "AP_00031001")]),
        axml=axml,
    )
    first = _modules_after(tmp_path, "render", str(master), "-o", str(tmp_path / "a.wav"))
    again = _modules_after(tmp_path, "render", str(master), "-o", str(tmp_path / "b.wav"))
    assert (tmp_path / "a.wav").read_bytes() == (tmp_path / "b.wav").read_bytes()
    assert "earfold.renderer.objects" in again and "earfold.renderer.render.adm_plan" in again
    assert "earfold.renderer.scenes" not in first and "earfold.renderer.scenes" not in again
    # An object at rest looks up its exact pair through the set's triangulation
    # (scipy.spatial), which the cache of lookups does not hold; nothing else heavy.
    heavy_here = [h for h in NOT_FOR_A_CACHED_RENDER if h != "scipy.spatial"]
    assert [
        m
        for m in again
        if m.split(".")[0] == "netCDF4"
        or any(m == heavy or m.startswith(heavy + ".") for heavy in heavy_here)
    ] == []
