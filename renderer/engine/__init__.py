"""The streaming convolution engine and the LFE path."""

from __future__ import annotations

from .convolution import DEFAULT_BLOCK_SIZE, BinauralConvolver, convolve_reference
from .lfe import LfeOptions, lfe_filter

__all__ = [
    "BinauralConvolver",
    "DEFAULT_BLOCK_SIZE",
    "LfeOptions",
    "convolve_reference",
    "lfe_filter",
]
