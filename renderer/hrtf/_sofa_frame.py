"""Geometry of a SOFA file, normalised at the boundary: units, coordinate types,
positions, orientations, emitters and which receiver is the left ear.

AES69 gives ``SourcePosition`` in global coordinates and ``ReceiverPosition`` and
``EmitterPosition`` in the frames of the listener and the source, each orientation set
by a View and an Up vector. Everything here turns those into cartesian metres and
rotation matrices, so that :mod:`._sofa_read` derives one unit direction per measurement.
"""

from __future__ import annotations

import re
from collections.abc import Mapping

import numpy as np
import numpy.typing as npt

from ..errors import SofaError
from ._sofa_data import NcVariable
from ._sofa_vars import arrange, numeric, var_attributes

__all__ = ["emitter_offset", "positions", "receiver_swap", "rotation_into", "to_cartesian"]

#: Two receivers whose y coordinates differ by less than this (metres) are not told apart.
_RECEIVER_TOLERANCE = 1e-9

#: SOFA 1.0 (AES69-2015) is the first standardised version; see receiver_swap.
_FIRST_STANDARD_VERSION = (1, 0)

_UNITS = {
    "degree": ("angle", np.pi / 180.0),
    "degrees": ("angle", np.pi / 180.0),
    "deg": ("angle", np.pi / 180.0),
    "radian": ("angle", 1.0),
    "radians": ("angle", 1.0),
    "rad": ("angle", 1.0),
    "metre": ("length", 1.0),
    "metres": ("length", 1.0),
    "meter": ("length", 1.0),
    "meters": ("length", 1.0),
    "m": ("length", 1.0),
}
_VALID_UNITS = "'degree', 'degrees', 'radian', 'radians', 'metre', 'metres', 'meter', 'meters'"


def _version(text: str) -> tuple[int, ...] | None:
    parts = re.findall(r"\d+", text)
    return tuple(int(x) for x in parts[:2]) if parts else None


def _units(units: str, ptype: str, label: str, name: str) -> tuple[float, float, float]:
    """Scale factors to radians/metres for the three coordinates of ``ptype``."""
    tokens = [t for t in re.split(r"[,\s]+", units.strip().lower()) if t]
    for t in tokens:
        if t not in _UNITS:
            raise SofaError(
                f"{label}: {name} Units {units!r}: unknown unit {t!r}; valid: {_VALID_UNITS}"
            )
    kinds = [_UNITS[t][0] for t in tokens]
    scales = [_UNITS[t][1] for t in tokens]
    if ptype == "cartesian":
        if any(k != "length" for k in kinds) or len(tokens) not in (0, 1, 3):
            raise SofaError(
                f"{label}: {name} is cartesian but its Units are {units!r}; cartesian "
                "coordinates are lengths ('metre')"
            )
        return (1.0, 1.0, 1.0)
    # spherical: azimuth, elevation (angles), radius (length); missing parts default to
    # degree, degree, metre, the SOFA defaults.
    if not tokens:
        return (np.pi / 180.0, np.pi / 180.0, 1.0)
    if len(tokens) == 1 and kinds[0] == "angle":
        return (scales[0], scales[0], 1.0)
    if (
        len(tokens) in (2, 3)
        and kinds[:2] == ["angle", "angle"]
        and (len(tokens) == 2 or kinds[2] == "length")
    ):
        return (scales[0], scales[1], 1.0)
    raise SofaError(
        f"{label}: {name} is spherical but its Units are {units!r}; expected angle, angle, "
        "length such as 'degree, degree, metre'"
    )


def to_cartesian(
    values: np.ndarray,
    var_attrs: Mapping[str, str],
    default_type: str,
    label: str,
    name: str,
    notes: list[str] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Cartesian metres for coordinates ``(..., 3)``, and where the radius is known.

    A spherical position of radius <= 0 carries only a direction: it is returned as a unit
    vector with ``known`` False. Spherical elevations beyond +/-90 degrees are folded over
    the pole by the trigonometry (elevation 100 at azimuth 0 is elevation 80 at azimuth
    180); when ``notes`` is given, a sentence saying so is appended to it.
    """
    ptype = var_attrs.get("type", "").strip().lower()
    units = var_attrs.get("units", "")
    if not ptype:
        ptype = (
            "spherical"
            if any(_UNITS.get(t, ("", 0))[0] == "angle" for t in re.split(r"[,\s]+", units.lower()))
            else default_type
        )
    if ptype not in ("cartesian", "spherical"):
        raise SofaError(f"{label}: {name} has Type {ptype!r}; supported: 'cartesian', 'spherical'")
    scale = _units(units, ptype, label, name)
    if ptype == "cartesian":
        return values.astype(np.float64), np.ones(values.shape[:-1], dtype=bool)
    az = values[..., 0] * scale[0]
    el = values[..., 1] * scale[1]
    folded = np.abs(el) > np.pi / 2 + 1e-9
    if notes is not None and np.any(folded):
        worst = float(np.degrees(el.reshape(-1)[np.argmax(np.abs(el).reshape(-1))]))
        notes.append(
            f"{name} has {int(folded.sum())} elevation(s) beyond +/-90 degrees (up to "
            f"{worst:g}); they were folded over the pole (elevation 100 at azimuth 0 taken "
            "as elevation 80 at azimuth 180); check that the file's angles are what it means"
        )
    r = values[..., 2]
    known = r > 0
    radius = np.where(known, r, 1.0)
    xyz = np.stack(
        [radius * np.cos(el) * np.cos(az), radius * np.cos(el) * np.sin(az), radius * np.sin(el)],
        axis=-1,
    )
    return xyz, known


def positions(
    variables: Mapping[str, NcVariable],
    name: str,
    label: str,
    sizes: Mapping[str, int],
    default_type: str,
    notes: list[str] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """A position variable of dimensions (I, C) or (M, C): shape (1 or M, 3) and ``known``
    (``notes`` as for :func:`to_cartesian`)."""
    var = variables[name]
    arr = arrange(numeric(var, label, name), var.dimensions, ("M", "C"), sizes, label, name)
    if arr.shape[1] != 3:
        raise SofaError(f"{label}: {name} has {arr.shape[1]} coordinates; 3 are needed")
    return to_cartesian(arr, var_attributes(var, label, name), default_type, label, name, notes)


def _vector(
    variables: Mapping[str, NcVariable],
    name: str,
    default: tuple[float, float, float],
    label: str,
    sizes: Mapping[str, int],
) -> np.ndarray:
    """An orientation vector (View / Up), shape (1 or M, 3); only its direction matters."""
    if name not in variables:
        return np.array([default], dtype=np.float64)
    xyz, _known = positions(variables, name, label, sizes, "cartesian")
    # For an orientation a spherical radius of 0 still means "this direction".
    return xyz


def rotation_into(
    variables: Mapping[str, NcVariable], who: str, label: str, sizes: Mapping[str, int]
) -> np.ndarray:
    """Rotation matrices (1 or M, 3, 3) from global coordinates into ``who``'s frame.

    Rows are the frame's axes in global coordinates: x = View, z = Up made orthogonal to
    View (Gram-Schmidt), y = z x x (to the left).
    """
    view = _vector(variables, f"{who}View", (1.0, 0.0, 0.0), label, sizes)
    up = _vector(variables, f"{who}Up", (0.0, 0.0, 1.0), label, sizes)
    view, up = np.broadcast_arrays(view, up)
    vn = np.linalg.norm(view, axis=-1, keepdims=True)
    if np.any(vn == 0):
        raise SofaError(f"{label}: {who}View is a zero vector; it must point somewhere")
    x = view / vn
    u = up - np.sum(up * x, axis=-1, keepdims=True) * x
    un = np.linalg.norm(u, axis=-1, keepdims=True)
    if np.any(un <= 1e-9 * np.maximum(np.linalg.norm(up, axis=-1, keepdims=True), 1e-300)):
        raise SofaError(
            f"{label}: {who}Up is zero or parallel to {who}View; the orientation is undefined"
        )
    z = u / un
    y = np.cross(z, x)
    return np.stack([x, y, z], axis=-2)


def emitter_offset(
    variables: Mapping[str, NcVariable], label: str, sizes: Mapping[str, int], picked: int
) -> np.ndarray:
    """The picked emitter's position relative to SourcePosition, in global coordinates."""
    if "EmitterPosition" not in variables:
        return np.zeros((1, 3))
    var = variables["EmitterPosition"]
    var_attrs = var_attributes(var, label, "EmitterPosition")
    if "harmonic" in var_attrs.get("type", "").lower():
        return np.zeros((1, 3))  # an emitter in spherical harmonics has no position
    arr = arrange(
        numeric(var, label, "EmitterPosition"),
        var.dimensions,
        ("E", "C", "M"),
        sizes,
        label,
        "EmitterPosition",
    )
    arr = np.moveaxis(arr[picked if arr.shape[0] > 1 else 0], 0, -1)  # (1 or M, 3)
    if arr.shape[-1] != 3:
        raise SofaError(f"{label}: EmitterPosition has {arr.shape[-1]} coordinates; 3 are needed")
    offset, known = to_cartesian(arr, var_attrs, "cartesian", label, "EmitterPosition")
    offset = np.where(known[:, None], offset, 0.0)
    if not np.any(offset):
        return np.zeros((1, 3))
    frame = rotation_into(variables, "Source", label, sizes)
    # frame maps global -> source frame; its transpose maps the offset back to global.
    k = max(frame.shape[0], offset.shape[0])
    moved: npt.NDArray[np.float64] = np.einsum(
        "mji,mj->mi", np.broadcast_to(frame, (k, 3, 3)), np.broadcast_to(offset, (k, 3))
    )
    return moved


def receiver_swap(
    variables: Mapping[str, NcVariable],
    attrs: Mapping[str, str],
    label: str,
    sizes: Mapping[str, int],
) -> np.ndarray:
    """Per measurement: True where receiver 1, not 0, is the left ear."""
    M = sizes["M"]
    no_swap = np.zeros(M, dtype=bool)
    if "ReceiverPosition" not in variables:
        return no_swap
    version = _version(attrs.get("Version", ""))
    if version is not None and version < _FIRST_STANDARD_VERSION:
        # Files of the pre-standard SOFA 0.x (written by the 0.4 reference API) carry
        # ReceiverPosition y = -0.09, +0.09 while their Data.IR holds the left ear first:
        # the 0.x template had the sign wrong. Onset times of lateral sources confirm the
        # left-first order in the MIT KEMAR and IRCAM LISTEN sets, and the SOFA 1.0 upgrade
        # of the same MIT data has +0.09, -0.09 with unchanged data. So 0 = left.
        return no_swap
    var = variables["ReceiverPosition"]
    arr = arrange(
        numeric(var, label, "ReceiverPosition"),
        var.dimensions,
        ("R", "C", "M"),
        sizes,
        label,
        "ReceiverPosition",
    )
    if arr.shape[0] == 1:
        return no_swap  # one position for both receivers: nothing tells them apart
    xyz, _known = to_cartesian(
        np.moveaxis(arr, 1, -1),
        var_attributes(var, label, "ReceiverPosition"),
        "cartesian",
        label,
        "ReceiverPosition",
    )  # (R, 1 or M, 3)
    dy = xyz[0, :, 1] - xyz[1, :, 1]
    return np.broadcast_to(dy < -_RECEIVER_TOLERANCE, (M,)).copy()
