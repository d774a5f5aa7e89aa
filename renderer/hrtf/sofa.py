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
netCDF-4/HDF5 format, atomically (:class:`earfold.renderer.files.AtomicPath`: a temporary
file in the same folder, then :func:`os.replace`).

This module is the only one that imports netCDF4: it opens and creates the files, and
hands the datasets to its private helpers (:mod:`._sofa_read`, :mod:`._sofa_frame`,
:mod:`._sofa_vars`, :mod:`._sofa_write`), which see them through small protocols.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from typing import cast

import numpy as np
import numpy.typing as npt

from ..errors import SofaError, shown
from ..files import AtomicPath
from ._sofa_data import (
    MAX_AUX_VALUES,
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
from ._sofa_read import check_file, read_dataset
from ._sofa_write import fill_dataset, prepare_contents

__all__ = [
    "MAX_AUX_VALUES",
    "MAX_DELAY_SECONDS",
    "MAX_FILE_BYTES",
    "MAX_MEASUREMENTS",
    "MAX_TAPS",
    "MAX_VALUES",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "SILENT_FLOOR",
    "SUPPORTED_CONVENTIONS",
    "SofaData",
    "read_sofa",
    "write_sofa",
]


def _label(path: str | os.PathLike[str]) -> tuple[str, str]:
    """The path as a string, and how messages name the file (its quoted base name)."""
    p = os.fsdecode(os.fspath(path))
    return p, repr(os.path.basename(p) or p)


def read_sofa(path: str | os.PathLike[str], *, emitter: int | None = None) -> SofaData:
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
        8-384 kHz, absurd sizes, delays longer than :data:`MAX_DELAY_SECONDS`, responses
        that are all practically silent). The message starts with the file name.

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

    Negative ``Data.Delay`` values (relative delays, valid AES69) are all moved by one
    amount so that the smallest is 0. That, elevations beyond +/-90 degrees (folded over
    the pole), very few distinct directions and nearly silent responses are reported in
    :attr:`SofaData.warnings`. A file the user names should be read with
    :func:`~earfold.renderer.hrtf.read_sofa_guarded` (a child process with limits): a
    damaged file can make the HDF5 library loop or allocate without bound.

    Examples
    --------
    A set of two directions written with :func:`write_sofa` and read back:

    >>> import tempfile
    >>> import numpy as np
    >>> folder = tempfile.TemporaryDirectory()
    >>> path = os.path.join(folder.name, "two.sofa")
    >>> ir = np.zeros((2, 2, 16))
    >>> ir[:, :, 0] = 1.0
    >>> write_sofa(path, ir=ir, samplerate=48000, azimuth=np.array([0.0, 90.0]),
    ...            elevation=np.zeros(2))
    >>> data = read_sofa(path)
    >>> data.convention, data.samplerate, data.ir.shape
    ('SimpleFreeFieldHRIR', 48000.0, (2, 2, 16))
    >>> np.round(data.directions, 6).tolist()  # front, then left
    [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]
    >>> folder.cleanup()
    """
    p, label = _label(path)
    if emitter is not None and (
        isinstance(emitter, bool) or not isinstance(emitter, (int, np.integer))
    ):
        raise SofaError(f"{label}: emitter must be an integer index or None, got {shown(emitter)}")
    check_file(p, label)
    try:
        # netCDF4's own types are richer than the helpers need: they see the protocol.
        import netCDF4  # here: a render whose set comes from the cache never loads it

        ds = cast(NcDataset, netCDF4.Dataset(p, "r"))
    except NC_ERRORS as exc:
        raise SofaError(
            f"{label}: not a readable netCDF-4/HDF5 file: damaged, truncated or of another "
            f"format ({cause(exc)})"
        ) from exc
    try:
        return read_dataset(ds, p, label, None if emitter is None else int(emitter))
    except SofaError:
        raise
    except MemoryError as exc:
        raise SofaError(
            f"{label}: reading the file ran out of memory ({cause(exc)}); the file is "
            "probably damaged, or too large for the memory available"
        ) from exc
    except NC_ERRORS as exc:
        raise SofaError(f"{label}: the file is damaged and cannot be read ({cause(exc)})") from exc
    finally:
        try:
            ds.close()
        except NC_ERRORS:
            pass


def write_sofa(
    path: str | os.PathLike[str],
    *,
    ir: npt.ArrayLike,
    samplerate: float,
    azimuth: npt.ArrayLike,
    elevation: npt.ArrayLike,
    distance: float | npt.ArrayLike = 1.0,
    delay: npt.ArrayLike | None = None,
    attributes: Mapping[str, str] | None = None,
    receiver_offset: float = 0.0875,
) -> None:
    """Write a SimpleFreeFieldHRIR 1.0 file (AES69-2020, SOFA 2.0, netCDF-4/HDF5).

    Parameters
    ----------
    path : str or os.PathLike
        Destination; written to a temporary file in the same folder, then renamed
        (fsynced first, so that the rename is durable).
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

    p, label = _label(path)
    contents = prepare_contents(
        label,
        ir=ir,
        samplerate=samplerate,
        azimuth=azimuth,
        elevation=elevation,
        distance=distance,
        delay=delay,
        attributes=attributes,
        receiver_offset=receiver_offset,
        api_version=__version__,
    )
    with AtomicPath(p) as spot:
        # The temporary file exists (created empty, so that no other writer can take its
        # name); netCDF truncates it.
        import netCDF4

        ds = cast(NcDataset, netCDF4.Dataset(spot.tmp, "w", clobber=True, format="NETCDF4"))
        try:
            fill_dataset(ds, contents)
        finally:
            ds.close()
