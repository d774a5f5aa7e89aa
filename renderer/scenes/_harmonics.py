"""Real spherical harmonics in the AmbiX convention, and the other normalisations.

AmbiX (Nachbar, Zotter, Deleflie and Sontacchi, "AmbiX - a suggested Ambisonics format",
Ambisonics Symposium 2011): channels in ACN order (index ``n**2 + n + m`` for degree ``n``
and index ``-n <= m <= n``), SN3D normalisation without the Condon-Shortley phase,

    Y_nm(az, el) = N_nm P_n^|m|(sin el) * (cos(m az) for m >= 0, sin(|m| az) for m < 0),
    N_nm = sqrt((2 - delta_m0) (n - |m|)! / (n + |m|)!),

so that W = 1, Y = sin(az) cos(el), Z = sin(el), X = cos(az) cos(el). N3D multiplies degree
``n`` by ``sqrt(2n + 1)`` (then the harmonics have mean square 1 over the sphere); FuMa,
for first order only here, orders the channels W X Y Z and scales W by ``1/sqrt(2)``.

The harmonics are computed from the unit vector itself, never from angles:
``cos(el)**|m| * exp(i |m| az) = (x + i y)**|m|`` and the associated Legendre function
divided by ``cos(el)**|m|`` is a polynomial in ``z = sin el`` (the usual three-term
recursion), so nothing is singular at the poles.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
import numpy.typing as npt

from ..errors import SceneError, shown

__all__ = [
    "MAX_ORDER",
    "MIN_ORDER",
    "NORMALISATIONS",
    "Normalisation",
    "acn_degrees",
    "channel_count",
    "check_order",
    "conversion_matrix",
    "encode",
    "order_for_channels",
    "real_harmonics",
    "to_sn3d",
]

FloatArray = npt.NDArray[np.float64]

#: Highest Ambisonic order the scene decoder takes (64 channels).
MAX_ORDER = 7

#: Lowest Ambisonic order the scene decoder takes (first order, 4 channels).
MIN_ORDER = 1

#: The input normalisations: AmbiX SN3D (default), N3D, and FuMa (first order only).
NORMALISATIONS = ("sn3d", "n3d", "fuma")

Normalisation = Literal["sn3d", "n3d", "fuma"]


def check_order(order: object) -> int:
    """``order`` as an int, or :class:`SceneError` when it is not 1 to :data:`MAX_ORDER`."""
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)):
        raise SceneError(f"Ambisonic order must be an integer 1 to {MAX_ORDER}, got {shown(order)}")
    if not MIN_ORDER <= int(order) <= MAX_ORDER:
        raise SceneError(f"Ambisonic order must be 1 to {MAX_ORDER}, got {int(order)}")
    return int(order)


def channel_count(order: int) -> int:
    """Channels of a full-sphere scene of ``order``: ``(order + 1) ** 2``."""
    return (check_order(order) + 1) ** 2


def order_for_channels(channels: int) -> int:
    """The order whose scene has ``channels`` channels, or :class:`SceneError`.

    Examples
    --------
    >>> order_for_channels(16)
    3
    """
    root = math.isqrt(max(int(channels), 0))
    valid = ", ".join(str((n + 1) ** 2) for n in range(MIN_ORDER, MAX_ORDER + 1))
    if root * root != channels or not MIN_ORDER <= root - 1 <= MAX_ORDER:
        raise SceneError(
            f"{shown(channels)} channels is not an Ambisonic scene of order 1 to {MAX_ORDER} "
            f"((order + 1)^2 channels: {valid})"
        )
    return root - 1


def acn_degrees(degree: int) -> npt.NDArray[np.int_]:
    """Degree ``n`` of each ACN channel up to ``degree`` (``[0, 1, 1, 1, 2, ...]``)."""
    return np.repeat(np.arange(degree + 1), 2 * np.arange(degree + 1) + 1)


def _norm_factors(degree: int, norm: str) -> FloatArray:
    """``N_nm`` of every ACN channel up to ``degree`` for ``norm`` in sn3d, n3d, orthonormal."""
    out = np.empty((degree + 1) ** 2)
    for n in range(degree + 1):
        for m in range(-n, n + 1):
            a = abs(m)
            # (n - a)! / (n + a)! as a product, exact enough for any degree used here.
            ratio = 1.0 / math.prod(range(n - a + 1, n + a + 1)) if a else 1.0
            value = math.sqrt((2.0 - (m == 0)) * ratio)
            if norm in ("n3d", "orthonormal"):
                value *= math.sqrt(2 * n + 1)
            if norm == "orthonormal":
                value /= math.sqrt(4 * math.pi)
            out[n * n + n + m] = value
    return out


def real_harmonics(vectors: npt.ArrayLike, degree: int, norm: str = "sn3d") -> FloatArray:
    """Real spherical harmonics of directions up to ``degree``, ACN order.

    Parameters
    ----------
    vectors : array_like, shape (K, 3) or (3,)
        Directions as vectors (normalised here) in the listener frame: x front, y left, z up.
    degree : int
        Highest degree (any non-negative integer; :func:`encode` is the checked surface).
    norm : {"sn3d", "n3d", "orthonormal"}
        SN3D (AmbiX), N3D, or orthonormal (N3D / sqrt(4 pi): unit integral of the square).

    Returns
    -------
    ndarray, shape (K, (degree + 1)**2) or ((degree + 1)**2,)
    """
    if norm not in ("sn3d", "n3d", "orthonormal"):
        raise SceneError(f"unknown harmonic normalisation {norm!r}; use sn3d, n3d or orthonormal")
    v = np.asarray(vectors, dtype=float)
    single = v.ndim == 1
    v = np.atleast_2d(v)
    if v.shape[-1] != 3 or v.ndim != 2:
        raise SceneError(f"directions must be vectors of shape (K, 3), got {v.shape!r}")
    length = np.linalg.norm(v, axis=1)
    if not np.all(np.isfinite(length)) or np.any(length == 0):
        raise SceneError("directions must be finite, non-zero vectors")
    x, y, z = (v / length[:, None]).T
    k = len(v)
    out = np.empty((k, (degree + 1) ** 2))
    azimuthal = np.ones(k, dtype=complex)  # (x + i y) ** m = cos(el)**m exp(i m az)
    odd_factorial = 1.0  # (2m - 1)!!
    for m in range(degree + 1):
        if m:
            azimuthal = azimuthal * (x + 1j * y)
            odd_factorial *= 2 * m - 1
        # Q_n^m = P_n^m / cos(el)**m without the Condon-Shortley phase, n = m, m + 1, ...
        q_prev = np.zeros(k)
        q = np.full(k, odd_factorial)
        for n in range(m, degree + 1):
            if n > m:
                q, q_prev = ((2 * n - 1) * z * q - (n + m - 1) * q_prev) / (n - m), q
            out[:, n * n + n + m] = q * azimuthal.real
            if m:
                out[:, n * n + n - m] = q * azimuthal.imag
    out *= _norm_factors(degree, norm)
    return out[0] if single else out


def encode(directions: npt.ArrayLike, order: int) -> FloatArray:
    """AmbiX (ACN, SN3D) gains of plane waves from ``directions`` at ``order``.

    Parameters
    ----------
    directions : array_like, shape (K, 3) or (3,)
        Unit vectors in the listener frame (x front, y left, z up); see
        :func:`earfold.renderer.geometry.direction_to_vector` for degrees.
    order : int
        1 to :data:`MAX_ORDER`.

    Returns
    -------
    ndarray, shape (K, (order + 1)**2) or ((order + 1)**2,)

    Examples
    --------
    >>> import numpy as np
    >>> np.round(encode([0.0, 1.0, 0.0], 1), 12)  # from the left: W, Y, Z, X
    array([1., 1., 0., 0.])
    """
    return real_harmonics(directions, check_order(order), "sn3d")


def _check_norm(norm: object, order: int) -> str:
    if norm not in NORMALISATIONS:
        raise SceneError(
            f"unknown Ambisonic normalisation {shown(norm)}; choose one of "
            f"{', '.join(NORMALISATIONS)}"
        )
    if norm == "fuma" and order != 1:
        raise SceneError(
            f"FuMa is read for first order only (W X Y Z); order {order} needs sn3d or n3d"
        )
    return str(norm)


def conversion_matrix(order: int, norm: str = "sn3d") -> FloatArray:
    """Matrix ``A`` that turns a scene in ``norm`` into ACN/SN3D: ``b_sn3d = A @ b_in``.

    Factors after Nachbar et al. (2011): N3D to SN3D divides degree ``n`` by
    ``sqrt(2n + 1)``; FuMa (first order, channels W X Y Z, W at -3 dB) to AmbiX multiplies W
    by ``sqrt(2)`` and reorders to W Y Z X.

    Examples
    --------
    >>> conversion_matrix(1, "fuma")
    array([[1.41421356, 0.        , 0.        , 0.        ],
           [0.        , 0.        , 1.        , 0.        ],
           [0.        , 0.        , 0.        , 1.        ],
           [0.        , 1.        , 0.        , 0.        ]])
    """
    order = check_order(order)
    norm = _check_norm(norm, order)
    size = (order + 1) ** 2
    if norm == "sn3d":
        return np.eye(size)
    if norm == "n3d":
        return np.diag(1.0 / np.sqrt(2.0 * acn_degrees(order) + 1.0))
    matrix = np.zeros((4, 4))
    matrix[0, 0] = math.sqrt(2.0)  # W
    matrix[1, 2] = 1.0  # Y from FuMa's third channel
    matrix[2, 3] = 1.0  # Z from the fourth
    matrix[3, 1] = 1.0  # X from the second
    return matrix


def to_sn3d(signal: npt.ArrayLike, order: int, norm: str = "sn3d") -> FloatArray:
    """A scene (frames x channels) in ``norm`` converted to ACN/SN3D (frames x channels).

    Raises :class:`SceneError` when the channel count does not fit ``order``.

    Examples
    --------
    >>> import numpy as np
    >>> to_sn3d(np.array([[0.5, 1.0, 2.0, 3.0]]), 1, "fuma")  # W X Y Z
    array([[0.70710678, 2.        , 3.        , 1.        ]])
    """
    order = check_order(order)
    x = np.asarray(signal, dtype=float)
    size = (order + 1) ** 2
    if x.ndim != 2:
        raise SceneError(f"a scene is frames x channels; got an array of shape {x.shape!r}")
    if x.shape[1] != size:
        raise SceneError(
            f"an order-{order} scene has {size} channels; got {x.shape[1]} (frames x channels)"
        )
    result: FloatArray = x @ conversion_matrix(order, norm).T
    return result
