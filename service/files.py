"""Writing a file whole or not at all: the service's one write-then-rename helper.

A reader (another API process, a worker, a person's download) never sees half a file:
the content goes to a hidden temporary name beside the target (same folder, so the same
volume) and is renamed over the target when complete. An interrupted write leaves only a
``.NAME.XXXXXXXX.part`` file, which the job sweep removes. No dependencies beyond the
standard library, so the command line can use it without importing the web stack.
"""

from __future__ import annotations

import json
import os
import uuid
from pathlib import Path

__all__ = ["atomic_write_bytes", "atomic_write_text", "write_json_atomic"]


def _temporary(path: Path) -> Path:
    # a random part: two writers of one target never share a temporary file
    return path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.part")


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> None:
    """Write ``data`` under a temporary name beside ``path``, then rename it over ``path``.

    Parameters
    ----------
    path : path-like
        The target; its folder must exist.
    data : bytes
        The whole content.
    """
    target = Path(path)
    tmp = _temporary(target)
    try:
        tmp.write_bytes(data)
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def atomic_write_text(path: str | os.PathLike[str], text: str) -> None:
    """:func:`atomic_write_bytes` of ``text`` in UTF-8."""
    atomic_write_bytes(path, text.encode("utf-8"))


def write_json_atomic(path: str | os.PathLike[str], data: object) -> None:
    """Write ``data`` as indented JSON (with a final newline), whole or not at all."""
    atomic_write_text(path, json.dumps(data, indent=2) + "\n")
