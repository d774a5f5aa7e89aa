"""Near-uniform point sets on the sphere: spherical t-designs.

A spherical t-design is a finite set of points on which the mean of every polynomial of
degree up to ``t`` equals its mean over the sphere (Delsarte, Goethals and Seidel, Geom.
Dedicata 6 (1977) 363). Equivalently, the mean over the points of every spherical harmonic
of degree ``1 <= n <= t`` is zero. A decoder for order ``N`` that samples the sphere at a
``(2N + 1)``-design keeps the harmonics up to order ``N`` orthogonal on its points, so a
plane wave keeps its pressure and energy whatever its direction (Zotter and Frank,
*Ambisonics*, Springer 2019, ch. 4).

The designs here are antipodal (``x`` and ``-x`` both in the set), which makes every
odd-degree mean zero by symmetry; the even degrees ``2 .. t - 1`` are driven to zero by
nonlinear least squares (:func:`scipy.optimize.least_squares`) from a golden-angle spiral
on the upper hemisphere. With ``K`` antipodal pairs there are ``2K`` unknowns (less 3 for a
rotation of the whole set) against ``(t - 1)(t + 2) / 2`` equations; one pair more than
the count strictly needs makes the solve converge reliably. The tables in
:mod:`._design_table` were written by ``python -m earfold.renderer.scenes._designs``;
the tests check that every stored set integrates each harmonic up to degree ``t`` to
``1e-12`` and that the construction reproduces a design.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np
import numpy.typing as npt
from scipy.optimize import least_squares

from ..errors import SceneError
from ._design_table import HALF_DESIGNS
from ._harmonics import acn_degrees, check_order, real_harmonics

__all__ = ["DESIGN_TOLERANCE", "construct_design", "design_error", "t_design", "virtual_layout"]

FloatArray = npt.NDArray[np.float64]

#: Largest mean of a degree 1..t harmonic (SN3D, so the constant harmonic's mean is 1)
#: that still counts as zero for a stored or constructed design.
DESIGN_TOLERANCE = 1e-12

#: Seeds tried, in order, before a construction gives up (each is a small jitter of the
#: spiral start; the first one has converged for every t used here).
_SEEDS = 8


def design_error(points: npt.ArrayLike, t: int) -> float:
    """Largest |mean over ``points``| of an SN3D harmonic of degree 1 to ``t`` (0: a design)."""
    y = real_harmonics(points, t, "sn3d")
    return float(np.abs(y[:, 1:].mean(axis=0)).max())


def _pairs_for(t: int) -> int:
    equations = sum(2 * n + 1 for n in range(2, t, 2))
    return (equations + 4) // 2 + 1


def construct_design(t: int, *, seed: int = 0) -> FloatArray:
    """Build an antipodal spherical ``t``-design (odd ``t``), returning ``K`` of its points.

    The full design is ``np.vstack([half, -half])``. Raises :class:`SceneError` when no
    seed up to ``seed + 8`` converges to :data:`DESIGN_TOLERANCE`.
    """
    if t < 1 or t % 2 == 0:
        raise SceneError(f"antipodal designs are built for odd t, got {t}")
    pairs = _pairs_for(t)
    even = np.isin(acn_degrees(max(t - 1, 0)), np.arange(2, t, 2))
    i = np.arange(pairs) + 0.5
    z = i / pairs
    phi = i * math.pi * (3.0 - math.sqrt(5.0))  # golden angle
    spiral = np.stack([np.sqrt(1 - z * z) * np.cos(phi), np.sqrt(1 - z * z) * np.sin(phi), z], 1)

    def residual(flat: FloatArray) -> FloatArray:
        v = flat.reshape(pairs, 3)
        v = v / np.linalg.norm(v, axis=1, keepdims=True)
        sums: FloatArray = real_harmonics(v, max(t - 1, 0), "sn3d")[:, even].mean(axis=0)
        return sums

    for attempt in range(seed, seed + _SEEDS):
        rng = np.random.default_rng(attempt)
        start = spiral + 0.02 * rng.standard_normal(spiral.shape)
        if even.any():
            solution = least_squares(
                residual, start.ravel(), xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=500
            )
            start = solution.x.reshape(pairs, 3)
        half: FloatArray = start / np.linalg.norm(start, axis=1, keepdims=True)
        if design_error(np.vstack([half, -half]), t) <= DESIGN_TOLERANCE:
            return half
    raise SceneError(f"no {t}-design converged from seeds {seed} to {seed + _SEEDS - 1}")


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


def _write_table(path: Path) -> None:
    lines = [
        '"""Antipodal spherical t-designs: half of each set (the other half is its negative).',
        "",
        "Written by ``python -m earfold.renderer.scenes._designs``; do not edit by hand.",
        '"""',
        "",
        "from __future__ import annotations",
        "",
        "HALF_DESIGNS: dict[int, tuple[tuple[float, float, float], ...]] = {",
    ]
    for t in range(3, 16, 2):
        half = construct_design(t)
        lines.append(f"    {t}: (")
        lines.extend(f"        ({x!r}, {y!r}, {z!r})," for x, y, z in half.tolist())
        lines.append("    ),")
    lines.append("}")
    path.write_text("\n".join(lines) + "\n")


def main(argv: list[str] | None = None) -> None:
    """Rebuild the stored designs (``python -m earfold.renderer.scenes._designs [FILE]``)."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0] if __doc__ else None)
    parser.add_argument(
        "file", nargs="?", default=str(Path(__file__).with_name("_design_table.py"))
    )
    _write_table(Path(parser.parse_args(argv).file))


if __name__ == "__main__":
    main()
