"""Validate an uploaded SOFA file in a separate, limited process.

A SOFA file is HDF5, parsed by a C library; a hostile or broken file could crash it,
spin, or allocate without bound. So the API never opens an upload itself: it runs
``python -m earfold.service.hrtf_check FILE`` under a time limit (killed when it runs over) and
an address-space limit (``RLIMIT_AS``, set by the child on itself before it imports
netCDF4), and reads one JSON line back. The child checks exactly what a render would
use: :func:`earfold.renderer.hrtf.sofa.read_sofa` then
:meth:`earfold.renderer.hrtf.hrir.HrirSet.from_sofa`.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import dataclass


class HrtfCheckFailed(Exception):
    """The file cannot be used as an HRTF set; the message says why."""


@dataclass(frozen=True)
class HrtfSummary:
    convention: str
    measurements: int
    samplerate: float
    taps: int
    room_type: str
    dropped: int
    sha256: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def check_sofa(
    path: str | os.PathLike, display_name: str, *, timeout_s: float, memory_bytes: int
) -> HrtfSummary:
    """Read ``path`` as a render would, in a child process with limits.

    Raises
    ------
    HrtfCheckFailed
        With the reader's message (``display_name`` in place of the stored path), or
        saying the check ran out of time or memory, or that the reader crashed.
    """
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    try:
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "earfold.service.hrtf_check",
                os.fspath(path),
                str(memory_bytes),
            ],
            capture_output=True,
            text=True,
            timeout=timeout_s,
            env=env,
        )
    except subprocess.TimeoutExpired:
        raise HrtfCheckFailed(
            f"{display_name!r}: reading the file took longer than "
            f"{timeout_s:g} s and was stopped; it is not a usable SOFA file"
        ) from None
    stored = os.path.basename(os.fspath(path))
    for line in reversed(proc.stdout.splitlines()):
        try:
            msg = json.loads(line)
        except ValueError:
            continue
        if "error" in msg:
            raise HrtfCheckFailed(
                msg["error"]
                .replace(repr(os.fspath(path)), repr(display_name))
                .replace(repr(stored), repr(display_name))
                .replace(stored, display_name)
            )
        if "ok" in msg:
            return HrtfSummary(**msg["ok"])
    if "MemoryError" in proc.stderr:
        raise HrtfCheckFailed(
            f"{display_name!r}: reading the file needed more than "
            f"{memory_bytes / 2**20:.0f} MB of memory; it is not usable here"
        )
    raise HrtfCheckFailed(
        f"{display_name!r}: the SOFA reader failed on this file (exit status "
        f"{proc.returncode}); it is damaged or not a SOFA file"
    )


def _child(path: str, memory_bytes: int) -> int:
    import resource

    resource.setrlimit(resource.RLIMIT_AS, (memory_bytes, memory_bytes))
    try:
        from earfold.renderer.errors import RendererError
        from earfold.renderer.hrtf import HrirSet, file_sha256, read_sofa

        data = read_sofa(path)
        hset = HrirSet.from_sofa(data, sha256=file_sha256(path))
    except RendererError as exc:
        print(json.dumps({"error": str(exc)}))
        return 2
    except MemoryError:
        print(
            json.dumps(
                {
                    "error": f"{os.path.basename(path)!r}: reading the file needed more "
                    f"than {memory_bytes / 2**20:.0f} MB of memory"
                }
            )
        )
        return 2
    except Exception as exc:  # any other failure of the C library is the file's fault too
        print(
            json.dumps(
                {
                    "error": f"{os.path.basename(path)!r}: cannot be read as SOFA "
                    f"({type(exc).__name__}: {exc})"
                }
            )
        )
        return 2
    print(
        json.dumps(
            {
                "ok": {
                    "convention": data.convention,
                    "measurements": hset.measurements,
                    "samplerate": hset.samplerate,
                    "taps": hset.taps,
                    "room_type": hset.room_type,
                    "dropped": hset.dropped,
                    "sha256": hset.sha256,
                }
            }
        )
    )
    return 0


if __name__ == "__main__":
    sys.exit(_child(sys.argv[1], int(sys.argv[2])))
