"""The synthetic room: the shoebox model and presets, image sources, the late tail, and
the filters a room adds per loudspeaker.

Modules, each one concept: ``_acoustics`` (Sabine, Eyring, air absorption, absorption
from RT60, mixing time), ``_model`` (the :class:`Room` and its checks), ``_schema`` (rooms
as JSON and room files), ``_presets`` (:data:`ROOMS`, :func:`get_room`),
``_image_source`` (direct path and early reflections), ``_diffuse`` (an HRIR set's
diffuse-field response), ``_diffuse_response`` (a short binaural noise through which a
mono signal sounds diffuse, free field), ``_late_tail`` (octave bands and the decaying tail),
``_measure`` (RT60 measured back) and ``_filters`` (the filters a render runs).
"""

from __future__ import annotations

from ._acoustics import (
    BANDS_HZ,
    absorption_for_rt60,
    air_attenuation_db_per_km,
    eyring_rt60,
    polack_mixing_time,
    sabine_rt60,
)
from ._diffuse import EAR_DISTANCE, DiffuseField, diffuse_coherence, diffuse_field, sphere_coherence
from ._diffuse_response import DIFFUSE_RESPONSE_SECONDS, diffuse_response, mean_pair_energy
from ._filters import RoomFilters, build_room_filters, exact_brirs
from ._image_source import ImageSources, image_sources
from ._late_tail import TAIL_RANGE_DB, band_weights, late_tail, tail_length
from ._measure import measure_rt60
from ._model import DEFAULT_ORDER, MAX_ORDER, SURFACES, Room
from ._placement import VIRTUAL_CLEARANCE_M, virtual_distance
from ._presets import ROOMS, get_room
from ._schema import load_room_file, room_from_dict

__all__ = [
    "VIRTUAL_CLEARANCE_M",
    "virtual_distance",
    "BANDS_HZ",
    "DEFAULT_ORDER",
    "DIFFUSE_RESPONSE_SECONDS",
    "EAR_DISTANCE",
    "MAX_ORDER",
    "ROOMS",
    "Room",
    "RoomFilters",
    "SURFACES",
    "TAIL_RANGE_DB",
    "DiffuseField",
    "ImageSources",
    "absorption_for_rt60",
    "air_attenuation_db_per_km",
    "band_weights",
    "build_room_filters",
    "diffuse_coherence",
    "diffuse_field",
    "diffuse_response",
    "exact_brirs",
    "eyring_rt60",
    "get_room",
    "image_sources",
    "late_tail",
    "load_room_file",
    "mean_pair_energy",
    "measure_rt60",
    "polack_mixing_time",
    "room_from_dict",
    "sabine_rt60",
    "sphere_coherence",
    "tail_length",
]
