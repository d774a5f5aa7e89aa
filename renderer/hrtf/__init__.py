"""HRTF sets: SOFA (AES69) reading and writing, HRIR sets and direction lookup, onsets,
the rigid-sphere model.

netCDF4 is imported here (in :mod:`.sofa`) and nowhere else in the renderer.
"""

from __future__ import annotations

from .guard import is_shipped, read_sofa_guarded
from .hrir import HrirPair, HrirSet, file_sha256, load_hrir_set
from .onsets import (
    cross_correlation_itd,
    fractional_delay,
    interaural_time_difference,
    onset_times,
)
from .sofa import MAX_TAPS, SofaData, read_sofa, write_sofa
from .sphere import (
    LEAD_SAMPLES,
    main,
    series_terms,
    sphere_grid,
    sphere_hrirs,
    sphere_transfer_function,
)

__all__ = [
    "HrirPair",
    "HrirSet",
    "LEAD_SAMPLES",
    "MAX_TAPS",
    "SofaData",
    "cross_correlation_itd",
    "file_sha256",
    "fractional_delay",
    "interaural_time_difference",
    "is_shipped",
    "load_hrir_set",
    "main",
    "onset_times",
    "read_sofa",
    "read_sofa_guarded",
    "series_terms",
    "sphere_grid",
    "sphere_hrirs",
    "sphere_transfer_function",
    "write_sofa",
]
