"""Moving sources through an HRIR set: the moving-source engine with the set's own pairs.

:func:`moving_source_engine` builds a :class:`~earfold.renderer.engine.MovingSourceEngine`
whose filter pairs are the set's aligned interpolations (:meth:`HrirSet.pairs
<earfold.renderer.hrtf.HrirSet.pairs>`, the same pair :meth:`HrirSet.pair
<earfold.renderer.hrtf.HrirSet.pair>` gives a loudspeaker channel). For a diffuse-field
equalised set the engine looks up the original set's short responses and applies the
equalisation once, to the two ears' sums: the filter is the same for every direction, so
this equals filtering each pair (as :class:`~earfold.renderer.eq.EqualisedHrirSet` does
for a loudspeaker), at a quarter of the per-source transform size for the KEMAR set at
48 kHz (558 taps instead of 2605).

The pair grid in the filter cache. :func:`prepare_pair_grid` gives a set's table every
grid point's pair (:meth:`PairTable.grid_pairs
<earfold.renderer.engine.PairTable.grid_pairs>`), from the filter cache's ``moving-grid``
entry when there is one, else computed whole and stored: a render in a fresh process
then calls no pair function for any moving direction. The whole grid, not only the
points a render passes: it costs 1 to 1.6 s once per set and rate (10,314 pairs for
the KEMAR set at 2 degrees, 46 MB on disk and in memory; measured on two shared cores),
a later render loads it in about 0.03 s whatever its paths (computing only the pairs
it passes cost a 60 s master with 16 circling objects about 0.17 s per render, and up to
the whole grid's time for paths over the whole sphere), and the entry is written once,
never merged with another render's cells.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ..engine import GRID_VERSION, MovingSourceEngine, PairTable, PathLike
from ..eq import EqualisedHrirSet
from ..hrtf import HrirSet

if TYPE_CHECKING:
    from .filter_cache import FilterCache

__all__ = [
    "GRID_ENTRY",
    "moving_post_filter",
    "moving_response_length",
    "moving_source_engine",
    "pair_table",
    "prepare_pair_grid",
]

#: The filter cache's kind of entry holding a set's grid pairs.
GRID_ENTRY = "moving-grid"


def moving_source_engine(
    hset: HrirSet,
    paths: Sequence[PathLike],
    *,
    gain: float = 1.0,
    hop: int | None = None,
    dtype: np.dtype[Any] | type = np.float32,
    post: bool = True,
) -> MovingSourceEngine:
    """An engine rendering ``paths`` through ``hset`` at the set's rate.

    The table of filter spectra is kept with the set (in its cache, per hop and
    precision), so later engines on the same set compute no pair twice.

    Parameters
    ----------
    hset : HrirSet
        The set, resampled to the stem's rate, equalised or not.
    paths : sequence of SourcePath
        One per source, in the order of the input's channels.
    gain : float, optional
        A gain applied to the output (the plan's calibration gain).
    hop : int, optional
        Frames between filter updates (default and most: 10 ms).
    dtype : numpy dtype, optional
        The engine's working precision.
    post : bool, optional
        Apply the set's equalisation (:func:`moving_post_filter`) to the ears' sums; False
        leaves it to the caller (who may convolve it with other work of its own).
    """
    return MovingSourceEngine(
        paths,
        pair_table(hset, hop=hop, dtype=dtype),
        gain=gain,
        post_filter=moving_post_filter(hset) if post else None,
    )


def moving_response_length(hset: HrirSet) -> int:
    """Length of the moving engine's whole response through ``hset`` (its pairs and the
    post filter together), known without building an engine or looking up a pair."""
    post = moving_post_filter(hset)
    return _lookup(hset).taps + (0 if post is None else int(np.shape(post)[-1]) - 1)


def pair_table(
    hset: HrirSet, *, hop: int | None = None, dtype: np.dtype[Any] | type = np.float32
) -> PairTable:
    """The table of ``hset``'s filter spectra for moving sources, made once per set, hop
    and precision (kept in the set's cache)."""
    lookup = _lookup(hset)
    key = f"moving-pairs:{hop}:{np.dtype(dtype).name}"
    table = lookup._cache.get(key)
    if not isinstance(table, PairTable):
        table = PairTable(
            lookup.pairs, lookup.samplerate, hop=hop, dtype=dtype, filter_length=lookup.taps
        )
        lookup._cache[key] = table
    return table


def prepare_pair_grid(
    hset: HrirSet, set_key: Mapping[str, Any] | None, cache: FilterCache | None
) -> str:
    """Give the render's table of ``hset`` (float32, the longest hop) every grid pair:
    from ``cache`` if it holds them for ``set_key``, else computed and stored there.

    Returns what happened, for a report: ``"held"`` (the table had them), ``"reused"``
    (loaded from the cache), ``"stored"`` (computed and kept) or ``"uncached"`` (no
    cache: pairs are computed as sources pass, as they always may be).
    """
    table = pair_table(hset)
    if table.has_grid_pairs:
        return "held"
    if cache is None or set_key is None:
        return "uncached"
    key = _grid_key(set_key, table)
    found = cache.get(GRID_ENTRY, key, _grid_entry_ok(table))
    if found is not None and table.load_grid_pairs(found[0]["pairs"]):
        return "reused"
    cache.put(GRID_ENTRY, key, {"pairs": table.grid_pairs()}, {"points": table.grid_points})
    return "stored"


def _grid_key(set_key: Mapping[str, Any], table: PairTable) -> dict[str, Any]:
    """What the grid's pairs depend on: the prepared set (its file, rate, EQ), the grid
    and the pairs' length and precision. Not the hop: the pairs are impulse responses,
    the same for every hop (their spectra, made on load, are the hop's)."""
    return {
        "set": dict(set_key),
        "samplerate": table.samplerate,
        "grid_step_deg": table.grid_step_deg,
        "grid_version": GRID_VERSION,
        "points": table.grid_points,
        "taps": table.filter_length,
        "dtype": "float32",
    }


def _grid_entry_ok(table: PairTable) -> Any:
    shape = (table.grid_points, 2, table.filter_length)

    def ok(arrays: Mapping[str, NDArray[Any]], meta: Mapping[str, Any]) -> bool:
        pairs = arrays.get("pairs")
        return (
            set(arrays) == {"pairs"}
            and pairs is not None
            and pairs.dtype == np.float32
            and pairs.shape == shape
            and meta.get("points") == table.grid_points
        )

    return ok


def _lookup(hset: HrirSet) -> HrirSet:
    """The set whose pairs the engine convolves: the original of an equalised set."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None and hset.fir is not None:
        return hset.raw
    return hset


def moving_post_filter(hset: HrirSet) -> NDArray[np.float64] | None:
    """The filter common to every pair, applied to the ears' sums: the set's EQ (None
    for a set without one)."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None and hset.fir is not None:
        return hset.fir
    return None
