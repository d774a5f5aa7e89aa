"""Commands built on the renderer: the benchmark, the demo, SOFA inspection.

Modules: ``_bench`` (``earfold bench``: processes, figures, the table), ``_bench_cases``
(what each case times, interleaved rounds), ``_bench_commands`` (``earfold bench
--commands``: whole commands, each a process, as a user times them; ``--adm``: the ADM
master's case), ``_bench_adm`` (that synthetic master, written by the renderer's own ADM
writer), ``_demo`` (the demo
stem and its render) and ``_inspect`` (a SOFA file's summary).
"""

from __future__ import annotations

from ._bench import format_bench, run_bench
from ._bench_adm import make_adm_master
from ._bench_cases import (
    DELIVERY_ROUNDS,
    EQ_ROUNDS,
    interleaved,
    make_noise_stem,
    round_ratios,
)
from ._bench_commands import (
    ADM_CASE,
    COMMAND_CASES,
    COMMAND_ROUNDS,
    adm_case,
    format_command_bench,
    run_command_bench,
)
from ._demo import make_demo_stem, run_demo
from ._inspect import inspect_sofa

__all__ = [
    "ADM_CASE",
    "COMMAND_CASES",
    "COMMAND_ROUNDS",
    "DELIVERY_ROUNDS",
    "EQ_ROUNDS",
    "adm_case",
    "format_bench",
    "format_command_bench",
    "inspect_sofa",
    "interleaved",
    "make_adm_master",
    "make_demo_stem",
    "make_noise_stem",
    "round_ratios",
    "run_bench",
    "run_command_bench",
    "run_demo",
]
