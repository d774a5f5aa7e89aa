"""The streaming convolution engine, the LFE path, the render's engine with its shared tail,
the moving-source engine (time-varying filters, crossfaded) and the panning mixer."""

from __future__ import annotations

from .convolution import (
    DEFAULT_BLOCK_SIZE,
    MAX_BLOCK_SIZE,
    MIN_BLOCK_SIZE,
    BinauralConvolver,
    TransformPlan,
    choose_transform,
    convolve_reference,
)
from .lfe import (
    DEFAULT_LFE_CUTOFF_HZ,
    DEFAULT_LFE_GAIN_DB,
    LFE_GAIN_RANGE_DB,
    LfeOptions,
    lfe_filter,
)
from .moving import (
    GRID_STEP_DEG,
    GRID_VERSION,
    MAX_EXACT_PAIRS,
    MAX_UPDATE_SECONDS,
    SPREAD_COLUMNS,
    MovingSourceEngine,
    PairFunction,
    PairTable,
    PathLike,
    SourcePath,
)
from .panning import GainFunction, PanningMixer, SpreadGains
from .scheduler import TAIL_BLOCK_FRAMES, FoldEngine

__all__ = [
    "BinauralConvolver",
    "DEFAULT_BLOCK_SIZE",
    "DEFAULT_LFE_CUTOFF_HZ",
    "DEFAULT_LFE_GAIN_DB",
    "LFE_GAIN_RANGE_DB",
    "MAX_BLOCK_SIZE",
    "MIN_BLOCK_SIZE",
    "FoldEngine",
    "GainFunction",
    "GRID_STEP_DEG",
    "GRID_VERSION",
    "MAX_EXACT_PAIRS",
    "MAX_UPDATE_SECONDS",
    "MovingSourceEngine",
    "PairFunction",
    "PairTable",
    "PanningMixer",
    "PathLike",
    "SourcePath",
    "SPREAD_COLUMNS",
    "SpreadGains",
    "LfeOptions",
    "TAIL_BLOCK_FRAMES",
    "TransformPlan",
    "choose_transform",
    "convolve_reference",
    "lfe_filter",
]
