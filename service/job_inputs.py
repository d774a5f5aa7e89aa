"""What a render job's options name by id or carry inline, turned into files for its child.

The renderer takes a room and a headphone EQ as files (``--room FILE.json``,
``--headphone-eq FILE``); over HTTP a room may be a room object and a headphone EQ an
uploaded file's id. :func:`resolve_job_inputs` rewrites a job's options for the child
process, as the worker does for an uploaded HRTF set's id:

* a room object is written to ``room-N.json`` in the job's folder (its name kept, or
  "custom" as a layout object's is) and the option becomes that file's path;
* an uploaded headphone EQ's id becomes the stored file's path.

Every path put in is mapped to the user's name in ``names``, so messages and the report
name the user's file, never a server path.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .storage import Storage, valid_id, write_json_atomic

__all__ = ["HEADPHONE_EQ_KIND", "resolve_job_inputs"]

#: Storage kind (folder) of uploaded headphone EQ files.
HEADPHONE_EQ_KIND = "headphone-eq"


def resolve_job_inputs(
    storage: Storage, options: dict[str, Any], folder: Path, names: dict[str, str], index: int = 0
) -> dict[str, Any]:
    """``options`` with a room object and an uploaded headphone EQ's id as file paths.

    Parameters
    ----------
    storage : Storage
    options : dict
        A render job's options (JSON); not changed.
    folder : Path
        The job's folder: a room object's file goes there.
    names : dict
        Stored path or name -> the user's name; updated in place.
    index : int
        Number of the variant (a comparison writes one room file per variant).

    Raises
    ------
    Problem
        404 if the headphone EQ was deleted since the job was queued (the worker fails
        the job with its message).
    """
    out = dict(options)
    room = out.get("room")
    if isinstance(room, dict):
        data = {**room, "name": room.get("name") or "custom"}
        path = folder / f"room-{index}.json"
        folder.mkdir(parents=True, exist_ok=True)
        write_json_atomic(path, data)
        out["room"] = str(path)
        names[str(path)] = f"room object {data['name']!r}"
    eq = out.get("headphone_eq")
    if isinstance(eq, str) and valid_id(eq):
        meta = storage.read_meta(HEADPHONE_EQ_KIND, eq)
        path = storage.path(HEADPHONE_EQ_KIND, eq) / meta["stored"]
        out["headphone_eq"] = str(path)
        names[str(path)] = meta["name"]
        names[meta["stored"]] = meta["name"]
    return out
