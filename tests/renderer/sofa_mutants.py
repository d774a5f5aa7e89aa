"""Mutants of a valid SOFA file, for testing that the guarded reader survives hostile input.

The base file is a small ``SimpleFreeFieldHRIR`` set written by the project's own
:func:`earfold.renderer.hrtf.write_sofa`. Each mutant is made by one named recipe from a
seeded random generator, so a failing mutant is reproduced from its seed and recipe:

* byte-level damage: flipped bits (in the header region, where HDF5's structures are, or
  anywhere), truncation, a chunk of random bytes or of zeros written over the file, a chunk
  repeated;
* hostile values written into a copy of the base file through netCDF4: NaN, infinity, huge
  magnitudes, huge or negative delays, absurd sample rates, silent or nearly silent
  responses, all directions equal, elevations beyond the poles;
* forged structure written with the test factory (:mod:`sofa_factory`): dimensions declared
  huge but never written, empty dimensions, variables of the wrong shape.

:func:`make_mutant` writes one file and returns its recipe name; :func:`sample` lists
``(recipe, seed)`` pairs to run.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path

import netCDF4
import numpy as np
import sofa_factory as fac

from earfold.renderer.hrtf import write_sofa

#: Directions of the base file: a ring of 12 plus 6 above and 6 below.
_AZ = np.concatenate([np.arange(0, 360, 30.0), np.arange(0, 360, 60.0), np.arange(0, 360, 60.0)])
_EL = np.concatenate([np.zeros(12), np.full(6, 40.0), np.full(6, -40.0)])
_TAPS = 32

#: Bytes at the start of the file where HDF5's superblock and first object headers live.
_HEADER_BYTES = 4096


def write_base(path: Path) -> Path:
    """The valid base file: 24 directions, 32 taps, 48 kHz, a small per-ear delay."""
    rng = np.random.default_rng(0)
    ir = rng.standard_normal((len(_AZ), 2, _TAPS)) * np.exp(-np.arange(_TAPS) / 6.0)
    ir[:, :, 2] += 1.0
    delay = np.column_stack([np.zeros(len(_AZ)), np.full(len(_AZ), 3.0)])
    write_sofa(path, ir=ir, samplerate=48000.0, azimuth=_AZ, elevation=_EL, delay=delay)
    return path


# -- byte-level damage ------------------------------------------------------------------


def _flip_header_bits(data: bytearray, rng: np.random.Generator) -> None:
    for _ in range(4):
        pos = int(rng.integers(0, min(len(data), _HEADER_BYTES)))
        data[pos] ^= 1 << int(rng.integers(0, 8))


def _flip_any_bits(data: bytearray, rng: np.random.Generator) -> None:
    for _ in range(int(rng.integers(1, 17))):
        pos = int(rng.integers(0, len(data)))
        data[pos] ^= 1 << int(rng.integers(0, 8))


def _truncate(data: bytearray, rng: np.random.Generator) -> None:
    del data[int(rng.integers(8, len(data))) :]


def _random_chunk(data: bytearray, rng: np.random.Generator) -> None:
    size = int(rng.integers(1, 257))
    pos = int(rng.integers(0, len(data) - size))
    data[pos : pos + size] = rng.integers(0, 256, size, dtype=np.uint8).tobytes()


def _zero_chunk(data: bytearray, rng: np.random.Generator) -> None:
    size = int(rng.integers(1, 257))
    pos = int(rng.integers(0, len(data) - size))
    data[pos : pos + size] = bytes(size)


def _repeat_chunk(data: bytearray, rng: np.random.Generator) -> None:
    size = int(rng.integers(8, 513))
    pos = int(rng.integers(0, len(data) - size))
    at = int(rng.integers(0, len(data)))
    data[at:at] = data[pos : pos + size]


_BYTE_RECIPES: dict[str, Callable[[bytearray, np.random.Generator], None]] = {
    "flip_header_bits": _flip_header_bits,
    "flip_any_bits": _flip_any_bits,
    "truncate": _truncate,
    "random_chunk": _random_chunk,
    "zero_chunk": _zero_chunk,
    "repeat_chunk": _repeat_chunk,
}


# -- hostile values (written into a copy of the base file) -------------------------------


def _set(path: Path, name: str, change: Callable[[np.ndarray], np.ndarray]) -> None:
    ds = netCDF4.Dataset(path, "r+")
    try:
        var = ds.variables[name]
        var.set_auto_mask(False)
        var[...] = change(np.array(var[...], dtype=np.float64))
    finally:
        ds.close()


def _poke(value: float) -> Callable[[np.ndarray, np.random.Generator], np.ndarray]:
    def change(a: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        flat = a.reshape(-1)
        flat[int(rng.integers(0, flat.size))] = value
        return a

    return change


_VALUE_RECIPES: dict[str, tuple[str, Callable[[np.ndarray, np.random.Generator], np.ndarray]]] = {
    "ir_nan": ("Data.IR", _poke(np.nan)),
    "ir_inf": ("Data.IR", _poke(np.inf)),
    "ir_huge": ("Data.IR", _poke(1e300)),
    "ir_all_tiny": ("Data.IR", lambda a, rng: a * 1e-300),
    "ir_all_zero": ("Data.IR", lambda a, rng: a * 0.0),
    "delay_huge": ("Data.Delay", lambda a, rng: a + 1e9),
    "delay_negative": ("Data.Delay", lambda a, rng: a - 50.0),
    "delay_nan": ("Data.Delay", _poke(np.nan)),
    "rate_huge": ("Data.SamplingRate", lambda a, rng: a * 0 + 1e12),
    "rate_zero": ("Data.SamplingRate", lambda a, rng: a * 0),
    "rate_negative": ("Data.SamplingRate", lambda a, rng: a * 0 - 48000.0),
    "rate_nan": ("Data.SamplingRate", lambda a, rng: a * np.nan),
    "positions_nan": ("SourcePosition", _poke(np.nan)),
    "positions_one_direction": ("SourcePosition", lambda a, rng: a * 0 + [[30.0, 10.0, 1.0]]),
    "positions_beyond_pole": ("SourcePosition", lambda a, rng: a + [[0.0, 200.0, 0.0]]),
    "positions_zero_radius": ("SourcePosition", lambda a, rng: a * [[1.0, 1.0, 0.0]]),
}


# -- forged structure (written with the test factory) ------------------------------------


def _forged(kind: str, rng: np.random.Generator) -> fac.Spec:
    spec = fac.simple_free_field()
    m = len(fac.GRID)
    if kind == "forged_huge_taps":
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), None)
        spec.sizes.update(M=m, R=2, N=int(rng.integers(2**21, 2**30)))
    elif kind == "forged_huge_measurements":
        spec.variables["SourcePosition"] = fac.Var(("M", "C"), None)
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), None)
        spec.sizes.update(M=int(rng.integers(2**19, 2**31)), R=2, N=64, C=3)
    elif kind == "forged_many_values":
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), None)
        spec.variables["SourcePosition"] = fac.Var(("M", "C"), None)
        spec.sizes.update(M=200_000, R=2, N=4096, C=3)
    elif kind == "forged_huge_positions":
        spec.variables["ListenerView"] = fac.Var(("Q", "C"), None)
        spec.sizes.update(Q=2**28)
    elif kind == "empty_measurements":
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), np.zeros((0, 2, 64)))
        spec.variables["SourcePosition"] = fac.Var(("M", "C"), np.zeros((0, 3)))
    elif kind == "wrong_receivers":
        ir = np.asarray(spec.variables["Data.IR"].data)
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), np.concatenate([ir, ir[:, :1]], 1))
        spec.variables["ReceiverPosition"] = fac.Var(("R", "C", "I"), np.zeros((3, 3, 1)))
        spec.variables["Data.Delay"] = fac.Var(("I", "R"), np.zeros((1, 3)))
    elif kind == "wrong_position_shape":
        spec.variables["SourcePosition"] = fac.Var(("M", "Q"), np.zeros((m, 2)))
    elif kind == "wrong_delay_shape":
        spec.variables["Data.Delay"] = fac.Var(("Q", "R"), np.zeros((m + 3, 2)))
    elif kind == "ir_as_text":
        spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), None, dtype="S1")
        spec.sizes.update(M=m, R=2, N=64)
    else:
        raise ValueError(kind)
    return spec


_FORGED = (
    "forged_huge_taps",
    "forged_huge_measurements",
    "forged_many_values",
    "forged_huge_positions",
    "empty_measurements",
    "wrong_receivers",
    "wrong_position_shape",
    "wrong_delay_shape",
    "ir_as_text",
)

#: Every recipe, byte-level first.
RECIPES = tuple(_BYTE_RECIPES) + tuple(_VALUE_RECIPES) + _FORGED


def make_mutant(base: Path, recipe: str, seed: int, out: Path) -> Path:
    """Write the mutant ``recipe`` of ``base`` made with ``seed`` to ``out``."""
    rng = np.random.default_rng(seed)
    if recipe in _BYTE_RECIPES:
        data = bytearray(base.read_bytes())
        _BYTE_RECIPES[recipe](data, rng)
        out.write_bytes(bytes(data))
    elif recipe in _VALUE_RECIPES:
        shutil.copyfile(base, out)
        name, change = _VALUE_RECIPES[recipe]
        _set(out, name, lambda a: change(a, rng))
    else:
        fac.write(out, _forged(recipe, rng))
    return out


def sample(count: int, seed: int) -> list[tuple[str, int]]:
    """``count`` (recipe, seed) pairs: every value and forged recipe once, the rest
    byte-level damage (where the HDF5 library itself is attacked), in a seeded order."""
    rng = np.random.default_rng(seed)
    fixed = [r for r in RECIPES if r not in _BYTE_RECIPES]
    picks = [(r, int(rng.integers(0, 2**31))) for r in fixed[:count]]
    byte_recipes = list(_BYTE_RECIPES)
    while len(picks) < count:
        recipe = byte_recipes[len(picks) % len(byte_recipes)]
        picks.append((recipe, int(rng.integers(0, 2**31))))
    return picks
