"""The synthetic room: the shoebox model and presets, image sources, the late tail, and
the filters a room adds per loudspeaker.
"""

from __future__ import annotations

from .filters import build_room_filters, exact_brirs, measure_rt60
from .image_source import image_sources
from .late_tail import (
    EAR_DISTANCE,
    TAIL_RANGE_DB,
    band_weights,
    diffuse_coherence,
    diffuse_field,
    late_tail,
    sphere_coherence,
    tail_length,
)
from .model import (
    BANDS_HZ,
    ROOMS,
    SURFACES,
    Room,
    absorption_for_rt60,
    air_attenuation_db_per_km,
    eyring_rt60,
    get_room,
    load_room_file,
    polack_mixing_time,
    room_from_dict,
    sabine_rt60,
)

__all__ = [
    "BANDS_HZ",
    "EAR_DISTANCE",
    "ROOMS",
    "Room",
    "SURFACES",
    "TAIL_RANGE_DB",
    "absorption_for_rt60",
    "air_attenuation_db_per_km",
    "band_weights",
    "build_room_filters",
    "diffuse_coherence",
    "diffuse_field",
    "exact_brirs",
    "eyring_rt60",
    "get_room",
    "image_sources",
    "late_tail",
    "load_room_file",
    "measure_rt60",
    "polack_mixing_time",
    "room_from_dict",
    "sabine_rt60",
    "sphere_coherence",
    "tail_length",
]
