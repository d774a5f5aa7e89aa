"""The search that builds the stored spherical t-designs (see :mod:`._designs`).

``python -m earfold.renderer.scenes._design_search [FILE]`` rewrites
:mod:`._design_table`; the search is deterministic, so the file comes out the same.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np
import numpy.typing as npt
from scipy.optimize import least_squares

from ..errors import SceneError
from ._designs import DESIGN_TOLERANCE, design_error
from ._harmonics import acn_degrees, real_harmonics

__all__ = ["construct_design", "main"]

FloatArray = npt.NDArray[np.float64]

#: Seeds tried, in order, before a construction gives up (each is a small jitter of the
#: spiral start; the first one has converged for every t used here).
_SEEDS = 8


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


def _write_table(path: Path) -> None:
    lines = [
        '"""Antipodal spherical t-designs: half of each set (the other half is its negative).',
        "",
        "Written by ``python -m earfold.renderer.scenes._design_search``; do not edit by hand.",
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
    """Rebuild the stored designs (``python -m earfold.renderer.scenes._design_search [FILE]``)."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0] if __doc__ else None)
    parser.add_argument(
        "file", nargs="?", default=str(Path(__file__).with_name("_design_table.py"))
    )
    _write_table(Path(parser.parse_args(argv).file))


if __name__ == "__main__":
    main()
