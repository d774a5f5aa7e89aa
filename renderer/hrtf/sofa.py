"""Reading and writing SOFA (AES69) files of binaural impulse responses.

:func:`read_sofa` turns the SOFA variants met in practice into one normalised, frozen
:class:`SofaData`: left ear first, ``Data.Delay`` in samples for every measurement,
directions as unit vectors in the listener's frame (x = the listener's view, y = left,
z = up, as in :mod:`earfold.renderer.geometry`), distances in metres. Nothing downstream sees raw
SOFA. Supported conventions: ``SimpleFreeFieldHRIR`` (headers 0.4 to 2.x),
``GeneralFIR`` and ``GeneralFIR-E`` (one emitter picked). Positions may be cartesian or
spherical, in degrees or radians, metres spelled any usual way; every variable may be
given once for all measurements (``I``) or per measurement (``M``).

Every problem with a file raises :class:`~earfold.renderer.errors.SofaError` whose message starts
with the file name; errors of the netCDF/HDF5 layer (damaged, truncated or fuzzed files)
are re-raised as :class:`SofaError` with their cause, and the file is always closed.

:func:`write_sofa` writes a ``SimpleFreeFieldHRIR`` 1.0 file (AES69-2020, SOFA 2.0) in
netCDF-4/HDF5 format, atomically (temporary file in the same folder, then
:func:`os.replace`).

This module is the only one that imports netCDF4.
"""

from __future__ import annotations

import itertools
import os
import re
import types
import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime

import netCDF4
import numpy as np

from ..errors import SofaError

__all__ = [
    "MAX_TAPS",
    "MAX_VALUES",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "SUPPORTED_CONVENTIONS",
    "SofaData",
    "read_sofa",
    "write_sofa",
]

#: SOFA conventions the reader accepts, with the ``DataType`` each one uses.
SUPPORTED_CONVENTIONS: Mapping[str, str] = types.MappingProxyType(
    {"SimpleFreeFieldHRIR": "FIR", "GeneralFIR": "FIR", "GeneralFIR-E": "FIR-E"}
)

#: Lowest sample rate (Hz) accepted; below it a file is almost certainly mislabelled.
MIN_SAMPLERATE = 8000.0

#: Highest sample rate (Hz) accepted (the highest rate in common studio use).
MAX_SAMPLERATE = 384000.0

#: Longest impulse response accepted, in taps. 2**20 taps is over 20 s at 48 kHz, far
#: beyond any HRIR or binaural room response; longer means a damaged header.
MAX_TAPS = 2**20

#: Most values of ``Data.IR`` read from one file (2**28 float64 values = 2 GiB). The declared
#: sizes are checked before anything is read, so a forged header cannot exhaust memory.
MAX_VALUES = 2**28

#: Values beyond this magnitude are netCDF fill values (9.97e36 by default, i.e. data that
#: were never written) or garbage; no impulse response, position or delay comes near it.
_FILL_LIMIT = 1e30

#: Two receivers whose y coordinates differ by less than this (metres) are not told apart.
_RECEIVER_TOLERANCE = 1e-9

#: SOFA 1.0 (AES69-2015) is the first standardised version; see _legacy_receivers.
_FIRST_STANDARD_VERSION = (1, 0)

#: Everything the netCDF4/HDF5 layer was seen to raise on damaged or fuzzed files.
_NC_ERRORS = (
    OSError,
    AttributeError,
    RuntimeError,
    KeyError,
    IndexError,
    ValueError,
    TypeError,
    OverflowError,
    MemoryError,
)

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


@dataclass(frozen=True, eq=False)
class SofaData:
    """The contents of a SOFA file, normalised for rendering.

    Attributes
    ----------
    path : str
        The path as given to :func:`read_sofa`.
    convention : str
        ``SOFAConventions`` (e.g. ``"SimpleFreeFieldHRIR"``, ``"GeneralFIR-E"``).
    convention_version : str
        ``SOFAConventionsVersion`` ("" if absent).
    sofa_version : str
        The global ``Version`` of the SOFA specification ("" if absent).
    data_type : str
        ``"FIR"`` or ``"FIR-E"``.
    room_type : str
        ``RoomType`` in lower case ("free field", "reverberant", "shoebox", ...; "" if absent).
    samplerate : float
        Sample rate in Hz.
    ir : ndarray, shape (M, 2, N), float64
        Impulse responses; index 0 is the LEFT ear, 1 the RIGHT ear.
    delay : ndarray, shape (M, 2), float64
        ``Data.Delay`` in samples for every measurement and ear (broadcast), not applied.
    directions : ndarray, shape (M, 3), float64
        Unit vectors of the source as seen by the listener, in the listener's frame
        (x = the listener's view, y = left, z = up).
    distances : ndarray, shape (M,), float64
        Metres from listener to source (nan where the file does not say).
    emitter : int or None
        The emitter picked from a ``GeneralFIR-E`` file, else None.
    attributes : Mapping[str, str]
        All global attributes as strings (read-only).
    """

    path: str
    convention: str
    convention_version: str
    sofa_version: str
    data_type: str
    room_type: str
    samplerate: float
    ir: np.ndarray = field(repr=False)
    delay: np.ndarray = field(repr=False)
    directions: np.ndarray = field(repr=False)
    distances: np.ndarray = field(repr=False)
    emitter: int | None = None
    attributes: Mapping[str, str] = field(default_factory=dict, repr=False)

    @property
    def measurements(self) -> int:
        """Number of measurements M."""
        return int(self.ir.shape[0])

    @property
    def taps(self) -> int:
        """Length N of each impulse response."""
        return int(self.ir.shape[2])

    @property
    def silent(self) -> bool:
        """True when every impulse response is all zeros (only a GeneralFIR file can be)."""
        return not np.any(self.ir)


# ---------------------------------------------------------------------------------------
# reading


def read_sofa(path: str | os.PathLike, *, emitter: int | None = None) -> SofaData:
    """Read and validate a SOFA file of two-receiver impulse responses.

    Parameters
    ----------
    path : str or os.PathLike
        The ``.sofa`` file (netCDF-4/HDF5).
    emitter : int, optional
        Which emitter to take from a ``GeneralFIR-E`` file (0-based). Required when the
        file holds more than one; a file with one emitter needs none.

    Returns
    -------
    SofaData

    Raises
    ------
    SofaError
        The file is missing, not netCDF-4/HDF5, damaged, not SOFA, of an unsupported
        convention or data type, or its data cannot be rendered (wrong number of
        receivers, mismatched dimensions, NaN or fill values, sample rate outside
        8-384 kHz, absurd sizes, negative delays). The message starts with the file name.

    Notes
    -----
    Geometry follows AES69: ``SourcePosition`` is in global coordinates; the direction
    returned is that of the source relative to ``ListenerPosition``, rotated into the
    frame set by ``ListenerView`` (default +x) and ``ListenerUp`` (default +z).
    ``ReceiverPosition`` is in the listener's frame: the receiver with the larger y is
    the left ear. For ``GeneralFIR-E`` files the picked emitter's ``EmitterPosition`` is
    added to ``SourcePosition`` as an offset in the source's frame (``SourceView`` /
    ``SourceUp``, default +x / +z), which is how AES69 places emitters; an emitter in
    spherical harmonics has no position and adds none. A spherical ``SourcePosition`` of
    radius 0 gives a direction from its angles alone (relative to the listener's
    orientation) and a distance of nan.
    """
    p = os.fsdecode(os.fspath(path))
    label = repr(os.path.basename(p) or p)
    if emitter is not None and (
        isinstance(emitter, bool) or not isinstance(emitter, (int, np.integer))
    ):
        raise SofaError(f"{label}: emitter must be an integer index or None, got {emitter!r}")
    _check_file(p, label)
    try:
        ds = netCDF4.Dataset(p, "r")
    except _NC_ERRORS as exc:
        raise SofaError(
            f"{label}: not a readable netCDF-4/HDF5 file: damaged, truncated or of another "
            f"format ({_cause(exc)})"
        ) from exc
    try:
        return _read(ds, p, label, None if emitter is None else int(emitter))
    except SofaError:
        raise
    except _NC_ERRORS as exc:
        raise SofaError(f"{label}: the file is damaged and cannot be read ({_cause(exc)})") from exc
    finally:
        try:
            ds.close()
        except _NC_ERRORS:
            pass


def _cause(exc: BaseException) -> str:
    # An OSError's text repeats the path; its strerror alone says what went wrong.
    text = (exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)).strip()
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def _check_file(p: str, label: str) -> None:
    """Refuse what cannot be a SOFA file before handing it to the HDF5 library."""
    try:
        st = os.stat(p)
    except OSError as exc:
        raise SofaError(f"{label}: cannot open the file ({exc.strerror or exc})") from None
    if not os.path.isfile(p):
        raise SofaError(f"{label}: is not a regular file")
    if st.st_size == 0:
        raise SofaError(f"{label}: the file is empty (0 bytes), not a SOFA file")
    try:
        with open(p, "rb") as fh:
            head = fh.read(8)
            if head.startswith(b"CDF") or head == b"\x89HDF\r\n\x1a\n":
                return
            # HDF5 allows a user block before the superblock: the signature may also sit
            # at 512, 1024, 2048, ... bytes (HDF5 file format specification, section II.A).
            offset = 512
            while offset + 8 <= st.st_size:
                fh.seek(offset)
                if fh.read(8) == b"\x89HDF\r\n\x1a\n":
                    return
                offset *= 2
    except OSError as exc:
        raise SofaError(f"{label}: cannot read the file ({exc.strerror or exc})") from None
    # the first bytes as hex and as printable text (never a bytes repr in a message)
    text = "".join(chr(b) if 32 <= b < 127 else "." for b in head)
    raise SofaError(
        f"{label}: not a SOFA file: SOFA files are netCDF-4/HDF5, and this file has no "
        f'HDF5 or netCDF signature (its first bytes are {head.hex(" ")}, as text "{text}")'
    )


def _text(value: object) -> str:
    """An attribute value as a string (netCDF gives str, bytes, numbers or arrays)."""
    if isinstance(value, str):
        return value
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray):
        if value.size == 1:
            return _text(value.reshape(-1)[0])
        return " ".join(_text(v) for v in value.reshape(-1))
    if isinstance(value, np.generic):
        return _text(value.item())
    if isinstance(value, (list, tuple)):
        return " ".join(_text(v) for v in value)
    return str(value)


def _global_attributes(ds: netCDF4.Dataset, label: str) -> dict[str, str]:
    try:
        names = list(ds.ncattrs())
    except _NC_ERRORS as exc:
        raise SofaError(
            f"{label}: the global attributes cannot be read ({_cause(exc)}); the file is "
            "damaged or is not a SOFA file"
        ) from exc
    out: dict[str, str] = {}
    for name in names:
        try:
            out[str(name)] = _text(ds.getncattr(name))
        except _NC_ERRORS as exc:
            raise SofaError(
                f"{label}: global attribute {name!r} cannot be read ({_cause(exc)})"
            ) from exc
    return out


def _var_attributes(var: netCDF4.Variable, label: str, name: str) -> dict[str, str]:
    """A variable's attributes with lower-case names (``Type``, ``Units`` ...)."""
    try:
        return {str(k).lower(): _text(var.getncattr(k)) for k in var.ncattrs()}
    except _NC_ERRORS as exc:
        raise SofaError(f"{label}: attributes of {name} cannot be read ({_cause(exc)})") from exc


def _version(text: str) -> tuple[int, ...] | None:
    parts = re.findall(r"\d+", text)
    return tuple(int(x) for x in parts[:2]) if parts else None


def _read(ds: netCDF4.Dataset, path: str, label: str, emitter: int | None) -> SofaData:
    attrs = _global_attributes(ds, label)

    conventions = attrs.get("Conventions")
    if conventions is None:
        raise SofaError(
            f"{label}: no global attribute 'Conventions'; a SOFA file has Conventions = 'SOFA'"
        )
    if conventions.strip().upper() != "SOFA":
        raise SofaError(
            f"{label}: Conventions is {conventions!r}, not 'SOFA': a netCDF file, but not SOFA"
        )
    supported = ", ".join(repr(c) for c in SUPPORTED_CONVENTIONS)
    raw_convention = attrs.get("SOFAConventions")
    if raw_convention is None:
        raise SofaError(
            f"{label}: no global attribute 'SOFAConventions'; supported conventions: {supported}"
        )
    convention = next(
        (c for c in SUPPORTED_CONVENTIONS if c.lower() == raw_convention.strip().lower()), None
    )
    if convention is None:
        raise SofaError(
            f"{label}: SOFAConventions {raw_convention!r} is not supported; "
            f"supported conventions: {supported}"
        )
    expected_type = SUPPORTED_CONVENTIONS[convention]
    raw_type = attrs.get("DataType")
    # A missing DataType is taken from the convention (it is fixed by it); a wrong one is not.
    data_type = expected_type if raw_type is None else raw_type.strip().upper()
    if data_type == "FIRE":  # spelling of pre-standard files
        data_type = "FIR-E"
    if data_type not in ("FIR", "FIR-E"):
        raise SofaError(
            f"{label}: DataType is {raw_type!r}; only impulse responses can be rendered: "
            "'FIR' or 'FIR-E'"
        )
    if data_type != expected_type:
        raise SofaError(
            f"{label}: DataType {raw_type!r} does not fit SOFAConventions {convention!r}, "
            f"which stores {expected_type!r}"
        )

    try:
        variables = dict(ds.variables)
    except _NC_ERRORS as exc:
        raise SofaError(f"{label}: the variables cannot be listed ({_cause(exc)})") from exc
    missing = [v for v in ("Data.IR", "Data.SamplingRate", "SourcePosition") if v not in variables]
    if missing:
        raise SofaError(
            f"{label}: missing required variable(s) {', '.join(repr(m) for m in missing)}"
        )
    if "ListenerRotation" in variables:
        raise SofaError(
            f"{label}: uses the pre-release SimpleFreeFieldHRIR 0.2 layout (ListenerRotation); "
            "convert it to SOFA 1.0 or later"
        )

    # -- Data.IR: shape checks before anything is read ----------------------------------
    ir_var = variables["Data.IR"]
    want = ("M", "R", "N", "E") if data_type == "FIR-E" else ("M", "R", "N")
    shape = tuple(int(s) for s in ir_var.shape)
    dims = tuple(str(d) for d in ir_var.dimensions)
    if len(shape) != len(want):
        raise SofaError(
            f"{label}: Data.IR has {len(shape)} dimensions {dims!r}; {convention} stores "
            f"{len(want)}: ({', '.join(want)})"
        )
    # Axes are in SOFA order unless the dimension names say otherwise.
    if sorted(dims) == sorted(want):
        order = [dims.index(w) for w in want]
    else:
        order = list(range(len(want)))
    sizes = {w: shape[a] for w, a in zip(want, order)}
    M, R, N, E = sizes["M"], sizes["R"], sizes["N"], sizes.get("E", 1)
    if M == 0 or N == 0:
        raise SofaError(f"{label}: Data.IR is empty ({M} measurements of {N} taps)")
    if R != 2:
        raise SofaError(f"{label}: Data.IR has {R} receivers; a binaural HRIR set needs 2")
    if N > MAX_TAPS:
        raise SofaError(
            f"{label}: Data.IR has {N} taps per response; more than {MAX_TAPS} (2**20) "
            "is not an impulse response this renderer can use"
        )
    if M * R * N > MAX_VALUES:
        raise SofaError(
            f"{label}: Data.IR declares {M} x {R} x {N} = {M * R * N} values; refusing to "
            f"read more than {MAX_VALUES} (2**28)"
        )
    if data_type == "FIR-E":
        if E == 0:
            raise SofaError(f"{label}: Data.IR has no emitters (E = 0)")
        if emitter is None:
            if E > 1:
                raise SofaError(
                    f"{label}: the file holds {E} emitters (GeneralFIR-E); choose one with "
                    f"emitter=0 ... emitter={E - 1}"
                )
            picked = 0
        elif not 0 <= emitter < E:
            raise SofaError(
                f"{label}: emitter {emitter!r} is out of range; the file holds {E} "
                f"emitter(s), numbered 0 to {E - 1}"
            )
        else:
            picked = emitter
    else:
        if emitter not in (None, 0):
            raise SofaError(
                f"{label}: emitter {emitter!r} requested, but a {convention} file has one "
                "emitter (use 0 or none)"
            )
        picked = 0

    # -- sample rate (checked before the large read) --------------------------------------
    rates = _numeric(variables["Data.SamplingRate"], label, "Data.SamplingRate").reshape(-1)
    if rates.size == 0:
        raise SofaError(f"{label}: Data.SamplingRate is empty")
    if np.any(rates != rates[0]):
        raise SofaError(
            f"{label}: Data.SamplingRate varies between measurements ({rates.min():g} to "
            f"{rates.max():g} Hz); one rate is needed"
        )
    samplerate = float(rates[0])
    if samplerate <= 0:
        raise SofaError(
            f"{label}: Data.SamplingRate is {samplerate!r} Hz; it must be a positive number "
            "of hertz"
        )
    if not MIN_SAMPLERATE <= samplerate <= MAX_SAMPLERATE:
        raise SofaError(
            f"{label}: Data.SamplingRate {samplerate!r} Hz is outside the supported range "
            f"{MIN_SAMPLERATE:g} to {MAX_SAMPLERATE:g} Hz"
        )

    kind = np.dtype(ir_var.dtype).kind if isinstance(ir_var.dtype, np.dtype) else "?"
    if kind not in "fiu":
        raise SofaError(f"{label}: Data.IR is stored as {ir_var.dtype!r}; numbers are needed")
    # Masking is off: masked arrays must not leave this module, and fill values (data
    # never written) are caught by the magnitude check below instead.
    ir_var.set_auto_mask(False)
    # Read only the picked emitter's slice, then put the axes in (M, R, N) order.
    e_axis = order[3] if data_type == "FIR-E" else None
    index = tuple(picked if a == e_axis else slice(None) for a in range(len(shape)))
    kept = [a for a in range(len(shape)) if a != e_axis]
    raw = np.asarray(ir_var[index], dtype=np.float64)
    ir = np.array(np.transpose(raw, [kept.index(order[i]) for i in range(3)]), dtype=np.float64)
    _check_values(ir, label, "Data.IR")
    if convention == "SimpleFreeFieldHRIR" and not np.any(ir):
        # An HRIR set of zeros renders silence. The General conventions are containers for
        # any FIR data and may hold placeholders, so they are read (SofaData.silent says so).
        raise SofaError(f"{label}: every impulse response in Data.IR is zero")

    sizes3 = {"M": M, "R": R, "E": E, "C": 3}

    # -- delay -----------------------------------------------------------------------------
    if "Data.Delay" in variables:
        var = variables["Data.Delay"]
        d = _arrange(
            _numeric(var, label, "Data.Delay"),
            var.dimensions,
            ("M", "R", "E"),
            sizes3,
            label,
            "Data.Delay",
        )
        d = d[:, :, picked if d.shape[2] > 1 else 0]
        if np.any(d < 0):
            raise SofaError(
                f"{label}: Data.Delay has negative values (down to {d.min():g} samples); "
                "delays must be >= 0"
            )
        delay = np.array(np.broadcast_to(d, (M, 2)), dtype=np.float64)
    else:
        delay = np.zeros((M, 2))

    # -- geometry --------------------------------------------------------------------------
    src, known = _positions(variables, "SourcePosition", label, sizes3, "spherical")
    src = np.broadcast_to(src, (M, 3)).copy()
    known = np.broadcast_to(known, (M,)).copy()
    if data_type == "FIR-E":
        src = src + np.where(known[:, None], _emitter_offset(variables, label, sizes3, picked), 0.0)

    if "ListenerPosition" in variables:
        listener, at = _positions(variables, "ListenerPosition", label, sizes3, "cartesian")
        listener = np.where(at[:, None], listener, 0.0)  # spherical radius 0: the origin
    else:
        listener = np.zeros((1, 3))
    frame = _frame(variables, "Listener", label, sizes3)
    rel = np.where(known[:, None], src - listener, src)  # unknown radius: src is a unit vector
    local = np.einsum("mij,mj->mi", np.broadcast_to(frame, (M, 3, 3)), rel)
    norms = np.linalg.norm(local, axis=-1)
    if np.any(norms == 0):
        i = int(np.flatnonzero(norms == 0)[0])
        raise SofaError(
            f"{label}: SourcePosition of measurement {i} coincides with ListenerPosition; "
            "no direction can be derived"
        )
    directions = local / norms[:, None]
    distances = np.where(known, norms, np.nan)

    # -- which receiver is the left ear ----------------------------------------------------
    swap = _receiver_swap(variables, attrs, label, sizes3)
    if np.any(swap):
        ir[swap] = ir[swap][:, ::-1, :]
        delay[swap] = delay[swap][:, ::-1]

    for arr in (ir, delay, directions, distances):
        arr.setflags(write=False)
    return SofaData(
        path=path,
        convention=convention,
        convention_version=attrs.get("SOFAConventionsVersion", ""),
        sofa_version=attrs.get("Version", ""),
        data_type=data_type,
        room_type=attrs.get("RoomType", "").strip().lower(),
        samplerate=samplerate,
        ir=ir,
        delay=delay,
        directions=directions,
        distances=distances,
        emitter=picked if data_type == "FIR-E" else None,
        attributes=types.MappingProxyType(dict(attrs)),
    )


def _check_values(arr: np.ndarray, label: str, name: str) -> None:
    bad = ~np.isfinite(arr) | (np.abs(arr) > _FILL_LIMIT)
    if np.any(bad):
        where = tuple(int(i) for i in np.argwhere(bad)[0])
        raise SofaError(
            f"{label}: {name} has {int(bad.sum())} value(s) that are NaN, infinite or netCDF "
            f"fill values (never written), the first at index {where!r}"
        )


def _numeric(var: netCDF4.Variable, label: str, name: str) -> np.ndarray:
    """A (small) numeric variable as a plain float64 array, checked for NaN and fill values."""
    kind = np.dtype(var.dtype).kind if isinstance(var.dtype, np.dtype) else "?"
    if kind not in "fiu":
        raise SofaError(f"{label}: {name} is stored as {var.dtype!r}; numbers are needed")
    if int(np.prod(var.shape, dtype=np.int64)) > MAX_VALUES:
        raise SofaError(f"{label}: {name} declares {var.shape!r} values; refusing to read it")
    var.set_auto_mask(False)
    arr = np.array(var[...], dtype=np.float64)
    _check_values(arr, label, name)
    return arr


def _arrange(
    arr: np.ndarray,
    dims: tuple[str, ...],
    order: tuple[str, ...],
    sizes: Mapping[str, int],
    label: str,
    name: str,
) -> np.ndarray:
    """Put ``arr`` into the axis order ``order``, each axis of full size or 1 (to broadcast).

    The dimension names of the file say which axis is which (``I`` counts as a measurement
    axis of size 1); where they are not SOFA's letters, the axes are matched by size in
    SOFA's order. Axes the variable lacks are added with size 1.
    """
    names = ["M" if str(d) == "I" else str(d) for d in dims]

    def fits(axis_names: tuple[str, ...] | list[str]) -> bool:
        return all(s == sizes[n] or s == 1 for n, s in zip(axis_names, arr.shape))

    if len(set(names)) == len(names) and set(names) <= set(order):
        if not fits(names):
            bad = [(n, s) for n, s in zip(names, arr.shape) if s not in (1, sizes[n])]
            n, s = bad[0]
            what = {"M": "measurements", "R": "receivers", "E": "emitters", "C": "coordinates"}[n]
            raise SofaError(
                f"{label}: {name} has {s} {what} (dimension {n}) but Data.IR has {sizes[n]}"
            )
        axis_names = names
    else:
        axis_names = None
        for combo in itertools.combinations(order, arr.ndim):
            if fits(combo):
                axis_names = list(combo)
                break
        if axis_names is None:
            full = ", ".join(f"{o}={sizes[o]}" for o in order)
            raise SofaError(
                f"{label}: {name} has shape {arr.shape!r}, which does not fit Data.IR; "
                f"expected dimensions ({full}), each of that size or 1"
            )
    for o in order:
        if o not in axis_names:
            arr = arr[..., np.newaxis]
            axis_names = axis_names + [o]
    return np.transpose(arr, [axis_names.index(o) for o in order])


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


def _to_cartesian(
    values: np.ndarray, var_attrs: Mapping[str, str], default_type: str, label: str, name: str
) -> tuple[np.ndarray, np.ndarray]:
    """Cartesian metres for coordinates ``(..., 3)``, and where the radius is known.

    A spherical position of radius <= 0 carries only a direction: it is returned as a unit
    vector with ``known`` False.
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
    r = values[..., 2]
    known = r > 0
    radius = np.where(known, r, 1.0)
    xyz = np.stack(
        [radius * np.cos(el) * np.cos(az), radius * np.cos(el) * np.sin(az), radius * np.sin(el)],
        axis=-1,
    )
    return xyz, known


def _positions(
    variables: Mapping[str, netCDF4.Variable],
    name: str,
    label: str,
    sizes: Mapping[str, int],
    default_type: str,
) -> tuple[np.ndarray, np.ndarray]:
    """A position variable of dimensions (I, C) or (M, C): shape (1 or M, 3) and ``known``."""
    var = variables[name]
    arr = _arrange(_numeric(var, label, name), var.dimensions, ("M", "C"), sizes, label, name)
    if arr.shape[1] != 3:
        raise SofaError(f"{label}: {name} has {arr.shape[1]} coordinates; 3 are needed")
    return _to_cartesian(arr, _var_attributes(var, label, name), default_type, label, name)


def _vector(
    variables: Mapping[str, netCDF4.Variable],
    name: str,
    default: tuple[float, float, float],
    label: str,
    sizes: Mapping[str, int],
) -> np.ndarray:
    """An orientation vector (View / Up), shape (1 or M, 3); only its direction matters."""
    if name not in variables:
        return np.array([default], dtype=np.float64)
    xyz, _known = _positions(variables, name, label, sizes, "cartesian")
    # For an orientation a spherical radius of 0 still means "this direction".
    return xyz


def _frame(
    variables: Mapping[str, netCDF4.Variable], who: str, label: str, sizes: Mapping[str, int]
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


def _emitter_offset(
    variables: Mapping[str, netCDF4.Variable], label: str, sizes: Mapping[str, int], picked: int
) -> np.ndarray:
    """The picked emitter's position relative to SourcePosition, in global coordinates."""
    if "EmitterPosition" not in variables:
        return np.zeros((1, 3))
    var = variables["EmitterPosition"]
    var_attrs = _var_attributes(var, label, "EmitterPosition")
    if "harmonic" in var_attrs.get("type", "").lower():
        return np.zeros((1, 3))  # an emitter in spherical harmonics has no position
    arr = _arrange(
        _numeric(var, label, "EmitterPosition"),
        var.dimensions,
        ("E", "C", "M"),
        sizes,
        label,
        "EmitterPosition",
    )
    arr = np.moveaxis(arr[picked if arr.shape[0] > 1 else 0], 0, -1)  # (1 or M, 3)
    if arr.shape[-1] != 3:
        raise SofaError(f"{label}: EmitterPosition has {arr.shape[-1]} coordinates; 3 are needed")
    offset, known = _to_cartesian(arr, var_attrs, "cartesian", label, "EmitterPosition")
    offset = np.where(known[:, None], offset, 0.0)
    if not np.any(offset):
        return np.zeros((1, 3))
    frame = _frame(variables, "Source", label, sizes)
    # frame maps global -> source frame; its transpose maps the offset back to global.
    k = max(frame.shape[0], offset.shape[0])
    return np.einsum(
        "mji,mj->mi", np.broadcast_to(frame, (k, 3, 3)), np.broadcast_to(offset, (k, 3))
    )


def _receiver_swap(
    variables: Mapping[str, netCDF4.Variable],
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
    arr = _arrange(
        _numeric(var, label, "ReceiverPosition"),
        var.dimensions,
        ("R", "C", "M"),
        sizes,
        label,
        "ReceiverPosition",
    )
    if arr.shape[0] == 1:
        return no_swap  # one position for both receivers: nothing tells them apart
    xyz, _known = _to_cartesian(
        np.moveaxis(arr, 1, -1),
        _var_attributes(var, label, "ReceiverPosition"),
        "cartesian",
        label,
        "ReceiverPosition",
    )  # (R, 1 or M, 3)
    dy = xyz[0, :, 1] - xyz[1, :, 1]
    return np.broadcast_to(dy < -_RECEIVER_TOLERANCE, (M,)).copy()


# ---------------------------------------------------------------------------------------
# writing

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


def write_sofa(
    path: str | os.PathLike,
    *,
    ir: np.ndarray,
    samplerate: float,
    azimuth: np.ndarray,
    elevation: np.ndarray,
    distance: float | np.ndarray = 1.0,
    delay: np.ndarray | None = None,
    attributes: Mapping[str, str] | None = None,
    receiver_offset: float = 0.0875,
) -> None:
    """Write a SimpleFreeFieldHRIR 1.0 file (AES69-2020, SOFA 2.0, netCDF-4/HDF5).

    Parameters
    ----------
    path : str or os.PathLike
        Destination; written to a temporary file in the same folder, then renamed.
    ir : ndarray, shape (M, 2, N)
        Impulse responses, left ear first.
    samplerate : float
        Hz, within 8 kHz to 384 kHz.
    azimuth, elevation : ndarray, shape (M,)
        Source directions in degrees (azimuth counter-clockwise from the front, positive
        to the left; elevation up), written as spherical ``SourcePosition``.
    distance : float or ndarray, shape (M,)
        Source distance in metres (> 0).
    delay : ndarray, shape (2,), (1, 2) or (M, 2), optional
        ``Data.Delay`` in samples (>= 0); zeros if omitted.
    attributes : Mapping[str, str], optional
        Global attributes to add or to set (Title, DatabaseName, ListenerShortName,
        License, AuthorContact, Organization, Comment, DateCreated, ...). Those fixed by
        the convention (Conventions, Version, SOFAConventions, SOFAConventionsVersion,
        DataType, RoomType, APIName, APIVersion) cannot be set.
    receiver_offset : float
        Metres from the head centre to each ear along y (left +, right -).

    Raises
    ------
    SofaError
        An argument is out of range or of the wrong shape.
    """
    from .. import __version__

    p = os.fsdecode(os.fspath(path))
    label = repr(os.path.basename(p) or p)
    data = np.asarray(ir, dtype=np.float64)
    if data.ndim != 3 or data.shape[1] != 2 or data.shape[0] == 0 or data.shape[2] == 0:
        raise SofaError(f"{label}: ir must have shape (M, 2, N) with M, N > 0, got {data.shape!r}")
    M = data.shape[0]
    if not np.all(np.isfinite(data)):
        raise SofaError(f"{label}: ir contains NaN or infinite values")
    try:
        rate = float(samplerate)
    except (TypeError, ValueError):
        raise SofaError(f"{label}: samplerate must be a number, got {samplerate!r}") from None
    if not MIN_SAMPLERATE <= rate <= MAX_SAMPLERATE:
        raise SofaError(
            f"{label}: samplerate {samplerate!r} Hz is outside {MIN_SAMPLERATE:g} to "
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
        raise SofaError(f"{label}: distance must be finite and > 0 metres, got {distance!r}")
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
        raise SofaError(f"{label}: receiver_offset must be > 0 metres, got {receiver_offset!r}")

    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S")
    # Mandatory global attributes of SimpleFreeFieldHRIR 1.0 (AES69-2020), in its order.
    globals_: dict[str, str] = {
        "Conventions": "SOFA",
        "Version": "2.0",
        "SOFAConventions": "SimpleFreeFieldHRIR",
        "SOFAConventionsVersion": "1.0",
        "APIName": "earfold",
        "APIVersion": __version__,
        "ApplicationName": "earfold",
        "ApplicationVersion": __version__,
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
            raise SofaError(f"{label}: attribute name {key!r} is not a valid netCDF name")
        if key in _FIXED_ATTRIBUTES:
            raise SofaError(
                f"{label}: attribute {key!r} is fixed by the convention; fixed attributes: "
                f"{', '.join(_FIXED_ATTRIBUTES)}"
            )
        if not isinstance(value, str):
            raise SofaError(f"{label}: attribute {key!r} must be a string, got {value!r}")
        globals_[key] = value

    folder = os.path.dirname(os.path.abspath(p))
    tmp = os.path.join(folder, f".{os.path.basename(p)}.{uuid.uuid4().hex}.tmp")
    try:
        ds = netCDF4.Dataset(tmp, "w", clobber=False, format="NETCDF4")
        try:
            for key, value in globals_.items():
                ds.setncattr(key, value)
            dim_sizes = {"I": 1, "C": 3, "R": 2, "E": 1, "N": data.shape[2], "M": M}
            for name, size in dim_sizes.items():
                ds.createDimension(name, size)

            def put(name, dims, values, **var_attrs):
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
                np.stack([az, el, dist], axis=-1),
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
            put("Data.SamplingRate", ("I",), [rate], Units="hertz")
            put("Data.Delay", ("I", "R") if dly.shape[0] == 1 else ("M", "R"), dly)
        finally:
            ds.close()
        os.replace(tmp, p)
    except BaseException:
        try:
            os.remove(tmp)
        except OSError:
            pass
        raise
