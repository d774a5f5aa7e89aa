"""What :func:`~earfold.renderer.hrtf.read_sofa` returns, the limits it applies, and the
shape of the netCDF objects the SOFA modules work on.

The SOFA modules other than :mod:`.sofa` never import netCDF4 (it stays behind that one
door); they see datasets and variables through the small protocols below, which are the
part of netCDF4's interface they use.
"""

from __future__ import annotations

import types
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import numpy.typing as npt

__all__ = [
    "MAX_AUX_VALUES",
    "MAX_DELAY_SECONDS",
    "MAX_FILE_BYTES",
    "MAX_MEASUREMENTS",
    "MAX_SAMPLERATE",
    "MAX_TAPS",
    "MAX_VALUES",
    "SILENT_FLOOR",
    "MIN_SAMPLERATE",
    "NC_ERRORS",
    "SUPPORTED_CONVENTIONS",
    "NcDataset",
    "NcVariable",
    "SofaData",
    "cause",
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

#: Most values of ``Data.IR`` read from one file, and most values of the responses once
#: delayed or resampled (2**25 float64 values = 256 MiB; e.g. 2000 directions of 8192 taps,
#: or 360 binaural room responses of 0.9 s at 48 kHz). The declared sizes are checked before
#: anything is read, so a forged header cannot exhaust memory. Later processing holds a few
#: arrays of this size at once (the read and its float64 copy, the delayed set, the
#: resampled set, the aligned copy for interpolation); the fractional delay works in blocks
#: (:func:`~earfold.renderer.hrtf.fractional_delay`), so its FFT buffers stay small.
MAX_VALUES = 2**25

#: Most measurements (directions) in one file: far beyond any measured or computed grid
#: (the densest in use have some 10 000).
MAX_MEASUREMENTS = 2**18

#: Most values of any variable other than ``Data.IR`` (positions, delays, orientations;
#: 2**22 float64 values = 32 MiB).
MAX_AUX_VALUES = 2**22

#: Largest file accepted as a SOFA file (1 GiB); ``Data.IR`` of :data:`MAX_VALUES` values
#: takes at most 256 MiB even as float64 uncompressed.
MAX_FILE_BYTES = 2**30

#: Longest ``Data.Delay`` accepted, in seconds (of the file's sample rate). HRIR delays are
#: milliseconds, a room response's distance delay a fraction of a second; a longer delay is
#: a damaged or forged value.
MAX_DELAY_SECONDS = 2.0

#: Peak magnitude below which an impulse response is practically silent (-200 dB re full
#: scale: far below the noise floor of any measurement or of 32-bit float audio).
SILENT_FLOOR = 1e-10

#: Everything the netCDF4/HDF5 layer was seen to raise on damaged or fuzzed files.
NC_ERRORS = (
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


class NcVariable(Protocol):
    """The part of a ``netCDF4.Variable`` the SOFA modules use."""

    @property
    def dtype(self) -> Any: ...  # a numpy dtype, or str for variable-length strings

    @property
    def shape(self) -> tuple[int, ...]: ...

    @property
    def dimensions(self) -> tuple[str, ...]: ...

    def ncattrs(self) -> list[str]: ...

    def getncattr(self, name: str) -> Any: ...

    def setncattr(self, name: str, value: Any) -> None: ...

    def set_auto_mask(self, value: bool) -> None: ...

    def __getitem__(self, index: Any) -> Any: ...

    def __setitem__(self, index: Any, value: Any) -> None: ...


class NcDataset(Protocol):
    """The part of a ``netCDF4.Dataset`` the SOFA modules use."""

    @property
    def variables(self) -> Mapping[str, NcVariable]: ...

    def ncattrs(self) -> list[str]: ...

    def getncattr(self, name: str) -> Any: ...

    def setncattr(self, name: str, value: Any) -> None: ...

    def createDimension(self, name: str, size: int | None = None) -> Any: ...  # noqa: N802

    def createVariable(  # noqa: N802
        self, name: str, datatype: str, dimensions: tuple[str, ...], **kwargs: Any
    ) -> NcVariable: ...

    def close(self) -> None: ...


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
    warnings : tuple of str
        What the reader changed or found odd in a file it could still read (delays
        shifted, elevations folded, few distinct directions, practically silent responses).
    """

    path: str
    convention: str
    convention_version: str
    sofa_version: str
    data_type: str
    room_type: str
    samplerate: float
    ir: npt.NDArray[np.float64] = field(repr=False)
    delay: npt.NDArray[np.float64] = field(repr=False)
    directions: npt.NDArray[np.float64] = field(repr=False)
    distances: npt.NDArray[np.float64] = field(repr=False)
    emitter: int | None = None
    attributes: Mapping[str, str] = field(default_factory=dict, repr=False)
    warnings: tuple[str, ...] = ()

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


def cause(exc: BaseException) -> str:
    """What went wrong, for a message: the type and text of ``exc``."""
    # An OSError's text repeats the path; its strerror alone says what went wrong.
    text = (exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)).strip()
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__
