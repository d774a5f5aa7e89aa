"""Commands built on the renderer: the benchmark, the demo, SOFA inspection."""

from __future__ import annotations

from .bench import (
    DELIVERY_ROUNDS,
    EQ_ROUNDS,
    format_bench,
    interleaved,
    round_ratios,
    run_bench,
)
from .demo import run_demo
from .inspect import inspect_sofa

__all__ = [
    "DELIVERY_ROUNDS",
    "EQ_ROUNDS",
    "format_bench",
    "inspect_sofa",
    "interleaved",
    "round_ratios",
    "run_bench",
    "run_demo",
]
