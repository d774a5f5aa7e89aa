"""Near-uniform point sets on the sphere: spherical t-designs.

A spherical t-design is a finite set of points on which the mean of every polynomial of
degree up to ``t`` equals its mean over the sphere (Delsarte, Goethals and Seidel, Geom.
Dedicata 6 (1977) 363). Equivalently, the mean over the points of every spherical harmonic
of degree ``1 <= n <= t`` is zero. A decoder for order ``N`` that samples the sphere at a
``(2N + 1)``-design keeps the harmonics up to order ``N`` orthogonal on its points, so a
plane wave keeps its pressure and energy whatever its direction (Zotter and Frank,
*Ambisonics*, Springer 2019).

The designs here are antipodal (``x`` and ``-x`` both in the set), which makes every
odd-degree mean zero by symmetry; the even degrees ``2 .. t - 1`` are driven to zero by
nonlinear least squares (:func:`scipy.optimize.least_squares`) from a golden-angle spiral
on the upper hemisphere. With ``K`` antipodal pairs there are ``2K`` unknowns (less 3 for a
rotation of the whole set) against ``(t - 1)(t + 2) / 2`` equations; one pair more than
the count strictly needs makes the solve converge reliably. The tables in
:mod:`._design_table` were written by ``python -m earfold.renderer.scenes._design_search``
(:func:`._design_search.construct_design`); the tests check that every stored set
integrates each harmonic up to degree ``t`` to ``1e-12`` and that the construction
builds a design.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..errors import SceneError
from ._design_table import HALF_DESIGNS
from ._harmonics import check_order, real_harmonics

__all__ = ["DESIGN_TOLERANCE", "design_error", "t_design", "virtual_layout"]

FloatArray = npt.NDArray[np.float64]

#: Largest mean of a degree 1..t harmonic (SN3D, so the constant harmonic's mean is 1)
#: that still counts as zero for a stored or constructed design.
DESIGN_TOLERANCE = 1e-12


def design_error(points: npt.ArrayLike, t: int) -> float:
    """Largest |mean over ``points``| of an SN3D harmonic of degree 1 to ``t`` (0: a design)."""
    y = real_harmonics(points, t, "sn3d")
    return float(np.abs(y[:, 1:].mean(axis=0)).max())


def t_design(t: int) -> FloatArray:
    """The stored antipodal ``t``-design (odd ``t`` from 3 to 15) as unit vectors (2K, 3)."""
    if t not in HALF_DESIGNS:
        raise SceneError(f"no stored {t}-design; stored: {', '.join(map(str, HALF_DESIGNS))}")
    half = np.array(HALF_DESIGNS[t], dtype=float)
    points: FloatArray = np.vstack([half, -half])
    return points


def virtual_layout(order: int) -> FloatArray:
    """Directions of the virtual loudspeakers for ``order``: a ``(2 order + 1)``-design.

    Returns unit vectors (x front, y left, z up), shape (L, 3): 10 for first order up to
    124 for seventh.

    Examples
    --------
    >>> [len(virtual_layout(n)) for n in (1, 3, 7)]
    [10, 32, 124]
    """
    return t_design(2 * check_order(order) + 1)
