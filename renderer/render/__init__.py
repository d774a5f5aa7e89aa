"""One render: options, plan, streaming through the engine, delivery and the report."""

from __future__ import annotations

from ._render import RenderPlan, RenderSettings, plan_render, render, resolve_hrtf
from .plot_data import (
    LOUDNESS_POINTS,
    SpectrumMeter,
    energy_decay,
    schroeder_db,
    thin_series,
    third_octave_bands,
)

__all__ = [
    "LOUDNESS_POINTS",
    "RenderPlan",
    "RenderSettings",
    "SpectrumMeter",
    "energy_decay",
    "plan_render",
    "render",
    "resolve_hrtf",
    "schroeder_db",
    "thin_series",
    "third_octave_bands",
]
