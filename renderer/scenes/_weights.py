"""Weights the decoders share: max-rE order weights, the crossover frequency, quadrature.

* max-rE (Zotter and Frank, *Ambisonics*, Springer 2019): weighting degree ``n`` by
  ``a_n = P_n(r_E)``, where ``r_E`` is the largest root of the Legendre polynomial
  ``P_{N+1}``, concentrates a plane wave's energy most tightly around its direction.
  Zotter and Frank give the approximation ``r_E ~ cos(137.9 deg / (N + 1.51))``; the
  exact root is used here.
* The frequency up to which order ``N`` describes the field around a head exactly
  enough: ``k a = N``, i.e. ``f_N = N c / (2 pi a)`` for a head of radius ``a`` (the
  common rule ``N >= k r`` for the order a field of radius ``r`` needs): about 624 Hz
  per order for the Woodworth radius 8.75 cm. The virtual-loudspeaker decoder switches
  from basic to max-rE weights there, and MagLS from least squares to magnitude least
  squares.
* Quadrature on a measurement grid: the solid angle of each direction's spherical Voronoi
  cell (:class:`scipy.spatial.SphericalVoronoi`), capped at :data:`MAX_CELL_RATIO` times
  the median cell, so that a direction next to an unmeasured cap (no measurements below
  -40 degrees) does not stand in for the whole cap.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy.spatial import QhullError, SphericalVoronoi
from scipy.special import eval_legendre, roots_legendre

from ..defaults import SPEED_OF_SOUND

__all__ = [
    "HEAD_RADIUS",
    "MAX_CELL_RATIO",
    "crossover_frequency",
    "grid_weights",
    "max_re_weights",
]

FloatArray = npt.NDArray[np.float64]

#: Head radius (m) of the order-to-frequency rule: Woodworth's 8.75 cm (common practice).
HEAD_RADIUS = 0.0875

#: Largest Voronoi cell as a multiple of the median (as the diffuse-field equaliser does).
MAX_CELL_RATIO = 3.0


def max_re_weights(order: int) -> FloatArray:
    """max-rE weights ``a_0 .. a_N`` (``a_0 = 1``) for ``order`` (3-D, Zotter and Frank 2019).

    Examples
    --------
    >>> np.round(max_re_weights(1), 4)  # r_E = 1/sqrt(3) for first order
    array([1.    , 0.5774])
    """
    r_e = float(np.max(roots_legendre(order + 1)[0]))
    weights: FloatArray = eval_legendre(np.arange(order + 1), r_e)
    return weights


def crossover_frequency(order: int, radius: float = HEAD_RADIUS) -> float:
    """``f_N = N c / (2 pi a)`` in Hz: where ``k a`` reaches the order ``N``."""
    return order * SPEED_OF_SOUND / (2.0 * math.pi * radius)


def grid_weights(directions: npt.ArrayLike) -> tuple[FloatArray, str]:
    """Quadrature weights (sum 1) of a measurement grid, and how they were made.

    Spherical Voronoi areas capped at :data:`MAX_CELL_RATIO` times the median; equal weights
    where the directions do not span the sphere (one ring, or fewer than four).
    """
    d = np.asarray(directions, dtype=float)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    if len(d) >= 4 and np.linalg.matrix_rank(d - d.mean(axis=0), tol=1e-6) == 3:
        try:
            areas = SphericalVoronoi(d, radius=1.0, threshold=1e-6).calculate_areas()
        except (ValueError, QhullError):
            areas = None
        if areas is not None and np.all(np.isfinite(areas)) and np.all(areas > 0):
            limit = MAX_CELL_RATIO * float(np.median(areas))
            capped = int(np.sum(areas > limit))
            areas = np.minimum(areas, limit)
            how = "spherical Voronoi cells"
            if capped:
                how += f", {capped} capped at {MAX_CELL_RATIO:g} x the median"
            return areas / areas.sum(), how
    return np.full(len(d), 1.0 / len(d)), "equal (the grid does not span the sphere)"
