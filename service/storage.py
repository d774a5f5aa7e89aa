"""Where the service keeps files: ``DATA_DIR/{stems,renders,hrtf,comparisons,presets,
headphone-eq,tmp}/ID/...``.

Ids are uuid4 hex, made here and checked with a full-match pattern before they touch a
path; a user's file name is metadata only. Objects are assembled in ``tmp/`` and renamed
into place, so a crash or a failed upload never leaves half an object under its id.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import time
import uuid
from collections.abc import Iterator
from pathlib import Path

from .files import write_json_atomic
from .problems import NO_SPACE, NOT_FOUND, Problem

__all__ = ["KINDS", "META", "Storage", "new_id", "valid_id", "write_json_atomic"]

#: Kinds of stored object, one folder each (DESIGN.md, "Storage").
KINDS = ("stems", "renders", "hrtf", "comparisons", "presets", "headphone-eq")

_ID = re.compile(r"[0-9a-f]{32}")

#: Name of each object's metadata file.
META = "meta.json"


def new_id() -> str:
    """A fresh random id (uuid4 hex, 32 characters)."""
    return uuid.uuid4().hex


def valid_id(value: str) -> bool:
    """True if ``value`` is an id this service could have made."""
    return isinstance(value, str) and _ID.fullmatch(value) is not None


class Storage:
    """The data directory.

    Parameters
    ----------
    root : path
        ``DATA_DIR``; created with its sub-folders if missing.
    """

    def __init__(self, root: str | os.PathLike) -> None:
        self.root = Path(root).resolve()
        for kind in (*KINDS, "tmp"):
            (self.root / kind).mkdir(parents=True, exist_ok=True)

    # -- paths -------------------------------------------------------------------------

    def path(self, kind: str, object_id: str) -> Path:
        """Folder of one object; 404 for an id that cannot be ours (before any file access)."""
        if kind not in KINDS:
            raise ValueError(f"unknown kind {kind!r}; choose one of {', '.join(KINDS)}")
        if not valid_id(object_id):
            raise Problem(NOT_FOUND, f"no {_noun(kind)} with id {object_id!r}")
        return self.root / kind / object_id

    def new_tmp(self) -> Path:
        """A fresh folder under ``tmp/`` to assemble an object in."""
        folder = self.root / "tmp" / new_id()
        folder.mkdir()
        return folder

    def commit(self, tmp: Path, kind: str, object_id: str) -> Path:
        """Move an assembled folder into place (atomic rename on one volume)."""
        dest = self.path(kind, object_id)
        os.replace(tmp, dest)
        return dest

    # -- metadata ----------------------------------------------------------------------

    def read_meta(self, kind: str, object_id: str, owner: str | None = None) -> dict:
        """An object's metadata; 404 if absent or (with ``owner``) someone else's."""
        folder = self.path(kind, object_id)
        try:
            meta = json.loads((folder / META).read_text())
        except (OSError, ValueError):
            raise Problem(NOT_FOUND, f"no {_noun(kind)} with id {object_id!r}") from None
        if owner is not None and meta.get("owner", "") != owner:
            raise Problem(NOT_FOUND, f"no {_noun(kind)} with id {object_id!r}")
        return meta

    def list_meta(self, kind: str, owner: str | None = None) -> Iterator[dict]:
        for folder in sorted((self.root / kind).iterdir()):
            if not valid_id(folder.name):
                continue
            try:
                meta = json.loads((folder / META).read_text())
            except (OSError, ValueError):
                continue
            if owner is None or meta.get("owner", "") == owner:
                yield meta

    def delete(self, kind: str, object_id: str) -> None:
        """Remove an object: renamed away first so no reader sees it half deleted."""
        folder = self.path(kind, object_id)
        if not folder.exists():
            return
        grave = self.root / "tmp" / f"deleted-{new_id()}"
        try:
            os.replace(folder, grave)
        except FileNotFoundError:
            return
        shutil.rmtree(grave, ignore_errors=True)

    # -- space and retention -----------------------------------------------------------

    def check_space(self, incoming: int, min_free: int) -> None:
        """507 unless ``incoming`` bytes fit with ``min_free`` bytes to spare."""
        free = shutil.disk_usage(self.root).free
        if free - max(incoming, 0) < min_free:
            raise Problem(
                NO_SPACE,
                f"not enough disk space: {free / 1e9:.2f} GB free, {max(incoming, 0) / 1e9:.2f} "
                f"GB incoming, {min_free / 1e9:.2f} GB must stay free; delete old stems or "
                "renders, or try later",
            )

    def clean_tmp(self, older_than_s: float = 0.0) -> int:
        """Remove leftovers in ``tmp/`` (interrupted uploads, half deletions)."""
        removed = 0
        now = time.time()
        for entry in (self.root / "tmp").iterdir():
            try:
                if now - entry.stat().st_mtime < older_than_s:
                    continue
            except FileNotFoundError:
                continue
            shutil.rmtree(entry, ignore_errors=True) if entry.is_dir() else entry.unlink(
                missing_ok=True
            )
            removed += 1
        return removed

    def expired(self, kind: str, max_age_s: float) -> list[str]:
        """Ids of ``kind`` whose metadata says they were created over ``max_age_s`` ago."""
        cutoff = time.time() - max_age_s
        return [m["id"] for m in self.list_meta(kind) if m.get("created_ts", 0) < cutoff]


def _noun(kind: str) -> str:
    return {
        "stems": "stem",
        "renders": "render",
        "hrtf": "HRTF set",
        "comparisons": "comparison",
        "presets": "preset",
        "headphone-eq": "headphone EQ",
    }.get(kind, kind)
