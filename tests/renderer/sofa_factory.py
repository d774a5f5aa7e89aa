"""Generator of small synthetic SOFA files for the reader's tests.

Files are written directly with netCDF4, not with :func:`earfold.renderer.hrtf.write_sofa`,
so that the tests can build the variants the writer never makes: other conventions, cartesian or
radian positions, other spellings of units, rotated listeners, swapped receivers, several
emitters, and broken files.

A file is described by a :class:`Spec` (global attributes and variables); the builders
return a valid spec that a test then changes before calling :func:`write`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import netCDF4
import numpy as np

#: Directions of the default grid: (azimuth, elevation) in degrees, SOFA convention.
GRID = np.array(
    [[0, 0], [90, 0], [180, 0], [270, 0], [45, 30], [-45, -30], [0, 90], [135, -45]],
    dtype=float,
)

#: Distance (metres) of the default grid.
RADIUS = 1.5

#: Taps of the synthetic responses.
TAPS = 64


@dataclass
class Var:
    """One netCDF variable: dimension names, values (None: declared, never written), attributes."""

    dims: tuple[str, ...]
    data: Any
    attrs: dict[str, str] = field(default_factory=dict)
    dtype: str = "f8"


@dataclass
class Spec:
    """A SOFA file to write: global attributes, variables, and sizes of unwritten dimensions."""

    attrs: dict[str, str]
    variables: dict[str, Var]
    sizes: dict[str, int] = field(default_factory=dict)


def unit_vectors(azimuth: np.ndarray, elevation: np.ndarray) -> np.ndarray:
    """Unit vectors (x front, y left, z up) of directions in degrees."""
    az, el = np.radians(azimuth), np.radians(elevation)
    return np.stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)], axis=-1)


def synthetic_ir(directions: np.ndarray, taps: int = TAPS) -> np.ndarray:
    """Responses (M, 2, N), left ear first, that say which ear and measurement they are.

    Each ear gets an impulse whose onset and level follow the source's lateral position
    (a source on the left reaches the left ear earlier and louder, as a head does); tap
    N-2 holds +0.25 for the left ear and -0.25 for the right; tap N-1 holds (m + 1) / 1000.
    """
    y = np.asarray(directions, dtype=float)[:, 1]
    m = len(y)
    ir = np.zeros((m, 2, taps))
    rows = np.arange(m)
    ir[rows, 0, (16 - np.round(6 * y)).astype(int)] = 1.0 + 0.5 * y
    ir[rows, 1, (16 + np.round(6 * y)).astype(int)] = 1.0 - 0.5 * y
    ir[:, 0, -2] = 0.25
    ir[:, 1, -2] = -0.25
    ir[:, :, -1] = ((rows + 1) / 1000.0)[:, None]
    return ir


def global_attributes(convention: str, data_type: str, version: str, conv_version: str) -> dict:
    return {
        "Conventions": "SOFA",
        "Version": version,
        "SOFAConventions": convention,
        "SOFAConventionsVersion": conv_version,
        "APIName": "sofa_factory (earfold tests)",
        "APIVersion": "1",
        "AuthorContact": "",
        "DataType": data_type,
        "License": "CC0 test data",
        "Organization": "",
        "RoomType": "free field",
        "DateCreated": "2024-05-01 12:00:00",
        "DateModified": "2024-05-01 12:00:00",
        "Title": "synthetic test set",
        "DatabaseName": "factory",
        "ListenerShortName": "sphere-7",
    }


def simple_free_field(
    grid: np.ndarray = GRID,
    radius: float = RADIUS,
    *,
    rate: float = 48000.0,
    version: str = "2.1",
    conv_version: str = "1.0",
    convention: str = "SimpleFreeFieldHRIR",
) -> Spec:
    """A valid SimpleFreeFieldHRIR (or GeneralFIR) file: spherical degrees, listener at origin."""
    grid = np.asarray(grid, dtype=float)
    m = len(grid)
    positions = np.column_stack([grid, np.full(m, radius)])
    ir = synthetic_ir(unit_vectors(grid[:, 0], grid[:, 1]))
    cart = {"Type": "cartesian", "Units": "metre"}
    return Spec(
        attrs=global_attributes(convention, "FIR", version, conv_version),
        variables={
            "ListenerPosition": Var(("I", "C"), [[0.0, 0.0, 0.0]], dict(cart)),
            "ReceiverPosition": Var(
                ("R", "C", "I"), [[[0.0], [0.0875], [0.0]], [[0.0], [-0.0875], [0.0]]], dict(cart)
            ),
            "SourcePosition": Var(
                ("M", "C"), positions, {"Type": "spherical", "Units": "degree, degree, metre"}
            ),
            "EmitterPosition": Var(("E", "C", "I"), [[[0.0], [0.0], [0.0]]], dict(cart)),
            "ListenerUp": Var(("I", "C"), [[0.0, 0.0, 1.0]]),
            "ListenerView": Var(("I", "C"), [[1.0, 0.0, 0.0]], dict(cart)),
            "Data.IR": Var(("M", "R", "N"), ir),
            "Data.SamplingRate": Var(("I",), [rate], {"Units": "hertz"}),
            "Data.Delay": Var(("I", "R"), [[0.0, 0.0]]),
        },
    )


def general_fir_e(emitters: int = 2, grid: np.ndarray = GRID, radius: float = RADIUS) -> Spec:
    """A GeneralFIR-E file: Data.IR (M, R, N, E), emitter e scaled by e + 1, Data.Delay (M, R, E).

    The delay of measurement m, receiver r, emitter e is 10 e + r (samples).
    """
    spec = simple_free_field(grid, radius, convention="GeneralFIR-E", conv_version="2.0")
    spec.attrs["DataType"] = "FIR-E"
    ir = np.asarray(spec.variables["Data.IR"].data)
    spec.variables["Data.IR"] = Var(
        ("M", "R", "N", "E"), np.stack([ir * (e + 1) for e in range(emitters)], axis=-1)
    )
    m = ir.shape[0]
    delay = np.zeros((m, 2, emitters))
    delay += 10.0 * np.arange(emitters)[None, None, :] + np.arange(2)[None, :, None]
    spec.variables["Data.Delay"] = Var(("M", "R", "E"), delay)
    spec.variables["EmitterPosition"] = Var(
        ("E", "C", "I"), np.zeros((emitters, 3, 1)), {"Type": "cartesian", "Units": "metre"}
    )
    return spec


def write(path: Path, spec: Spec) -> Path:
    """Write ``spec`` as a netCDF-4 file at ``path``; dimension sizes come from the data."""
    sizes = dict(spec.sizes)
    for name, var in spec.variables.items():
        if var.data is None:
            continue
        shape = np.shape(var.data)
        assert len(shape) == len(var.dims), f"{name}: {shape} vs dims {var.dims}"
        for dim, n in zip(var.dims, shape):
            known = sizes.setdefault(dim, n)
            assert known == n, f"{name}: dimension {dim} is {n}, was {known}"
    ds = netCDF4.Dataset(path, "w", format="NETCDF4")
    try:
        for key, value in spec.attrs.items():
            ds.setncattr(key, value)
        for dim, n in sizes.items():
            ds.createDimension(dim, n)
        for name, var in spec.variables.items():
            # Chunked + compressed so that declared-but-unwritten data take no space.
            nc = ds.createVariable(name, var.dtype, var.dims, compression="zlib")
            for key, value in var.attrs.items():
                nc.setncattr(key, value)
            if var.data is not None:
                nc[...] = np.asarray(var.data)
    finally:
        ds.close()
    return path
