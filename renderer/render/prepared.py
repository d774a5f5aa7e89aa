"""Filters prepared once and kept: the HRTF set, its direction lookups and the room.

Every kind of plan (loudspeakers, scenes, ADM masters) starts from the same prepared
parts, each taken from the cache of prepared filters
(:mod:`~earfold.renderer.render.filter_cache`) when a render before made it:

* :func:`prepared_set`: the HRTF set loaded, resampled to the stem's rate and equalised,
  keyed by the file's content;
* :func:`take_lookups` / :func:`keep_lookups`: the set's direction lookups (the
  triangulation and the pairs already interpolated);
* :func:`room_part`: the synthetic room's filters for the loudspeakers a plan renders,
  and the report's room section.
"""

from __future__ import annotations

import dataclasses
import functools
import os
import stat
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import (
    EqualisedHrirSet,
    check_eq,
    equalised,
)
from ..errors import RendererError
from ..hrtf import HrirSet, file_sha256, load_hrir_set
from ..layouts import (
    Layout,
    Speaker,
)
from ..room import Room, RoomFilters, build_room_filters
from .filter_cache import FilterCache
from .options import RenderSettings

__all__ = [
    "REUSED",
    "STORED",
    "UNCACHED",
    "is_measured_room",
    "keep_lookups",
    "layout_key",
    "prepared_set",
    "resolve_hrtf",
    "room_part",
    "take_lookups",
]

#: Where prepared filters came from, as the report says: taken from the cache, computed
#: and stored in it, or computed with the cache turned off.
REUSED, STORED, UNCACHED = "reused", "stored", "off"


def resolve_hrtf(name_or_path: str | os.PathLike[str] | None) -> tuple[str, str]:
    """Path and display name of an HRTF set given by shipped name or file path."""
    from earfold.hrtf_sets import DEFAULT_SET, get_shipped

    value = os.fspath(name_or_path) if name_or_path else DEFAULT_SET
    if value.lower().endswith(".sofa") or os.sep in value or "/" in value:
        return value, Path(value).name
    shipped = get_shipped(value)
    return str(shipped.path), str(shipped.name)


def room_part(
    hset: HrirSet,
    layout: Layout | None,
    room: Room | None,
    samplerate: float,
    settings: RenderSettings,
    set_key: dict[str, Any] | None,
    cache: FilterCache | None,
    warnings: list[str],
    notes: list[str],
    without_direct: tuple[int, ...] = (),
) -> tuple[RoomFilters | None, dict[str, Any] | None]:
    """The synthetic room's filters for ``layout`` and the report's room section.

    A set that holds room responses already is rendered as measured (a warning when a
    synthetic room was asked for); the room's own warnings and notes join the plan's.
    ``without_direct``: rows holding their reflections only (see
    :func:`~earfold.renderer.room.build_room_filters`).
    """
    if room is not None and is_measured_room(hset):
        warnings.append(
            f"HRTF set {hset.name!r} already holds room responses (RoomType "
            f"{hset.room_type!r}); rendered as measured, the synthetic room "
            f"{room.name!r} was not added"
        )
        return None, {
            "synthetic": False,
            "measured_room": True,
            "room_type": hset.room_type,
            "requested": room.name,
        }
    if room is not None and layout is not None:
        filters, prepared = _prepared_room(
            hset, layout, room, samplerate, settings.seed, set_key, cache, without_direct
        )
        warnings.extend(f"room: {w}" for w in filters.report.get("warnings", []))
        notes.extend(f"room: {n}" for n in filters.report.get("notes", []))
        report = {"synthetic": True, "mode": settings.room_mode, **filters.report}
        return filters, {**report, "cache": prepared}
    if is_measured_room(hset):
        return None, {"synthetic": False, "measured_room": True, "room_type": hset.room_type}
    return None, None


def take_lookups(hset: HrirSet, set_key: dict[str, Any] | None, cache: FilterCache | None) -> None:
    """Give ``hset`` the direction lookups a render of it prepared before (cache), if any."""
    if cache is not None and set_key is not None:
        lookups = cache.get("lookup", set_key, _lookups_entry_ok)
        if lookups is not None:
            _lookup_set(hset).with_lookup_state(lookups[0])


@functools.lru_cache(maxsize=64)
def _hash_of(path: str, mtime_ns: int, size: int) -> str:
    return file_sha256(path)


#: Files larger than this are not hashed for the cache (the SOFA reader refuses them).
_MAX_HASHED_BYTES = 1 << 30


def _content_hash(path: str) -> str | None:
    """SHA-256 of a file, remembered per (path, modification time, size).

    None, and no cache, for anything but a regular file of 1 byte to 1 GiB (a device such
    as /dev/zero, a pipe, a folder, a missing file): the loader gives the error the user
    reads, and hashing such a thing could read forever.
    """
    try:
        st = os.stat(path)
        if not stat.S_ISREG(st.st_mode) or not 0 < st.st_size <= _MAX_HASHED_BYTES:
            return None
        return _hash_of(path, st.st_mtime_ns, st.st_size)
    except OSError:
        return None


def prepared_set(
    hrtf: str | os.PathLike[str] | None,
    eq: str | None,
    samplerate: float,
    warnings: list[str],
    notes: list[str],
    cache: FilterCache | None,
) -> tuple[HrirSet, dict[str, Any], dict[str, Any] | None]:
    """The HRTF set at ``samplerate``, equalised as asked; its EQ report and cache key.

    Keyed by the file's content (SHA-256), the rate, the EQ choice and the display name
    (which the warnings and notes quote). The key is None when the cache is off.
    """
    path, name = resolve_hrtf(hrtf)
    choice = check_eq(eq)
    digest = None if cache is None else _content_hash(path)
    key = (
        None
        if digest is None
        else {"sha256": digest, "samplerate": float(samplerate), "eq": choice, "name": name}
    )
    if cache is not None and key is not None:
        found = cache.get("hrtf", key, _set_entry_ok)
        if found is not None:
            arrays, meta = found
            warnings.extend(meta["warnings"])
            notes.extend(meta["notes"])
            report: dict[str, Any] = meta["eq_report"]
            report["cache"] = REUSED
            return _restored_set(arrays, meta, path), report, key
    added: list[str] = []
    added_notes: list[str] = []
    hset = load_hrir_set(path, samplerate, name=name)
    added.extend(hset.warnings)  # what the SOFA reader changed or found odd
    hset, report = _equalise(hset, choice, added, added_notes)
    warnings.extend(added)
    notes.extend(added_notes)
    if cache is not None and key is not None:
        cache.put("hrtf", key, *_set_entry(hset, report, added, added_notes))
        report["cache"] = STORED
    else:
        report["cache"] = UNCACHED
    return hset, report, key


_SET_FIELDS = ("name", "samplerate", "sha256", "convention", "room_type", "dropped", "warnings")


def _set_entry(
    hset: HrirSet, report: dict[str, Any], warnings: list[str], notes: list[str]
) -> tuple[dict[str, NDArray[Any]], dict[str, Any]]:
    arrays: dict[str, NDArray[Any]] = {"ir": hset.ir, "directions": hset.directions}
    if isinstance(hset, EqualisedHrirSet):
        if hset.raw is None or hset.fir is None:
            raise RendererError(f"equalised set {hset.name!r} has no original set")
        arrays.update(raw_ir=hset.raw.ir, raw_directions=hset.raw.directions, fir=hset.fir)
    meta = {
        "fields": {f: getattr(hset, f) for f in _SET_FIELDS},
        "equalised": isinstance(hset, EqualisedHrirSet),
        "eq_report": report,
        "warnings": warnings,
        "notes": notes,
    }
    return arrays, meta


def _set_entry_ok(arrays: Any, meta: Any) -> bool:
    """Is a stored set whole: fields present, arrays of consistent shapes, float64?"""
    fields = meta.get("fields")
    if not isinstance(fields, dict) or set(fields) != set(_SET_FIELDS):
        return False
    if not all(isinstance(meta.get(k), list) for k in ("warnings", "notes")):
        return False
    if not isinstance(meta.get("eq_report"), dict):
        return False
    names = {"ir", "directions"}
    if meta.get("equalised") is True:
        names |= {"raw_ir", "raw_directions", "fir"}
    elif meta.get("equalised") is not False:
        return False
    if set(arrays) != names or any(arrays[n].dtype != np.float64 for n in names):
        return False
    ir, dirs = arrays["ir"], arrays["directions"]
    m = ir.shape[0] if ir.ndim == 3 else -1
    ok = ir.ndim == 3 and ir.shape[1] == 2 and m > 0 and ir.shape[2] > 0
    ok = ok and dirs.shape == (m, 3)
    if "fir" in names:
        raw, fir = arrays["raw_ir"], arrays["fir"]
        ok = ok and fir.ndim == 1 and fir.shape[0] > 0
        ok = ok and raw.ndim == 3 and raw.shape[:2] == (m, 2)
        ok = ok and raw.shape[2] + fir.shape[0] - 1 == ir.shape[2]
        ok = ok and arrays["raw_directions"].shape == (m, 3)
    return bool(ok)


def _exact(hset: HrirSet, ir: NDArray[Any], directions: NDArray[Any]) -> HrirSet:
    """``hset`` holding exactly the stored arrays (its constructor re-normalises the
    directions, which could move their last bits: the cached plan must equal the fresh one)."""
    object.__setattr__(hset, "ir", ir)
    object.__setattr__(hset, "directions", directions)
    return hset


def _restored_set(arrays: dict[str, NDArray[Any]], meta: dict[str, Any], path: str) -> HrirSet:
    """The prepared set from a cache entry (checked by :func:`_set_entry_ok`)."""
    values = {**meta["fields"], "source": path, "warnings": tuple(meta["fields"]["warnings"])}
    ir, dirs = arrays["ir"], arrays["directions"]
    if not meta["equalised"]:
        return _exact(HrirSet(**values, ir=ir, directions=dirs), ir, dirs)
    raw_ir, raw_dirs = arrays["raw_ir"], arrays["raw_directions"]
    raw = _exact(HrirSet(**values, ir=raw_ir, directions=raw_dirs), raw_ir, raw_dirs)
    eq_set = EqualisedHrirSet(raw=raw, fir=arrays["fir"], **values, ir=ir, directions=dirs)
    return _exact(eq_set, ir, dirs)


def _lookup_set(hset: HrirSet) -> HrirSet:
    """The set whose lookups a render runs (an equalised set looks up its original)."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None:
        return hset.raw
    return hset


def _lookups_entry_ok(arrays: Any, meta: Any) -> bool:
    names = set(arrays)
    return names in ({"onsets"}, {"onsets", "aligned", "aligned_ref"}) and meta == {}


def keep_lookups(hset: HrirSet, key: dict[str, Any] | None, cache: FilterCache | None) -> None:
    """Store what the set's direction lookups prepared (onsets, aligned responses), once.

    A separate entry from the set's: it is known only after the feeds were built.
    The shapes are checked against the set when taken back
    (:meth:`~earfold.renderer.hrtf.HrirSet.with_lookup_state`).
    """
    if cache is None or key is None:
        return
    state = _lookup_set(hset).lookup_state()
    if not state:
        return
    held = cache.get("lookup", key, _lookups_entry_ok)
    if held is not None and len(held[0]) >= len(state):
        return
    cache.put("lookup", key, state, {})


def layout_key(layout: Layout) -> dict[str, Any]:
    """A layout as a cache key: its name and every loudspeaker's label and position."""
    return {
        "name": layout.name,
        "speakers": [
            [s.label, s.azimuth, s.elevation, s.distance, s.lfe, s.spread] for s in layout.speakers
        ],
    }


def _prepared_room(
    hset: HrirSet,
    layout: Layout,
    room: Room,
    samplerate: float,
    seed: int,
    set_key: dict[str, Any] | None,
    cache: FilterCache | None,
    without_direct: tuple[int, ...] = (),
) -> tuple[RoomFilters, str]:
    """The room's filters (:func:`_room_filters`), from the cache when it holds them.

    Keyed by the prepared set's key, the layout's loudspeakers, every parameter of the
    room, the seed, the rate and the rows without their direct sound.
    """
    if cache is None or set_key is None:
        return _room_filters(hset, layout, room, samplerate, seed, without_direct), UNCACHED
    key = {
        "set": set_key,
        "layout": layout_key(layout),
        "room": dataclasses.asdict(room),
        "seed": int(seed),
        "samplerate": float(samplerate),
        **({"without_direct": list(without_direct)} if without_direct else {}),
    }
    channels = layout.channels

    def whole(arrays: Any, meta: Any) -> bool:
        if set(arrays) != {"early", "tail", "tail_weights"}:
            return False
        if any(a.dtype != np.float64 for a in arrays.values()):
            return False
        early, tail, weights = arrays["early"], arrays["tail"], arrays["tail_weights"]
        offset, report = meta.get("tail_offset"), meta.get("report")
        return bool(
            early.ndim == 3
            and early.shape[:2] == (channels, 2)
            and early.shape[2] > 0
            and tail.ndim == 2
            and tail.shape[0] == 2
            and weights.shape == (channels,)
            and isinstance(offset, int)
            and offset >= 0
            and meta.get("samplerate") == float(samplerate)
            and isinstance(report, dict)
            and isinstance(report.get("reference_arrival_samples"), (int, float))
        )

    found = cache.get("room", key, whole)
    if found is not None:
        arrays, meta = found
        filters = RoomFilters(
            early=arrays["early"],
            tail=arrays["tail"],
            tail_offset=meta["tail_offset"],
            tail_weights=arrays["tail_weights"],
            report=meta["report"],
            samplerate=meta["samplerate"],
        )
        return filters, REUSED
    filters = _room_filters(hset, layout, room, samplerate, seed, without_direct)
    cache.put(
        "room",
        key,
        {"early": filters.early, "tail": filters.tail, "tail_weights": filters.tail_weights},
        {
            "tail_offset": int(filters.tail_offset),
            "report": filters.report,
            "samplerate": float(filters.samplerate),
        },
    )
    return filters, STORED


def _room_filters(
    hset: HrirSet,
    layout: Layout,
    room: Room,
    samplerate: float,
    seed: int,
    without_direct: tuple[int, ...] = (),
) -> RoomFilters:
    """The room's filters per loudspeaker channel of ``layout``, in the layout's order.

    A channel spread over several directions (:attr:`Speaker.spread`, as LCRS's ``S``)
    is modelled as one loudspeaker per direction, and their early responses are summed at
    the channel's spread gain. Its share of the shared diffuse tail adds by power (the
    loudspeakers' tails are uncorrelated in a real room), so the spread channel excites
    the tail as much as one loudspeaker would. ``without_direct``: rows that hold their
    reflections only (:func:`~earfold.renderer.room.build_room_filters`; layouts without
    spread channels).
    """
    if without_direct or not any(s.spread for s in layout.speakers):
        return build_room_filters(
            hset, layout, room, samplerate, seed=seed, without_direct=without_direct
        )
    expanded: list[Speaker] = []
    mix: list[list[tuple[int, float]]] = []
    for s in layout.speakers:
        if not s.spread:
            mix.append([(len(expanded), 1.0)])
            expanded.append(s)
            continue
        mix.append([(len(expanded) + k, s.spread_gain) for k in range(len(s.spread))])
        expanded.extend(
            Speaker(f"{s.label}~{k + 1}", a, e, s.distance) for k, (a, e) in enumerate(s.spread)
        )
    virtual = Layout(layout.name, tuple(expanded), layout.description, layout.source)
    filters = build_room_filters(hset, virtual, room, samplerate, seed=seed)
    early = np.zeros((layout.channels, *filters.early.shape[1:]))
    weights = np.zeros(layout.channels)
    for i, parts in enumerate(mix):
        for v, gain in parts:
            early[i] += gain * filters.early[v]
            weights[i] += (gain * float(filters.tail_weights[v])) ** 2
    return dataclasses.replace(filters, early=early, tail_weights=np.sqrt(weights))


def _equalise(
    hset: HrirSet, choice: str | None, warnings: list[str], notes: list[str]
) -> tuple[HrirSet, dict[str, Any]]:
    """Apply the equalisation asked for (or the set's default); the report section."""
    choice = check_eq(choice)
    measured_room = is_measured_room(hset)
    if choice is None:
        choice = "none" if measured_room else "diffuse-field"
        reason = (
            "default: the set holds room responses"
            if measured_room
            else "default for a free-field set"
        )
    else:
        reason = "requested"
        if choice == "diffuse-field" and measured_room:
            warnings.append(
                f"diffuse-field equalisation of {hset.name!r}, whose responses include a room "
                f"(RoomType {hset.room_type!r}): the room's colour is averaged in and removed too"
            )
    report: dict[str, Any] = {
        "type": choice,
        "chosen": reason,
        "diffuse_field": None,
        "headphone": None,
    }
    if choice == "diffuse-field":
        hset, summary = equalised(hset)
        report["diffuse_field"] = summary
        if summary.get("boost_limited"):
            # A property of the set, shown by every render with it: information, no alarm.
            notes.append(
                f"HRTF set {hset.name!r}: the diffuse-field inverse reached its boost limit "
                f"({summary['max_boost_db']:g} dB); the deepest dips are only partly filled"
            )
    return hset, report


def is_measured_room(hset: HrirSet) -> bool:
    """Does the set already hold room responses (a reverberant RoomType or a BRIR convention)?"""
    room_type = (hset.room_type or "").lower().replace("-", " ")
    return (
        room_type not in ("", "free field", "freefield", "anechoic")
        or "brir" in hset.convention.lower()
    )
