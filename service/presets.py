"""Saved presets: named render settings or loudspeaker layouts, per owner.

A preset lives in ``DATA_DIR/presets/ID/meta.json``::

    {"id", "owner", "name", "kind": "settings" | "layout", "body": {...},
     "created", "updated", "created_ts", "updated_ts"}

A new preset is assembled in ``tmp/`` and renamed into place; a change replaces its
``meta.json`` by an atomic rename (:func:`earfold.service.files.write_json_atomic`), so a
reader never sees half a preset. Creating takes the owner's preset lock so two requests
at once cannot both pass the limit (:data:`MAX_PRESETS`). Presets are not swept by the
retention sweep: they are a few hundred bytes each, and at most :data:`MAX_PRESETS` per
owner.

This module only stores; checking a body against the render options or the layout
schema is the route's (:mod:`earfold.service.routes.presets`).
"""

from __future__ import annotations

import contextlib
import fcntl
import shutil
import time
from collections.abc import Iterator
from typing import Any

from .problems import CONFLICT, Problem
from .storage import META, Storage, new_id, write_json_atomic

__all__ = ["KIND", "MAX_PRESETS", "PRESET_KINDS", "PresetStore", "preset_view"]

#: Storage kind (folder) of presets.
KIND = "presets"

#: What a preset holds: render settings or a custom loudspeaker layout.
PRESET_KINDS = ("settings", "layout")

#: Most presets one owner keeps (a desk's list stays short enough to scan).
MAX_PRESETS = 200

_LOCK = ".lock"


def _iso(ts: float) -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(ts)) + f".{int(ts % 1 * 1000):03d}Z"


def preset_view(meta: dict[str, Any]) -> dict[str, Any]:
    """The public JSON of a preset (no owner)."""
    return {k: meta[k] for k in ("id", "name", "kind", "body", "created", "updated")}


class PresetStore:
    """The presets of a data directory."""

    def __init__(self, storage: Storage) -> None:
        self.storage = storage

    @contextlib.contextmanager
    def _locked(self) -> Iterator[None]:
        # One lock for the folder: creating is rare, and the limit is per owner but the
        # count is a scan of the folder anyway.
        with open(self.storage.root / KIND / _LOCK, "a+") as fh:
            fcntl.flock(fh, fcntl.LOCK_EX)
            try:
                yield
            finally:
                fcntl.flock(fh, fcntl.LOCK_UN)

    def list(self, owner: str) -> list[dict[str, Any]]:
        """The owner's presets, by name (case-insensitive), then by creation."""
        metas = self.storage.list_meta(KIND, owner)
        return sorted(metas, key=lambda m: (m["name"].casefold(), m["created_ts"]))

    def get(self, preset_id: str, owner: str) -> dict[str, Any]:
        """One preset's record; 404 if absent or someone else's."""
        return self.storage.read_meta(KIND, preset_id, owner)

    def create(self, owner: str, name: str, kind: str, body: dict[str, Any]) -> dict[str, Any]:
        """Store a new preset; 409 if the owner already keeps :data:`MAX_PRESETS`."""
        with self._locked():
            count = sum(1 for _ in self.storage.list_meta(KIND, owner))
            if count >= MAX_PRESETS:
                raise Problem(
                    CONFLICT,
                    f"you keep {count} presets, the most this server keeps per owner is "
                    f"{MAX_PRESETS}; delete some (DELETE /v1/presets/ID) first",
                )
            now = time.time()
            meta = {
                "id": new_id(),
                "owner": owner,
                "name": name,
                "kind": kind,
                "body": body,
                "created": _iso(now),
                "updated": _iso(now),
                "created_ts": now,
                "updated_ts": now,
            }
            tmp = self.storage.new_tmp()
            try:
                write_json_atomic(tmp / META, meta)
                self.storage.commit(tmp, KIND, str(meta["id"]))
            except BaseException:
                shutil.rmtree(tmp, ignore_errors=True)
                raise
        return meta

    def replace(
        self, preset_id: str, owner: str, name: str, kind: str, body: dict[str, Any]
    ) -> dict[str, Any]:
        """Replace a preset's name, kind and body (atomically); 404 if not the owner's."""
        with self._locked():
            meta = self.get(preset_id, owner)
            now = time.time()
            meta.update(name=name, kind=kind, body=body, updated=_iso(now), updated_ts=now)
            write_json_atomic(self.storage.path(KIND, preset_id) / META, meta)
        return meta

    def delete(self, preset_id: str, owner: str) -> None:
        """Remove a preset; 404 if absent or someone else's."""
        self.get(preset_id, owner)
        self.storage.delete(KIND, preset_id)
