"""Reading a user's SOFA file in a separate process with a time and a memory limit.

A SOFA file is HDF5, parsed by a C library. A damaged or forged file can make that library
loop forever or allocate without bound, which no check in Python can stop once the call
has started. So a file the user names is read by a child process: ``python -m
earfold.renderer.hrtf.guard``, which limits its own address space (``RLIMIT_AS``) before
it imports netCDF4, runs :func:`~earfold.renderer.hrtf.read_sofa`, and hands back the
normalised arrays in a temporary ``.npz`` file (loaded with ``allow_pickle=False``: plain
numeric arrays only) and the rest as one JSON line on its standard output. The parent
waits at most a wall-clock time limit and kills the child when it runs over.

The sets shipped with the project are trusted and read directly
(:func:`is_shipped`).
"""

from __future__ import annotations

import importlib.util
import json
import os
import signal
import subprocess
import sys
import tempfile
import types
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import SofaError
from ._sofa_data import SofaData
from ._sofa_read import check_file

__all__ = ["READ_MEMORY_BYTES", "READ_TIMEOUT_S", "is_shipped", "read_sofa_guarded"]

#: Wall-clock seconds a child may take to read one SOFA file. The largest sets in use read
#: in about a second; a file that takes this long is looping.
READ_TIMEOUT_S = 60.0

#: Address space (bytes) of the reading child: its interpreter and libraries (some 300 MB)
#: plus the largest ``Data.IR`` accepted, read and converted (2 x 256 MiB).
READ_MEMORY_BYTES = 2 * 2**30

_ARRAYS = ("ir", "delay", "directions", "distances")
_FIELDS = (
    "convention",
    "convention_version",
    "sofa_version",
    "data_type",
    "room_type",
    "samplerate",
    "emitter",
)


def _label(path: str) -> str:
    return repr(os.path.basename(path) or path)


def is_shipped(path: str | os.PathLike[str]) -> bool:
    """True for a file in the folder of the HRTF sets shipped with the project (trusted)."""
    spec = importlib.util.find_spec("earfold.hrtf_sets")
    if spec is None or not spec.submodule_search_locations:
        return False
    try:
        target = Path(os.fspath(path)).resolve()
    except OSError:
        return False
    for folder in spec.submodule_search_locations:
        if target.parent == Path(folder).resolve():
            return True
    return False


def read_sofa_guarded(
    path: str | os.PathLike[str],
    *,
    emitter: int | None = None,
    timeout_s: float = READ_TIMEOUT_S,
    memory_bytes: int = READ_MEMORY_BYTES,
) -> SofaData:
    """:func:`~earfold.renderer.hrtf.read_sofa` in a child process with limits.

    Parameters
    ----------
    path : str or os.PathLike
        The SOFA file.
    emitter : int, optional
        As for :func:`~earfold.renderer.hrtf.read_sofa`.
    timeout_s : float
        Wall-clock seconds before the child is killed.
    memory_bytes : int
        The child's address-space limit.

    Returns
    -------
    SofaData
        As :func:`~earfold.renderer.hrtf.read_sofa` returns it.

    Raises
    ------
    SofaError
        The reader's own message, or one line naming the file and saying that reading it
        took too long or too much memory, or crashed the reader: the file is probably
        damaged.
    """
    p = os.fsdecode(os.fspath(path))
    label = _label(p)
    if emitter is not None and (
        isinstance(emitter, bool) or not isinstance(emitter, (int, np.integer))
    ):
        raise SofaError(f"{label}: emitter must be an integer index or None, got {emitter!r}")
    check_file(p, label)  # cheap refusals (missing, not a regular file, too big, no signature)
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    with tempfile.TemporaryDirectory(prefix="earfold-sofa-") as folder:
        out = os.path.join(folder, "read.npz")
        command = [sys.executable, "-m", __name__, p, out, str(int(memory_bytes))]
        if emitter is not None:
            command.append(str(int(emitter)))
        try:
            proc = subprocess.run(
                command, capture_output=True, text=True, timeout=timeout_s, env=env, check=False
            )
        except subprocess.TimeoutExpired:  # subprocess.run has killed the child
            raise SofaError(
                f"{label}: reading the file took longer than {timeout_s:g} s and was stopped; "
                "the file is probably damaged"
            ) from None
        answer = _answer(proc.stdout)
        if answer is not None and "error" in answer:
            raise SofaError(str(answer["error"]))
        if answer is not None and "ok" in answer and proc.returncode == 0:
            return _data(p, answer["ok"], out, label)
    if "MemoryError" in proc.stderr or proc.returncode == -signal.SIGKILL:
        raise SofaError(
            f"{label}: reading the file needed more than {memory_bytes / 2**20:.0f} MiB of "
            "memory and was stopped; the file is probably damaged"
        )
    how = f"signal {-proc.returncode}" if proc.returncode < 0 else f"exit status {proc.returncode}"
    raise SofaError(
        f"{label}: the SOFA reader crashed on this file ({how}); the file is probably damaged"
    )


def _answer(stdout: str) -> dict[str, Any] | None:
    for line in reversed(stdout.splitlines()):
        try:
            msg = json.loads(line)
        except ValueError:
            continue
        if isinstance(msg, dict):
            return msg
    return None


def _data(path: str, fields: dict[str, Any], npz: str, label: str) -> SofaData:
    try:
        with np.load(npz, allow_pickle=False) as arrays:
            loaded = {k: np.asarray(arrays[k], dtype=np.float64) for k in _ARRAYS}
    except (OSError, KeyError, ValueError) as exc:
        raise SofaError(f"{label}: the reading process returned no usable data ({exc})") from None
    for arr in loaded.values():
        arr.setflags(write=False)
    return SofaData(
        path=path,
        convention=str(fields["convention"]),
        convention_version=str(fields["convention_version"]),
        sofa_version=str(fields["sofa_version"]),
        data_type=str(fields["data_type"]),
        room_type=str(fields["room_type"]),
        samplerate=float(fields["samplerate"]),
        ir=loaded["ir"],
        delay=loaded["delay"],
        directions=loaded["directions"],
        distances=loaded["distances"],
        emitter=None if fields["emitter"] is None else int(fields["emitter"]),
        attributes=types.MappingProxyType(
            {str(k): str(v) for k, v in fields["attributes"].items()}
        ),
        warnings=tuple(str(w) for w in fields["warnings"]),
    )


def _child(path: str, out: str, memory_bytes: int, emitter: int | None) -> int:
    """Read ``path`` under the limit; write the arrays to ``out``, one JSON line to stdout."""
    import resource

    # A limit can only be lowered: under a parent that is itself limited, keep the lower.
    _soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    if hard != resource.RLIM_INFINITY:
        memory_bytes = min(memory_bytes, hard)
    resource.setrlimit(resource.RLIMIT_AS, (memory_bytes, memory_bytes))
    label = _label(path)
    try:
        from ..errors import RendererError
        from .sofa import read_sofa

        data = read_sofa(path, emitter=emitter)
        np.savez(out, **{k: getattr(data, k) for k in _ARRAYS})
    except RendererError as exc:
        print(json.dumps({"error": str(exc)}))
        return 2
    except MemoryError:
        print(
            json.dumps(
                {
                    "error": f"{label}: reading the file needed more than "
                    f"{memory_bytes / 2**20:.0f} MiB of memory and was stopped; the file is "
                    "probably damaged"
                }
            )
        )
        return 2
    except Exception as exc:  # any other failure of the C library is the file's fault too
        text = " ".join(str(exc).split())[:200]
        print(
            json.dumps({"error": f"{label}: cannot be read as SOFA ({type(exc).__name__}: {text})"})
        )
        return 2
    fields: dict[str, Any] = {k: getattr(data, k) for k in _FIELDS}
    fields["attributes"] = dict(data.attributes)
    fields["warnings"] = list(data.warnings)
    print(json.dumps({"ok": fields}))
    return 0


if __name__ == "__main__":
    sys.exit(
        _child(
            sys.argv[1],
            sys.argv[2],
            int(sys.argv[3]),
            int(sys.argv[4]) if len(sys.argv) > 4 else None,
        )
    )
