"""Reading a SOFA file: the checks before the HDF5 library sees it, the global
attributes, and the validation and normalisation of an opened dataset into
:class:`~earfold.renderer.hrtf.SofaData`.

The dataset is opened (and closed) by :func:`earfold.renderer.hrtf.sofa.read_sofa`, the
one module that imports netCDF4.
"""

from __future__ import annotations

import os
import types

import numpy as np

from ..errors import SofaError
from ._sofa_data import (
    MAX_DELAY_SECONDS,
    MAX_FILE_BYTES,
    MAX_MEASUREMENTS,
    MAX_SAMPLERATE,
    MAX_TAPS,
    MAX_VALUES,
    MIN_SAMPLERATE,
    NC_ERRORS,
    SILENT_FLOOR,
    SUPPORTED_CONVENTIONS,
    NcDataset,
    SofaData,
    cause,
)
from ._sofa_frame import emitter_offset, positions, receiver_swap, rotation_into
from ._sofa_vars import arrange, check_values, dtype_name, numeric, text_value

__all__ = ["check_file", "first_bytes", "global_attributes", "read_dataset"]


#: Signatures of files people give by mistake where a SOFA file belongs.
_KNOWN_KINDS = (
    ((b"RIFF", b"RIFX", b"RF64", b"BW64"), "a WAV file"),
    ((b"fLaC",), "a FLAC file"),
    ((b"FORM",), "an AIFF file"),
    ((b"caff",), "a CAF file"),
    ((b"OggS",), "an Ogg file"),
    ((b"ID3",), "an MP3 file"),
    ((b"PK\x03\x04",), "a ZIP archive"),
    ((b"%PDF",), "a PDF document"),
)


def first_bytes(head: bytes) -> str:
    """The first bytes of a file in words: as text when they are printable ASCII, else
    in hexadecimal (a message never shows a bytes repr), and what they begin where we
    know it."""
    if not head:
        return "nothing"
    if all(32 <= b < 127 for b in head):
        words = f"the text {head.decode('ascii')!r}"
    else:
        words = "the bytes " + " ".join(f"{b:02x}" for b in head)
    kind = next((k for sigs, k in _KNOWN_KINDS if head.startswith(sigs)), None)
    return f"{words}, which begin {kind}" if kind else words


def check_file(p: str, label: str) -> None:
    """Refuse what cannot be a SOFA file before handing it to the HDF5 library."""
    try:
        st = os.stat(p)
    except OSError as exc:
        raise SofaError(f"{label}: cannot open the file ({exc.strerror or exc})") from None
    if not os.path.isfile(p):
        raise SofaError(f"{label}: is not a regular file")
    if st.st_size == 0:
        raise SofaError(f"{label}: the file is empty (0 bytes), not a SOFA file")
    if st.st_size > MAX_FILE_BYTES:
        raise SofaError(
            f"{label}: the file is {st.st_size} bytes; a SOFA file may be at most "
            f"{MAX_FILE_BYTES} bytes (1 GiB) here"
        )
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
    raise SofaError(
        f"{label}: not a SOFA file: SOFA files are netCDF-4/HDF5, and this file has no "
        f"HDF5 or netCDF signature (it starts with {first_bytes(head)})"
    )


def global_attributes(ds: NcDataset, label: str) -> dict[str, str]:
    try:
        names = list(ds.ncattrs())
    except NC_ERRORS as exc:
        raise SofaError(
            f"{label}: the global attributes cannot be read ({cause(exc)}); the file is "
            "damaged or is not a SOFA file"
        ) from exc
    out: dict[str, str] = {}
    for name in names:
        try:
            out[str(name)] = text_value(ds.getncattr(name))
        except NC_ERRORS as exc:
            raise SofaError(
                f"{label}: global attribute {name!r} cannot be read ({cause(exc)})"
            ) from exc
    return out


def read_dataset(ds: NcDataset, path: str, label: str, emitter: int | None) -> SofaData:
    attrs = global_attributes(ds, label)

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
    except NC_ERRORS as exc:
        raise SofaError(f"{label}: the variables cannot be listed ({cause(exc)})") from exc
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
    if M > MAX_MEASUREMENTS:
        raise SofaError(
            f"{label}: Data.IR declares {M} measurements; more than {MAX_MEASUREMENTS} "
            "(2**18) is not a set this renderer can use; the header is probably damaged"
        )
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
            f"read more than {MAX_VALUES} (2**25)"
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
    rates = numeric(variables["Data.SamplingRate"], label, "Data.SamplingRate").reshape(-1)
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
        raise SofaError(
            f"{label}: Data.IR is stored as {dtype_name(ir_var.dtype)}; numbers are needed"
        )
    # Masking is off: masked arrays must not leave the reader, and fill values (data
    # never written) are caught by the magnitude check below instead.
    ir_var.set_auto_mask(False)
    # Read only the picked emitter's slice, then put the axes in (M, R, N) order.
    e_axis = order[3] if data_type == "FIR-E" else None
    index = tuple(picked if a == e_axis else slice(None) for a in range(len(shape)))
    kept = [a for a in range(len(shape)) if a != e_axis]
    raw = np.asarray(ir_var[index], dtype=np.float64)
    # A copy only where the axes need reordering: the largest array is not held twice.
    ir = np.ascontiguousarray(np.transpose(raw, [kept.index(order[i]) for i in range(3)]))
    del raw
    check_values(ir, label, "Data.IR")
    if convention == "SimpleFreeFieldHRIR" and not np.any(ir):
        # An HRIR set of zeros renders silence. The General conventions are containers for
        # any FIR data and may hold placeholders, so they are read (SofaData.silent says so).
        raise SofaError(f"{label}: every impulse response in Data.IR is zero")

    sizes3 = {"M": M, "R": R, "E": E, "C": 3}
    notes: list[str] = []  # what was changed or looks odd, for SofaData.warnings
    peak = float(max(ir.max(), -ir.min()))  # no temporary the size of Data.IR
    if peak < SILENT_FLOOR and (convention == "SimpleFreeFieldHRIR" or peak > 0):
        raise SofaError(
            f"{label}: every impulse response in Data.IR is practically silent (the loudest "
            f"sample is {peak:.3g}, below {SILENT_FLOOR:g}, i.e. -200 dB); there is nothing "
            "to render with"
        )
    ear_peaks = np.maximum(ir.max(axis=-1), -ir.min(axis=-1))  # (M, 2)
    faint = int(np.sum(np.any((ear_peaks > 0) & (ear_peaks < peak * 1e-6), axis=-1)))
    if faint:
        notes.append(
            f"{faint} of {M} measurements have an ear whose response is practically silent "
            "(more than 120 dB below the loudest response in the set); the file may be "
            "damaged or wrongly scaled"
        )

    # -- delay -----------------------------------------------------------------------------
    if "Data.Delay" in variables:
        var = variables["Data.Delay"]
        d = arrange(
            numeric(var, label, "Data.Delay"),
            var.dimensions,
            ("M", "R", "E"),
            sizes3,
            label,
            "Data.Delay",
        )
        d = d[:, :, picked if d.shape[2] > 1 else 0]
        longest = MAX_DELAY_SECONDS * samplerate
        if np.abs(d).max() > longest:
            raise SofaError(
                f"{label}: Data.Delay reaches {float(np.abs(d).max()):g} samples "
                f"({float(np.abs(d).max()) / samplerate:g} s); delays longer than "
                f"{MAX_DELAY_SECONDS:g} s ({longest:g} samples at {samplerate:g} Hz) are refused "
                "as damaged values"
            )
        if np.any(d < 0):
            # AES69 allows relative delays; what matters for rendering is their differences
            # (between ears and between directions). All are moved by the same amount so the
            # smallest is 0: every response is then delayed by a whole or fractional number
            # of samples, never advanced (which would cut off its start).
            lowest = float(d.min())
            d = d - lowest
            notes.append(
                f"Data.Delay holds negative (relative) delays down to {lowest:g} samples; all "
                f"delays were moved by {-lowest:g} samples so that the smallest is 0 (the "
                "differences between ears and directions are kept)"
            )
        delay = np.array(np.broadcast_to(d, (M, 2)), dtype=np.float64)
        # The delays lengthen every response (HrirSet.from_sofa): bound what that makes.
        delayed = M * 2 * (N + int(np.ceil(delay.max())) + 1)
        if delay.max() > 0 and delayed > MAX_VALUES:
            raise SofaError(
                f"{label}: Data.Delay of up to {float(delay.max()):g} samples would make "
                f"{M} x 2 x {N + int(np.ceil(delay.max())) + 1} = {delayed} values once "
                f"applied; refusing more than {MAX_VALUES} (2**25)"
            )
    else:
        delay = np.zeros((M, 2))

    # -- geometry --------------------------------------------------------------------------
    src, known = positions(variables, "SourcePosition", label, sizes3, "spherical", notes)
    src = np.broadcast_to(src, (M, 3)).copy()
    known = np.broadcast_to(known, (M,)).copy()
    if data_type == "FIR-E":
        src = src + np.where(known[:, None], emitter_offset(variables, label, sizes3, picked), 0.0)

    if "ListenerPosition" in variables:
        listener, at = positions(variables, "ListenerPosition", label, sizes3, "cartesian")
        listener = np.where(at[:, None], listener, 0.0)  # spherical radius 0: the origin
    else:
        listener = np.zeros((1, 3))
    frame = rotation_into(variables, "Listener", label, sizes3)
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
    distinct = len(np.unique(np.round(directions, 4), axis=0))
    if distinct < 4:
        where = "a single direction" if distinct == 1 else f"only {distinct} distinct directions"
        notes.append(
            f"the {M} measurement(s) cover {where}; sources elsewhere are rendered from the "
            "nearest of them, so this set cannot place sounds around the listener"
        )

    # -- which receiver is the left ear ----------------------------------------------------
    swap = receiver_swap(variables, attrs, label, sizes3)
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
        warnings=tuple(f"{label}: {n}" for n in notes),
    )
