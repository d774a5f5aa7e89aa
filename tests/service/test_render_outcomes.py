"""How a render ends, as the job and its report tell it: a full disk is its own outcome
(failed at once, nothing kept), and every message shows the names the user uploaded."""

from __future__ import annotations

import sys
import textwrap
from types import SimpleNamespace

import numpy as np
import pytest
from stem_factory import FS, files_field, write_mono_set, write_stem

from earfold.renderer.files import write_json_atomic
from earfold.renderer.io import read_audio, write_audio
from earfold.service.jobs.render_child import clean_tree, disk_full
from earfold.service.jobs.worker import Worker, child_spec, output_paths

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}

#: Render children that run the real child with one fault injected (the disk fills up).
_PRELUDE = """
import errno, os, sys
from earfold.renderer.io import _writer
from earfold.service.jobs import render_child
"""
FAULTS = {
    # the audio library's write fails with the system's reason
    "while writing the audio": """
original = _writer.OutputWriter.write
def write(self, block):
    original(self, block)
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
_writer.OutputWriter.write = write
""",
    # the audio is finished, the report does not fit any more
    "while writing the report": """
def write_json_atomic(path, data):
    raise OSError(errno.EDQUOT, os.strerror(errno.EDQUOT))
render_child.write_json_atomic = write_json_atomic
""",
    # a failed write that gives no reason, on a disk with no space left
    "with no reason given": """
import shutil, collections
original = _writer.OutputWriter.write
def write(self, block):
    original(self, block)
    raise RuntimeError("Error writing frames")
_writer.OutputWriter.write = write
Usage = collections.namedtuple("Usage", "total used free")
shutil.disk_usage = lambda path: Usage(10**9, 10**9, 0)
""",
}


def _child(fault: str) -> list[str]:
    code = _PRELUDE + textwrap.dedent(FAULTS[fault]) + "\nsys.exit(render_child.main())\n"
    return [sys.executable, "-c", code]


def _worker(client) -> Worker:
    return Worker(client.app.state.settings, queue=client.app.state.queue, name="test-worker")


@pytest.mark.parametrize("fault", sorted(FAULTS))
def test_a_full_disk_fails_the_render_at_once_and_keeps_nothing(make_client, tmp_path, fault):
    client = make_client(**FAST, max_attempts=3)
    path = write_stem(tmp_path / "take.wav", FS // 2, 2)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0"}).json()
    worker = _worker(client)
    worker.child_command = _child(fault)
    worker.run(once=True)
    view = client.get(f"/v1/renders/{job['id']}").json()
    # not a crash: failed on the first attempt, not put back for another
    assert view["state"] == "failed", view
    assert view["attempts"] == 1, view
    assert "disk" in view["message"] and "full" in view["message"], view["message"]
    assert "damaged" not in view["message"] and "died" not in view["message"]
    folder = client.app.state.storage.path("renders", job["id"])
    left = sorted(p.name for p in folder.iterdir()) if folder.exists() else []
    assert left == [], left  # no output, no report, no .part


def test_disk_full_is_told_apart_from_other_failures(tmp_path):
    import errno

    assert disk_full(OSError(errno.ENOSPC, "x"))
    assert disk_full(OSError(errno.EDQUOT, "x"))
    wrapped = ValueError("cannot write 'out.wav': No space left on device")
    assert disk_full(wrapped)
    try:
        try:
            raise OSError(errno.ENOSPC, "x")
        except OSError as inner:
            raise RuntimeError("Error writing") from inner
    except RuntimeError as outer:
        assert disk_full(outer)
    assert not disk_full(OSError(errno.EACCES, "Permission denied"))
    assert not disk_full(RuntimeError("Error writing"), tmp_path)  # this disk has room


def test_report_warnings_show_the_uploaded_names_not_the_stored_ones(make_client, tmp_path):
    client = make_client(**FAST)
    # two mono files of different lengths: the renderer warns, naming the shorter file
    paths = write_mono_set(tmp_path, "2.0", FS // 4, prefix="session")
    short, _ = read_audio(paths[1])
    write_audio(paths[1], np.ascontiguousarray(short[: FS // 8]), FS)
    stem = client.post("/v1/stems", files=files_field(paths)).json()
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0"}).json()
    _worker(client).run(once=True)
    view = client.get(f"/v1/renders/{job['id']}").json()
    assert view["state"] == "done", view
    report = client.get(f"/v1/renders/{job['id']}/report").json()
    text = " ".join(report["warnings"])
    assert "padded with silence" in text, report["warnings"]
    assert "session.R.wav" in text, text
    stored = [f["stored"] for f in client.app.state.storage.read_meta("stems", stem["id"])["files"]]
    storage_root = str(client.app.state.storage.root)
    for body in (report, view):
        dumped = repr(body)
        assert storage_root not in dumped
        for name in stored:
            assert f"'{name}'" not in dumped and f" {name}" not in dumped, (name, dumped)


def test_an_uploaded_hrtf_set_is_named_as_uploaded_in_messages(make_client, tmp_path):
    client = make_client(**FAST)
    storage = client.app.state.storage
    path = write_stem(tmp_path / "take.wav", FS // 10, 2)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    hrtf_id = "0123456789abcdef0123456789abcdef"
    folder = storage.path("hrtf", hrtf_id)
    folder.mkdir(parents=True)
    write_json_atomic(
        folder / "meta.json", {"id": hrtf_id, "stored": f"{hrtf_id}.sofa", "name": "my-ears.sofa"}
    )
    job = SimpleNamespace(  # what child_spec reads of a job
        id="fedcba9876543210fedcba9876543210",
        payload={"stem_id": stem["id"], "hrtf_id": hrtf_id, "options": {"layout": "2.0"}},
    )
    spec = child_spec(storage, job)
    message = {
        "warnings": [f"HRTF set '{hrtf_id}.sofa' already holds room responses"],
        "hrtf": {"file": spec["options"]["hrtf"]},
    }
    cleaned = clean_tree(message, spec["names"])
    assert cleaned["warnings"] == ["HRTF set 'my-ears.sofa' already holds room responses"]
    assert cleaned["hrtf"]["file"] == "my-ears.sofa"
    assert output_paths(storage, job)[0].name == "output.wav"


def test_a_full_disk_fails_a_comparison_build_at_once_and_keeps_no_trial_audio(
    make_client, tmp_path
):
    client = make_client(**FAST, max_attempts=3)
    path = write_stem(tmp_path / "take.wav", FS * 3, 2)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "2.0"}, {"layout": "2.0", "room": "small"}],
        "trials": 2,
        "excerpt": {"start": 0.5, "length": 1.0},
    }
    cid = client.post("/v1/comparisons", json=body).json()["id"]
    worker = _worker(client)
    # the second trial file does not fit on the disk any more
    worker.comparison_command = [
        sys.executable,
        "-c",
        textwrap.dedent(
            """
            import errno, os, sys
            import earfold.renderer.io as io
            original = io.write_audio
            def write_audio(path, *args, **kwargs):
                # by name, not by count: the trial files may be written by several processes
                if os.path.basename(str(path)) == "1.wav" and "audio" in str(path):
                    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
                return original(path, *args, **kwargs)
            io.write_audio = write_audio
            from earfold.service.comparisons import build_child
            sys.exit(build_child.main())
            """
        ),
    ]
    worker.run(once=True)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "failed", view
    assert "disk" in view["message"] and "full" in view["message"], view["message"]
    job = client.app.state.queue.get(cid)  # a build job has its comparison's id
    assert job.attempts == 1 and job.state.value == "failed", job
    folder = client.app.state.storage.path("comparisons", cid)
    assert not (folder / "audio").exists()
    assert not (folder / "prepared.json").exists()
