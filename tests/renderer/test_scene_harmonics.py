"""AmbiX harmonics, normalisations and t-designs, against scipy and the published tables."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.special import sph_harm_y

from earfold.renderer.errors import SceneError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.scenes import (
    MAX_ORDER,
    channel_count,
    conversion_matrix,
    encode,
    order_for_channels,
    real_harmonics,
    to_sn3d,
)
from earfold.renderer.scenes._design_search import construct_design
from earfold.renderer.scenes._designs import (
    DESIGN_TOLERANCE,
    design_error,
    t_design,
    virtual_layout,
)

RNG = np.random.default_rng(17)
AZ = RNG.uniform(-180.0, 180.0, 200)
EL = np.degrees(np.arcsin(RNG.uniform(-1.0, 1.0, 200)))
DIRS = direction_to_vector(AZ, EL)


def _scipy_real_sn3d(n: int, m: int) -> np.ndarray:
    # scipy.special.sph_harm_y: complex, orthonormal, with the Condon-Shortley phase;
    # theta is the polar angle, phi the azimuth. Real form: the real part for m > 0, the
    # imaginary part of the |m| harmonic for m < 0, x sqrt(2) for m != 0, (-1)^m removed;
    # x sqrt(4 pi) gives N3D, / sqrt(2n + 1) more gives SN3D (REFERENCES.md, Ambisonics).
    theta = np.radians(90.0 - EL)
    phi = np.radians(AZ)
    y = sph_harm_y(n, abs(m), theta, phi)
    part = y.real if m >= 0 else y.imag
    scale = (math.sqrt(2.0) if m else 1.0) * (-1.0) ** abs(m)
    return part * scale * math.sqrt(4 * math.pi) / math.sqrt(2 * n + 1)


@pytest.mark.parametrize("n", range(0, 16))
def test_harmonics_match_scipy_converted_to_real_sn3d(n):
    ours = real_harmonics(DIRS, n)
    for m in range(-n, n + 1):
        assert_allclose(ours[:, n * n + n + m], _scipy_real_sn3d(n, m), atol=1e-10, err_msg=f"{m}")


def test_first_and_second_order_follow_the_ambix_formulas():
    # Nachbar et al. (2011): W = 1, Y = sin az cos el, Z = sin el, X = cos az cos el;
    # ACN 4 = (sqrt 3 / 2) cos^2 el sin 2az, ACN 6 = (3 sin^2 el - 1) / 2 (REFERENCES.md).
    a, e = np.radians(AZ), np.radians(EL)
    y = encode(DIRS, 2)
    assert_allclose(y[:, 0], 1.0)
    assert_allclose(y[:, 1], np.sin(a) * np.cos(e), atol=1e-12)
    assert_allclose(y[:, 2], np.sin(e), atol=1e-12)
    assert_allclose(y[:, 3], np.cos(a) * np.cos(e), atol=1e-12)
    assert_allclose(y[:, 4], math.sqrt(3) / 2 * np.cos(e) ** 2 * np.sin(2 * a), atol=1e-12)
    assert_allclose(y[:, 6], (3 * np.sin(e) ** 2 - 1) / 2, atol=1e-12)


def test_sn3d_has_peak_one_and_n3d_unit_mean_square():
    # SN3D: every harmonic's maximum over the sphere is at most 1, and 1 for each m = 0
    # (Nachbar et al. 2011). N3D: mean square 1 over the sphere, checked by averaging over
    # a 15-design, which integrates the degree <= 14 products exactly.
    dense = direction_to_vector(*np.meshgrid(np.arange(-180, 180, 1.0), np.arange(-90, 91, 1.0)))
    peaks = np.abs(real_harmonics(dense.reshape(-1, 3), 7)).max(axis=0)
    assert np.all(peaks <= 1 + 1e-12)
    assert_allclose(peaks[[n * n + n for n in range(8)]], 1.0, atol=1e-12)
    n3d = real_harmonics(t_design(15), 7, "n3d")
    assert_allclose(n3d.T @ n3d / len(n3d), np.eye(64), atol=1e-11)


def test_conversion_factors_match_the_ambix_tables():
    # Nachbar et al. (2011): N3D = SN3D x sqrt(2n + 1); FuMa W = SN3D W / sqrt 2, FuMa
    # X, Y, Z = SN3D X, Y, Z, channel order W X Y Z.
    n3d = conversion_matrix(2, "n3d")
    assert_allclose(np.diag(n3d), 1 / np.sqrt([1, 3, 3, 3, 5, 5, 5, 5, 5]))
    assert_allclose(
        conversion_matrix(3, "n3d") @ real_harmonics(DIRS, 3, "n3d").T, encode(DIRS, 3).T
    )
    y = encode(DIRS, 1)
    fuma = np.stack([y[:, 0] / math.sqrt(2), y[:, 3], y[:, 1], y[:, 2]], axis=1)
    assert_allclose(to_sn3d(fuma, 1, "fuma"), y, atol=1e-12)
    assert_allclose(to_sn3d(y, 1), y)


def test_bad_scenes_are_refused_with_clear_messages():
    with pytest.raises(SceneError, match="order-2 scene has 9 channels; got 8"):
        to_sn3d(np.zeros((10, 8)), 2)
    with pytest.raises(
        SceneError, match=r"unknown Ambisonic normalisation 'maxn'.*sn3d, n3d, fuma"
    ):
        conversion_matrix(1, "maxn")
    with pytest.raises(SceneError, match="FuMa is read for first order only"):
        conversion_matrix(2, "fuma")
    for order in (0, 8, -1):
        with pytest.raises(SceneError, match="order must be 1 to 7"):
            encode(DIRS, order)
    with pytest.raises(SceneError, match="must be an integer"):
        channel_count(2.0)  # type: ignore[arg-type]
    with pytest.raises(SceneError, match=r"5 channels is not an Ambisonic scene.*4, 9, 16"):
        order_for_channels(5)
    with pytest.raises(SceneError, match="81 channels"):
        order_for_channels(81)
    assert [order_for_channels((n + 1) ** 2) for n in range(1, MAX_ORDER + 1)] == list(range(1, 8))
    with pytest.raises(SceneError, match="non-zero"):
        encode(np.zeros(3), 1)


@pytest.mark.parametrize("t", range(3, 16, 2))
def test_stored_designs_integrate_every_harmonic_up_to_t(t):
    # Definition of a spherical t-design (Delsarte, Goethals, Seidel 1977): the mean of
    # every harmonic of degree 1..t over the points is zero. Degree t + 1 is not.
    points = t_design(t)
    assert_allclose(np.linalg.norm(points, axis=1), 1.0, atol=1e-15)
    assert design_error(points, t) <= DESIGN_TOLERANCE
    assert design_error(points, t + 1) > 1e-6
    gaps = np.degrees(np.arccos(np.clip(points @ points.T - 2 * np.eye(len(points)), -1, 1)))
    assert gaps.min() > 90.0 / t  # near-uniform: no two points crowd together


def test_the_construction_builds_a_design():
    half = construct_design(7, seed=3)
    assert design_error(np.vstack([half, -half]), 7) <= DESIGN_TOLERANCE
    assert len(virtual_layout(3)) == len(half) * 2
