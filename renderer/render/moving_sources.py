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
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..engine import MovingSourceEngine, PairTable, PathLike
from ..eq import EqualisedHrirSet
from ..hrtf import HrirSet

__all__ = ["moving_source_engine", "pair_table"]


def moving_source_engine(
    hset: HrirSet,
    paths: Sequence[PathLike],
    *,
    gain: float = 1.0,
    hop: int | None = None,
    dtype: np.dtype[Any] | type = np.float32,
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
    """
    return MovingSourceEngine(
        paths, pair_table(hset, hop=hop, dtype=dtype), gain=gain, post_filter=_post_filter(hset)
    )


def pair_table(
    hset: HrirSet, *, hop: int | None = None, dtype: np.dtype[Any] | type = np.float32
) -> PairTable:
    """The table of ``hset``'s filter spectra for moving sources, made once per set, hop
    and precision (kept in the set's cache)."""
    lookup = _lookup(hset)
    key = f"moving-pairs:{hop}:{np.dtype(dtype).name}"
    table = lookup._cache.get(key)
    if not isinstance(table, PairTable):
        table = PairTable(lookup.pairs, lookup.samplerate, hop=hop, dtype=dtype)
        lookup._cache[key] = table
    return table


def _lookup(hset: HrirSet) -> HrirSet:
    """The set whose pairs the engine convolves: the original of an equalised set."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None and hset.fir is not None:
        return hset.raw
    return hset


def _post_filter(hset: HrirSet) -> NDArray[np.float64] | None:
    """The filter common to every pair, applied to the ears' sums: the set's EQ."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None and hset.fir is not None:
        return hset.fir
    return None
