"""One render: options, what feeds the ears, plan, streaming, delivery and the report.

Modules: :mod:`.options` (every render option declared once, and RenderSettings),
:mod:`.feeds` (what feeds the ears, per input channel), :mod:`.fold` (the ITU-R BS.775
stereo fold-down, the reference a binaural render is compared with), :mod:`.plan` (the plan, decided
before any audio is read), :mod:`.stream` (the streaming pass), :mod:`.report` (the
report) and :mod:`.plot_data` (its plots); :func:`render` runs them in turn.
"""

from __future__ import annotations

from .feeds import ChannelFeed, speaker_feeds
from .filter_cache import (
    PREPARATION_VERSION,
    FilterCache,
    cache_directory,
    cache_disabled,
    cache_limit_bytes,
    default_filter_cache,
)
from .fold import BS775_DOWNMIX, FOLD_CHOICES, fold_coefficients, fold_feeds
from .options import (
    DELIVERY_OPTIONS,
    RENDER_OPTIONS,
    ROOM_MODES,
    SOUND_OPTIONS,
    OptionSpec,
    RenderSettings,
    option,
    settings_from_options,
)
from .plan import RenderPlan, plan_from_feeds, plan_render, resolve_hrtf
from .plot_data import (
    LOUDNESS_POINTS,
    SpectrumMeter,
    energy_decay,
    schroeder_db,
    thin_series,
    third_octave_bands,
)
from .runner import render
from .stream import engine_for

__all__ = [
    "PREPARATION_VERSION",
    "FilterCache",
    "cache_directory",
    "cache_disabled",
    "cache_limit_bytes",
    "default_filter_cache",
    "BS775_DOWNMIX",
    "FOLD_CHOICES",
    "DELIVERY_OPTIONS",
    "LOUDNESS_POINTS",
    "RENDER_OPTIONS",
    "ROOM_MODES",
    "SOUND_OPTIONS",
    "ChannelFeed",
    "OptionSpec",
    "RenderPlan",
    "RenderSettings",
    "SpectrumMeter",
    "energy_decay",
    "engine_for",
    "fold_coefficients",
    "fold_feeds",
    "option",
    "plan_from_feeds",
    "plan_render",
    "render",
    "resolve_hrtf",
    "schroeder_db",
    "settings_from_options",
    "speaker_feeds",
    "thin_series",
    "third_octave_bands",
]
