"""Writing SOFA: the checks of :func:`~earfold.renderer.hrtf.write_sofa`'s arguments and
the layout of a SimpleFreeFieldHRIR 1.0 file (AES69-2020, SOFA 2.0).

The file itself is created by :func:`earfold.renderer.hrtf.sofa.write_sofa`, the one
module that imports netCDF4; :func:`fill_dataset` writes into it.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
import numpy.typing as npt

from ..errors import SofaError, shown
from ._sofa_data import MAX_SAMPLERATE, MIN_SAMPLERATE, NcDataset

__all__ = ["SofaContents", "fill_dataset", "prepare_contents"]

#: Global attributes fixed by the writer (SimpleFreeFieldHRIR 1.0, AES69-2020).
_FIXED_ATTRIBUTES = (
    "Conventions",
    "Version",
    "SOFAConventions",
    "SOFAConventionsVersion",
    "DataType",
    "RoomType",
    "APIName",
    "APIVersion",
)
_ATTRIBUTE_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")


@dataclass(frozen=True)
class SofaContents:
    """Everything a SimpleFreeFieldHRIR file holds, checked and ready to write."""

    global_attributes: Mapping[str, str]
    ir: npt.NDArray[np.float64]  # (M, 2, N)
    samplerate: float
    azimuth: npt.NDArray[np.float64]  # (M,) degrees
    elevation: npt.NDArray[np.float64]  # (M,) degrees
    distance: npt.NDArray[np.float64]  # (M,) metres
    delay: npt.NDArray[np.float64]  # (1, 2) or (M, 2) samples
    receiver_offset: float  # metres


def prepare_contents(
    label: str,
    *,
    ir: npt.ArrayLike,
    samplerate: float,
    azimuth: npt.ArrayLike,
    elevation: npt.ArrayLike,
    distance: float | npt.ArrayLike,
    delay: npt.ArrayLike | None,
    attributes: Mapping[str, str] | None,
    receiver_offset: float,
    api_version: str,
) -> SofaContents:
    """Check the arguments of ``write_sofa`` (see there) and gather the file's contents.

    Raises
    ------
    SofaError
        An argument is out of range or of the wrong shape; the message starts with
        ``label``.
    """
    data = np.asarray(ir, dtype=np.float64)
    if data.ndim != 3 or data.shape[1] != 2 or data.shape[0] == 0 or data.shape[2] == 0:
        raise SofaError(f"{label}: ir must have shape (M, 2, N) with M, N > 0, got {data.shape!r}")
    M = data.shape[0]
    if not np.all(np.isfinite(data)):
        raise SofaError(f"{label}: ir contains NaN or infinite values")
    try:
        rate = float(samplerate)
    except (TypeError, ValueError):
        raise SofaError(f"{label}: samplerate must be a number, got {shown(samplerate)}") from None
    if not MIN_SAMPLERATE <= rate <= MAX_SAMPLERATE:
        raise SofaError(
            f"{label}: samplerate {rate!r} Hz is outside {MIN_SAMPLERATE:g} to "
            f"{MAX_SAMPLERATE:g} Hz"
        )
    az = np.asarray(azimuth, dtype=np.float64)
    el = np.asarray(elevation, dtype=np.float64)
    if az.shape != (M,) or el.shape != (M,):
        raise SofaError(
            f"{label}: azimuth and elevation must have shape ({M},), got {az.shape!r} and "
            f"{el.shape!r}"
        )
    if not np.all(np.isfinite(az)):
        raise SofaError(f"{label}: azimuth must be finite degrees")
    if not np.all(np.isfinite(el) & (np.abs(el) <= 90)):
        bad = el[~(np.isfinite(el) & (np.abs(el) <= 90))][0]
        raise SofaError(f"{label}: elevation must be within -90 to 90 degrees, got {float(bad)!r}")
    try:
        dist = np.broadcast_to(np.asarray(distance, dtype=np.float64), (M,))
    except ValueError:
        raise SofaError(
            f"{label}: distance must be one value or {M} values, got shape {np.shape(distance)!r}"
        ) from None
    if not np.all(np.isfinite(dist) & (dist > 0)):
        bad_d = dist[~(np.isfinite(dist) & (dist > 0))][0]
        raise SofaError(f"{label}: distance must be finite and > 0 metres, got {float(bad_d)!r}")
    dly: npt.NDArray[np.float64]
    if delay is None:
        dly = np.zeros((1, 2))
    else:
        dly = np.asarray(delay, dtype=np.float64)
        if dly.shape == (2,):
            dly = dly[np.newaxis]
        if dly.shape not in ((1, 2), (M, 2)):
            raise SofaError(
                f"{label}: delay must have shape (2,), (1, 2) or ({M}, 2), got {dly.shape!r}"
            )
        if not np.all(np.isfinite(dly) & (dly >= 0)):
            raise SofaError(f"{label}: delay must be finite and >= 0 samples")
    offset = float(receiver_offset)
    if not (np.isfinite(offset) and offset > 0):
        raise SofaError(
            f"{label}: receiver_offset must be > 0 metres, got {shown(receiver_offset)}"
        )

    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S")
    # Mandatory global attributes of SimpleFreeFieldHRIR 1.0 (AES69-2020), in its order.
    globals_: dict[str, str] = {
        "Conventions": "SOFA",
        "Version": "2.0",
        "SOFAConventions": "SimpleFreeFieldHRIR",
        "SOFAConventionsVersion": "1.0",
        "APIName": "earfold",
        "APIVersion": api_version,
        "ApplicationName": "earfold",
        "ApplicationVersion": api_version,
        "AuthorContact": "",
        "Comment": "",
        "DataType": "FIR",
        "History": "",
        "License": "No license provided, ask the author for permission",
        "Organization": "",
        "References": "",
        "RoomType": "free field",
        "Origin": "",
        "DateCreated": now,
        "DateModified": now,
        "Title": "",
        "DatabaseName": "",
        "ListenerShortName": "",
    }
    for key, value in (attributes or {}).items():
        if not isinstance(key, str) or not _ATTRIBUTE_NAME.fullmatch(key):
            raise SofaError(f"{label}: attribute name {shown(key)} is not a valid netCDF name")
        if key in _FIXED_ATTRIBUTES:
            raise SofaError(
                f"{label}: attribute {key!r} is fixed by the convention; fixed attributes: "
                f"{', '.join(_FIXED_ATTRIBUTES)}"
            )
        if not isinstance(value, str):
            raise SofaError(f"{label}: attribute {key!r} must be a string, got {shown(value)}")
        globals_[key] = value
    return SofaContents(globals_, data, rate, az, el, dist, dly, offset)


def fill_dataset(ds: NcDataset, contents: SofaContents) -> None:
    """Write ``contents`` into a new, empty netCDF-4 dataset, as SimpleFreeFieldHRIR 1.0."""
    data = contents.ir
    offset = contents.receiver_offset
    dly = contents.delay
    for key, value in contents.global_attributes.items():
        ds.setncattr(key, value)
    dim_sizes = {"I": 1, "C": 3, "R": 2, "E": 1, "N": data.shape[2], "M": data.shape[0]}
    for name, size in dim_sizes.items():
        ds.createDimension(name, size)

    def put(name: str, dims: tuple[str, ...], values: Any, **var_attrs: str) -> None:
        var = ds.createVariable(name, "f8", dims)
        for k, v in var_attrs.items():
            var.setncattr(k, v)
        var[...] = values

    put("ListenerPosition", ("I", "C"), [[0.0, 0.0, 0.0]], Type="cartesian", Units="metre")
    put(
        "ReceiverPosition",
        ("R", "C", "I"),
        [[[0.0], [offset], [0.0]], [[0.0], [-offset], [0.0]]],
        Type="cartesian",
        Units="metre",
    )
    put(
        "SourcePosition",
        ("M", "C"),
        np.stack([contents.azimuth, contents.elevation, contents.distance], axis=-1),
        Type="spherical",
        Units="degree, degree, metre",
    )
    put(
        "EmitterPosition",
        ("E", "C", "I"),
        [[[0.0], [0.0], [0.0]]],
        Type="cartesian",
        Units="metre",
    )
    put("ListenerUp", ("I", "C"), [[0.0, 0.0, 1.0]])
    put("ListenerView", ("I", "C"), [[1.0, 0.0, 0.0]], Type="cartesian", Units="metre")
    ir_var = ds.createVariable(
        "Data.IR", "f8", ("M", "R", "N"), compression="zlib", complevel=4, shuffle=True
    )
    ir_var[...] = data
    put("Data.SamplingRate", ("I",), [contents.samplerate], Units="hertz")
    put("Data.Delay", ("I", "R") if dly.shape[0] == 1 else ("M", "R"), dly)
