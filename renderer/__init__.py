"""earfold's DSP library: SOFA HRIR sets, layouts, streaming binaural convolution.

The public surface is what this module exports (plus :func:`earfold.renderer.render.render`,
the whole render, which keeps its wing's name). The renderer is laid out in wings, one
concept each, every wing naming its own public surface in its ``__init__``; DEVELOPERS.md
has the map and says which way imports go.
Directions follow :mod:`earfold.renderer.geometry` (azimuth positive to the left, elevation up).
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import (
    AudioError,
    HrirError,
    LayoutError,
    RenderCancelled,
    RendererError,
    RoomError,
    SceneError,
    SofaError,
)

# Everything else is imported on first use (PEP 562), so that ``import earfold.renderer`` (and the
# error types) stays cheap and does not load netCDF4, soundfile or scipy until needed.
_LAZY = {
    "OutputWriter": "io",
    "StemInfo": "io",
    "StemReader": "io",
    "probe_stem": "io",
    "read_audio": "io",
    "write_audio": "io",
    "HeadphoneEq": "eq",
    "load_headphone_eq": "eq",
    "calibration_gain": "eq",
    "BinauralConvolver": "engine",
    "diffuse_field": "eq",
    "equalised": "eq",
    "convolve_reference": "engine",
    "HrirPair": "hrtf",
    "HrirSet": "hrtf",
    "load_hrir_set": "hrtf",
    "LAYOUTS": "layouts",
    "Layout": "layouts",
    "Speaker": "layouts",
    "get_layout": "layouts",
    "load_layout_file": "layouts",
    "LfeOptions": "engine",
    "RenderPlan": "render",
    "RenderSettings": "render",
    "plan_render": "render",
    "ROOMS": "room",
    "Room": "room",
    "get_room": "room",
    "load_room_file": "room",
    "SceneDecoder": "scenes",
    "scene_decoder": "scenes",
    "SofaData": "hrtf",
    "read_sofa": "hrtf",
    "write_sofa": "hrtf",
}


def __getattr__(name: str) -> object:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'earfold.renderer' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)


__all__ = [
    "LAYOUTS",
    "AudioError",
    "BinauralConvolver",
    "HeadphoneEq",
    "HrirError",
    "HrirPair",
    "HrirSet",
    "LayoutError",
    "Layout",
    "LfeOptions",
    "OutputWriter",
    "ROOMS",
    "RenderCancelled",
    "RenderPlan",
    "RenderSettings",
    "RendererError",
    "Room",
    "RoomError",
    "SceneDecoder",
    "SceneError",
    "SofaData",
    "SofaError",
    "Speaker",
    "StemInfo",
    "StemReader",
    "__version__",
    "calibration_gain",
    "convolve_reference",
    "diffuse_field",
    "equalised",
    "get_layout",
    "get_room",
    "load_headphone_eq",
    "load_hrir_set",
    "load_layout_file",
    "load_room_file",
    "plan_render",
    "probe_stem",
    "read_audio",
    "read_sofa",
    "scene_decoder",
    "write_audio",
    "write_sofa",
]
