"""Free-field loudspeaker feeds kept in the filter cache (entries of kind ``feeds``).

A layout render keeps its whole calibrated bank (``bank`` entries in :mod:`.plan`); a
plan that builds feeds for loudspeakers of its own (an ADM master's bed, or the
reference layout it calibrates against) keeps them here: :func:`cached_speaker_feeds` is
:func:`~earfold.renderer.render.feeds.speaker_feeds` for the free field, with each
feed's filters, flags, report entry and the warnings it raised stored under the prepared
set's key, the loudspeakers (labels, positions, distances, LFE flags, spreads), the file
order and the LFE options. A hit gives the same filters, bit for bit, without one HRIR
lookup and without the LFE filter's design (which imports ``scipy.signal``).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ..engine import LfeOptions
from ..hrtf import HrirSet
from ..layouts import Layout
from .feeds import ChannelFeed, speaker_feeds

if TYPE_CHECKING:
    from .filter_cache import FilterCache

__all__ = ["FEEDS_ENTRY", "cached_speaker_feeds"]

#: The filter cache's kind of entry holding free-field feeds.
FEEDS_ENTRY = "feeds"


def cached_speaker_feeds(
    layout: Layout,
    order: Sequence[int],
    hset: HrirSet,
    samplerate: float,
    *,
    lfe: LfeOptions,
    set_key: Mapping[str, Any] | None,
    cache: FilterCache | None,
    warnings: list[str] | None = None,
) -> tuple[ChannelFeed, ...]:
    """:func:`~earfold.renderer.render.feeds.speaker_feeds` of ``layout`` in the free
    field, from ``cache`` when it holds them for ``set_key`` (else built and stored).

    ``warnings`` receives the same warnings either way.
    """
    warns = warnings if warnings is not None else []
    if cache is None or set_key is None:
        return speaker_feeds(layout, order, hset, samplerate, lfe=lfe, warnings=warns)
    key = _key(layout, order, samplerate, lfe, set_key)
    found = cache.get(FEEDS_ENTRY, key, _entry_ok(len(order)))
    if found is not None:
        arrays, meta = found
        warns.extend(meta["warnings"])
        return tuple(
            ChannelFeed(
                label=str(entry["label"]),
                filters=np.array(arrays["filters"][i, :, : int(arrays["lengths"][i])]),
                lfe=bool(entry["lfe"]),
                tail_weight=float(entry["tail_weight"]),
                report=dict(entry["report"]),
            )
            for i, entry in enumerate(meta["feeds"])
        )
    added: list[str] = []
    feeds = speaker_feeds(layout, order, hset, samplerate, lfe=lfe, warnings=added)
    warns.extend(added)
    cache.put(FEEDS_ENTRY, key, *_entry(feeds, added))
    return feeds


def _key(
    layout: Layout,
    order: Sequence[int],
    samplerate: float,
    lfe: LfeOptions,
    set_key: Mapping[str, Any],
) -> dict[str, Any]:
    return {
        "set": dict(set_key),
        "samplerate": float(samplerate),
        "speakers": [
            [s.label, s.azimuth, s.elevation, s.distance, s.lfe, s.spread] for s in layout.speakers
        ],
        "order": [int(i) for i in order],
        "lfe": dataclasses.asdict(lfe),
    }


def _entry(
    feeds: Sequence[ChannelFeed], warnings: list[str]
) -> tuple[dict[str, NDArray[Any]], dict[str, Any]]:
    lengths = np.array([f.filters.shape[-1] for f in feeds], dtype=np.int64)
    filters = np.zeros((len(feeds), 2, int(lengths.max())), dtype=np.float64)
    for i, feed in enumerate(feeds):
        filters[i, :, : lengths[i]] = feed.filters
    meta = {
        "feeds": [
            {"label": f.label, "lfe": f.lfe, "tail_weight": f.tail_weight, "report": f.report}
            for f in feeds
        ],
        "warnings": list(warnings),
    }
    return {"filters": filters, "lengths": lengths}, meta


def _entry_ok(count: int) -> Any:
    def ok(arrays: Mapping[str, NDArray[Any]], meta: Mapping[str, Any]) -> bool:
        if set(arrays) != {"filters", "lengths"}:
            return False
        filters, lengths = arrays["filters"], arrays["lengths"]
        if filters.dtype != np.float64 or filters.ndim != 3 or filters.shape[:2] != (count, 2):
            return False
        if lengths.dtype != np.int64 or lengths.shape != (count,):
            return False
        if np.any(lengths < 1) or np.any(lengths > filters.shape[2]):
            return False
        feeds, warns = meta.get("feeds"), meta.get("warnings")
        if not isinstance(feeds, list) or len(feeds) != count or not isinstance(warns, list):
            return False
        return all(
            isinstance(f, dict)
            and isinstance(f.get("label"), str)
            and isinstance(f.get("lfe"), bool)
            and isinstance(f.get("tail_weight"), (int, float))
            and isinstance(f.get("report"), dict)
            for f in feeds
        ) and all(isinstance(w, str) for w in warns)

    return ok
