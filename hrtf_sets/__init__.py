"""HRTF sets shipped with earfold, each with its citation.

The catalogue is plain data: importing it needs neither netCDF4 nor any audio library.
Each set is a SOFA (AES69) file next to this module, with a Markdown note of the same
stem (``MIT_KEMAR_normal_pinna.md`` beside ``MIT_KEMAR_normal_pinna.sofa``) that gives
its origin, citation and licence in full.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from earfold.renderer.errors import HrirError

__all__ = ["DEFAULT_SET", "SHIPPED", "ShippedSet", "get_shipped", "list_shipped"]

_HERE = Path(__file__).resolve().parent


@dataclass(frozen=True)
class ShippedSet:
    """One HRTF set shipped with earfold.

    Attributes
    ----------
    name : str
        Short name used on the command line and in the HTTP API (``--hrtf NAME``).
    filename : str
        SOFA file name inside this package.
    title : str
        One-line human-readable title.
    citation : str
        The reference to cite when the set is used.
    licence : str
        Terms of use.
    description : str
        What the set is: subject, grid, length, rate.
    """

    name: str
    filename: str
    title: str
    citation: str
    licence: str
    description: str

    @property
    def path(self) -> Path:
        """Absolute path of the SOFA file."""
        return _HERE / self.filename

    @property
    def notes_path(self) -> Path:
        """Absolute path of the Markdown note (origin, citation, licence) for the set."""
        return _HERE / (Path(self.filename).stem + ".md")


SHIPPED: tuple[ShippedSet, ...] = (
    ShippedSet(
        name="mit-kemar",
        filename="MIT_KEMAR_normal_pinna.sofa",
        title="MIT KEMAR dummy head, normal pinna",
        citation=(
            "Gardner, W. G. and Martin, K. D. (1995), HRTF measurements of a KEMAR, "
            "J. Acoust. Soc. Am. 97(6), 3907-3908; MIT Media Lab Perceptual Computing "
            "Technical Report #280 (1994)"
        ),
        licence="free for any use when the authors are cited (MIT Media Lab release terms)",
        description=(
            "KEMAR dummy head with normal pinnae measured in an anechoic chamber at 1.4 m: "
            "710 directions from -40 to +90 degrees elevation, 512 taps at 44.1 kHz"
        ),
    ),
    ShippedSet(
        name="rigid-sphere",
        filename="rigid_sphere.sofa",
        title="Rigid sphere (analytic, far field), radius 8.75 cm",
        citation=(
            "Duda, R. O. and Martens, W. L. (1998), Range dependence of the response of a "
            "spherical head model, J. Acoust. Soc. Am. 104(5), 3048-3058"
        ),
        licence="CC0-1.0 (computed by earfold; no rights reserved)",
        description=(
            "plane-wave response of a rigid sphere with point ears at +/-90 degrees "
            "azimuth: full-sphere grid at about 10 degrees spacing, 256 taps at 48 kHz; "
            "no pinna, so no elevation cues (hrtf_sets/rigid_sphere.md says how it is made)"
        ),
    ),
)

#: Name of the set used when a render names none.
DEFAULT_SET = "mit-kemar"


def list_shipped() -> tuple[ShippedSet, ...]:
    """All shipped sets, the default first."""
    return tuple(sorted(SHIPPED, key=lambda s: s.name != DEFAULT_SET))


def get_shipped(name: str) -> ShippedSet:
    """The shipped set called ``name`` (case-insensitive).

    Raises
    ------
    HrirError
        If no shipped set has that name; the message lists the shipped names.
    """
    wanted = str(name).strip().lower()
    for entry in SHIPPED:
        if entry.name == wanted:
            return entry
    names = ", ".join(repr(s.name) for s in list_shipped())
    raise HrirError(f"unknown HRTF set {name!r}; shipped sets: {names}")
