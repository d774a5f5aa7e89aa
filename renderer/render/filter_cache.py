"""A cache of prepared filters, keyed by what they are computed from.

Planning a render prepares filters that depend only on their inputs: the HRTF set
resampled to the stem's rate and equalised, and a synthetic room's early responses and
shared tail. :class:`FilterCache` keeps them so that a second render with the same set and
room skips that work:

* **in memory**, for a long-lived process (a service worker renders many jobs), bounded in
  bytes, least recently used dropped first;
* **on disk**, for the command line, in a directory (``$EARFOLD_CACHE_DIR``, default
  ``$XDG_CACHE_HOME/earfold`` or ``~/.cache/earfold``) bounded in size
  (``$EARFOLD_CACHE_LIMIT_MB``, default :data:`DEFAULT_LIMIT_BYTES`), the least recently
  used entries evicted first.

An entry is found by the SHA-256 of its key (a canonical JSON text holding every input of
the computation and :data:`PREPARATION_VERSION`) and is never trusted on its name alone:
the stored key must equal the one asked for, and the arrays must have the names, shapes
and dtypes the caller expects and hold finite values. A file that fails (corrupt,
truncated, foreign, from another version) is ignored and rebuilt; reading never raises.
Entries are written to a temporary name in the same directory and renamed into place, so
concurrent writers of one entry leave a whole file. Files are ``.npz`` read with
``allow_pickle=False``; the key and the JSON side data are stored as text arrays.

``$EARFOLD_NO_CACHE`` (any value but ``""`` or ``"0"``) turns the cache off: nothing is
read or written, and every render prepares its filters afresh.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import tempfile
import threading
import time
import zipfile
from collections import OrderedDict
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "DEFAULT_LIMIT_BYTES",
    "DEFAULT_MEMORY_BYTES",
    "PREPARATION_VERSION",
    "CacheStats",
    "FilterCache",
    "cache_directory",
    "cache_disabled",
    "cache_limit_bytes",
    "default_filter_cache",
]

PREPARATION_VERSION = 2
"""Version of the preparation of cached filters. Bump it whenever the computation of a
prepared HRTF set or room filters changes (resampling, equalisation, room model, the
direction lookup), so that entries computed by older code are never used. 2: the lookup
takes, of two triangles on one plane, the one holding the direction."""

DEFAULT_LIMIT_BYTES = 1 << 30
"""Default bound of the disk cache: 1 GiB (``$EARFOLD_CACHE_LIMIT_MB`` overrides it)."""

DEFAULT_MEMORY_BYTES = 256 << 20
"""Bound of the in-memory layer of one process: 256 MiB (a set at 48 kHz with its lookups
is about 45 MB, a large room about 3 MB)."""

ENV_DIR = "EARFOLD_CACHE_DIR"
ENV_LIMIT_MB = "EARFOLD_CACHE_LIMIT_MB"
ENV_OFF = "EARFOLD_NO_CACHE"

#: Names of the entry's own members in the .npz file.
_KEY = "__key__"
_META = "__meta__"
_SUFFIX = ".npz"
_TEMP_PREFIX = ".partial-"
#: A temporary file older than this (s) was left by a writer that died; it is removed.
_STALE_TEMP_S = 3600.0

Arrays = dict[str, NDArray[Any]]
#: Checks a loaded entry's arrays and side data; False rejects the entry.
Check = Callable[[Mapping[str, NDArray[Any]], Mapping[str, Any]], bool]


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (tuple, set, frozenset)):
        return list(value)
    raise TypeError(f"not JSON-ready: {type(value).__name__}")


def canonical(value: Any) -> str:
    """Canonical JSON text of a key (sorted keys, no spaces, floats exact)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), default=_json_default)


def cache_directory() -> Path:
    """The disk cache's directory: ``$EARFOLD_CACHE_DIR`` or the user's cache folder."""
    given = os.environ.get(ENV_DIR, "").strip()
    if given:
        return Path(given).expanduser()
    base = os.environ.get("XDG_CACHE_HOME", "").strip()
    return (Path(base) if base else Path.home() / ".cache") / "earfold"


def cache_limit_bytes() -> int:
    """The disk cache's bound: ``$EARFOLD_CACHE_LIMIT_MB`` or :data:`DEFAULT_LIMIT_BYTES`."""
    text = os.environ.get(ENV_LIMIT_MB, "").strip()
    if not text:
        return DEFAULT_LIMIT_BYTES
    try:
        mb = float(text)
    except ValueError:
        return DEFAULT_LIMIT_BYTES
    return max(0, int(mb * (1 << 20))) if np.isfinite(mb) else DEFAULT_LIMIT_BYTES


def cache_disabled() -> bool:
    """Is the cache turned off by ``$EARFOLD_NO_CACHE``?"""
    return os.environ.get(ENV_OFF, "").strip() not in ("", "0")


@dataclass
class CacheStats:
    """Counts of one process's lookups, by where they were answered."""

    memory_hits: int = 0
    disk_hits: int = 0
    misses: int = 0
    rejected: int = 0  # files found but not trusted (corrupt, foreign, wrong shapes)
    stored: int = 0


@dataclass
class _Memory:
    """The in-memory layer: entries by digest, least recently used first."""

    limit: int = DEFAULT_MEMORY_BYTES
    entries: OrderedDict[str, tuple[str, Arrays, str, int]] = field(default_factory=OrderedDict)
    size: int = 0
    lock: threading.Lock = field(default_factory=threading.Lock)

    def get(self, digest: str, key: str) -> tuple[Arrays, dict[str, Any]] | None:
        with self.lock:
            found = self.entries.get(digest)
            if found is None or found[0] != key:
                return None
            self.entries.move_to_end(digest)
        # The side data is parsed afresh each time: callers may change what they get.
        meta: dict[str, Any] = json.loads(found[2])
        return found[1], meta

    def put(self, digest: str, key: str, arrays: Arrays, meta: str) -> None:
        nbytes = sum(int(a.nbytes) for a in arrays.values())
        if nbytes > self.limit:
            return
        with self.lock:
            old = self.entries.pop(digest, None)
            if old is not None:
                self.size -= old[3]
            self.entries[digest] = (key, arrays, meta, nbytes)
            self.size += nbytes
            while self.size > self.limit and self.entries:
                _, dropped = self.entries.popitem(last=False)
                self.size -= dropped[3]

    def clear(self) -> None:
        with self.lock:
            self.entries.clear()
            self.size = 0


_PROCESS_MEMORY = _Memory()


class FilterCache:
    """Prepared filters in memory and, given a directory, on disk.

    Parameters
    ----------
    directory : path or None
        The disk cache's folder (created when first written); None keeps entries in
        memory only.
    limit_bytes : int
        Bound of the disk cache's total size; after each write the least recently used
        entries are removed until the rest fit.
    memory : bool
        Keep entries in this process's memory too (shared by every cache of the process).
    """

    def __init__(
        self,
        directory: str | os.PathLike[str] | None,
        *,
        limit_bytes: int = DEFAULT_LIMIT_BYTES,
        memory: bool = True,
    ) -> None:
        self.directory = None if directory is None else Path(directory)
        self.limit_bytes = int(limit_bytes)
        self._memory = _PROCESS_MEMORY if memory else None
        self.stats = CacheStats()

    # -- lookups ------------------------------------------------------------------------

    def get(
        self, kind: str, key: Mapping[str, Any], check: Check
    ) -> tuple[Arrays, dict[str, Any]] | None:
        """The entry ``kind`` with ``key`` if one is held and passes ``check``; else None.

        Arrays returned are read-only. A disk file that cannot be read, holds another key,
        or fails ``check`` counts as rejected and is treated as absent.
        """
        text = canonical({"kind": kind, "version": PREPARATION_VERSION, "key": key})
        digest = hashlib.sha256(text.encode()).hexdigest()
        if self._memory is not None:
            found = self._memory.get(digest, text)
            if found is not None:
                self.stats.memory_hits += 1
                return found
        if self.directory is not None:
            path = self._path(kind, digest)
            loaded = self._load(path, text, check)
            if loaded is not None:
                self.stats.disk_hits += 1
                with contextlib.suppress(OSError):
                    os.utime(path)  # recently used: evicted last
                if self._memory is not None:
                    self._memory.put(digest, text, loaded[0], canonical(loaded[1]))
                return loaded
        self.stats.misses += 1
        return None

    def put(
        self, kind: str, key: Mapping[str, Any], arrays: Mapping[str, NDArray[Any]], meta: Any
    ) -> None:
        """Keep an entry (in memory, and on disk if there is a directory).

        Never raises for the disk: an unwritable folder or a full disk leaves the entry
        in memory only.
        """
        text = canonical({"kind": kind, "version": PREPARATION_VERSION, "key": key})
        digest = hashlib.sha256(text.encode()).hexdigest()
        try:
            meta_text = canonical(meta)
        except (TypeError, ValueError):
            return  # side data that JSON cannot hold is not cached
        frozen: Arrays = {}
        for name, array in arrays.items():
            a = np.array(array, copy=True)
            a.setflags(write=False)
            frozen[name] = a
        if self._memory is not None:
            self._memory.put(digest, text, frozen, meta_text)
        if self.directory is not None:
            self._write(self._path(kind, digest), text, meta_text, frozen)
        self.stats.stored += 1

    # -- the user's view ----------------------------------------------------------------

    def info(self) -> dict[str, Any]:
        """The disk cache's folder, bound, entries and bytes, also by kind of entry
        (``hrtf``, ``lookup``, ``room``, ``bank``, ``feeds``, ``moving-grid``; JSON-ready)."""
        files = self._entries()
        kinds: dict[str, dict[str, int]] = {}
        for path, size, _ in files:
            # Entry files are named "<kind>-<digest>.npz"; kinds may hold dashes.
            kind = path.name[: -len(_SUFFIX)].rpartition("-")[0] or "?"
            held = kinds.setdefault(kind, {"entries": 0, "bytes": 0})
            held["entries"] += 1
            held["bytes"] += size
        return {
            "directory": None if self.directory is None else str(self.directory),
            "limit_bytes": self.limit_bytes,
            "entries": len(files),
            "bytes": sum(size for _, size, _ in files),
            "kinds": dict(sorted(kinds.items())),
            "version": PREPARATION_VERSION,
        }

    def clear(self) -> int:
        """Remove every entry (and stale partial file); the number of entries removed."""
        if self._memory is not None:
            self._memory.clear()
        removed = 0
        for path, _, _ in self._entries():
            with contextlib.suppress(OSError):
                path.unlink()
                removed += 1
        for path in self._temporaries():
            with contextlib.suppress(OSError):
                path.unlink()
        return removed

    # -- disk ---------------------------------------------------------------------------

    def _path(self, kind: str, digest: str) -> Path:
        assert self.directory is not None
        return self.directory / f"{kind}-{digest[:40]}{_SUFFIX}"

    def _load(self, path: Path, key: str, check: Check) -> tuple[Arrays, dict[str, Any]] | None:
        try:
            members = _read_members(path, self.limit_bytes)
        except FileNotFoundError:
            return None
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile, RuntimeError):
            self.stats.rejected += 1
            return None
        try:
            stored_key = members.pop(_KEY)
            stored_meta = members.pop(_META)
            if stored_key.shape != () or stored_key.dtype.kind != "U" or str(stored_key) != key:
                raise ValueError("another key")
            if stored_meta.shape != () or stored_meta.dtype.kind != "U":
                raise ValueError("no side data")
            meta = json.loads(str(stored_meta))
            if not isinstance(meta, dict):
                raise ValueError("side data is no object")
            for array in members.values():
                if array.dtype.kind in "fc" and not np.all(np.isfinite(array)):
                    raise ValueError("non-finite values")
                array.setflags(write=False)
            if not check(members, meta):
                raise ValueError("shapes")
        except (KeyError, ValueError, TypeError, IndexError):
            self.stats.rejected += 1
            return None
        return members, meta

    def _write(self, path: Path, key: str, meta: str, arrays: Arrays) -> None:
        directory = path.parent
        temp: str | None = None
        try:
            directory.mkdir(parents=True, exist_ok=True, mode=0o700)
            fd, temp = tempfile.mkstemp(dir=directory, prefix=_TEMP_PREFIX, suffix=_SUFFIX)
            with os.fdopen(fd, "wb") as fh:
                members: dict[str, Any] = {_KEY: np.array(key), _META: np.array(meta), **arrays}
                np.savez(fh, **members)
            os.replace(temp, path)
            temp = None
            self._evict()
        except OSError:
            pass
        finally:
            if temp is not None:
                with contextlib.suppress(OSError):
                    os.unlink(temp)

    def _entries(self) -> list[tuple[Path, int, float]]:
        """Entry files with their size and last use, oldest first."""
        if self.directory is None:
            return []
        found = []
        try:
            names = list(os.scandir(self.directory))
        except OSError:
            return []
        for entry in names:
            name = entry.name
            if name.startswith(_TEMP_PREFIX) or not name.endswith(_SUFFIX):
                continue
            try:
                st = entry.stat()
            except OSError:
                continue
            found.append((Path(entry.path), int(st.st_size), float(st.st_mtime)))
        found.sort(key=lambda e: e[2])
        return found

    def _temporaries(self, older_than: float | None = None) -> list[Path]:
        if self.directory is None:
            return []
        try:
            names = list(os.scandir(self.directory))
        except OSError:
            return []
        now = time.time()
        out = []
        for entry in names:
            if not entry.name.startswith(_TEMP_PREFIX):
                continue
            if older_than is not None:
                try:
                    if now - entry.stat().st_mtime < older_than:
                        continue
                except OSError:
                    continue
            out.append(Path(entry.path))
        return out

    def _evict(self) -> None:
        """Remove least recently used entries until the cache fits its bound."""
        files = self._entries()
        total = sum(size for _, size, _ in files)
        for path, size, _ in files:
            if total <= self.limit_bytes:
                break
            with contextlib.suppress(OSError):
                path.unlink()
            total -= size  # also if another process removed it first
        for path in self._temporaries(older_than=_STALE_TEMP_S):
            with contextlib.suppress(OSError):
                path.unlink()


def _read_members(path: Path, limit: int) -> Arrays:
    """The arrays of an ``.npz`` file, each checked before it is read.

    Every member's header is read first and its data size compared with the size the zip
    directory gives it, so a damaged or hostile header cannot make the reader allocate
    more than the file holds; object arrays (which need pickle) are refused.

    Raises
    ------
    OSError, ValueError, EOFError, zipfile.BadZipFile
        If the file is no such archive.
    """
    members: Arrays = {}
    with open(path, "rb") as fh:
        if os.fstat(fh.fileno()).st_size > max(limit, 1):
            raise ValueError("larger than the cache's bound")
        with zipfile.ZipFile(fh) as archive:
            for info in archive.infolist():
                if not info.filename.endswith(".npy"):
                    raise ValueError(f"unexpected member {info.filename!r}")
                with archive.open(info) as member:
                    version = np.lib.format.read_magic(member)
                    if version == (1, 0):
                        shape, _, dtype = np.lib.format.read_array_header_1_0(member)
                    elif version == (2, 0):
                        shape, _, dtype = np.lib.format.read_array_header_2_0(member)
                    else:
                        raise ValueError(f"npy format version {version}")
                if dtype.hasobject:
                    raise ValueError("object array")
                if int(np.prod(shape, dtype=np.int64)) * dtype.itemsize > info.file_size:
                    raise ValueError("header larger than its data")
                with archive.open(info) as member:
                    array = np.lib.format.read_array(member, allow_pickle=False)
                members[info.filename[: -len(".npy")]] = array
    return members


def default_filter_cache() -> FilterCache | None:
    """The cache a render uses: memory plus :func:`cache_directory`; None when turned off."""
    if cache_disabled():
        return None
    try:
        directory: Path | None = cache_directory()
    except (RuntimeError, KeyError):  # no home folder to be found: memory only
        directory = None
    return FilterCache(directory, limit_bytes=cache_limit_bytes())
