"""Rigid-sphere head model: analytic HRIRs for tests and as a shipped HRTF set.

The pressure on the surface of a rigid sphere of radius ``a`` struck by a sound wave is
the classical series solution in Legendre polynomials and spherical Hankel functions,
in the form given by Duda, R. O. and Martens, W. L. (1998), "Range dependence of the
response of a spherical head model", J. Acoust. Soc. Am. 104(5), 3048-3058, eqs. (1)-(2).
With ``mu = 2 pi f a / c``, ``rho = r / a`` and ``theta`` the angle between the source
direction and the ear (the *incidence angle*):

* far field (plane wave)::

      H(mu, theta) = 1 / mu**2 * sum_m (-i)**(m - 1) (2m + 1) P_m(cos theta) / h_m'(mu)

* point source at range ``r``::

      H(rho, mu, theta) = -(rho / mu) exp(-i mu rho)
                          * sum_m (2m + 1) P_m(cos theta) h_m(mu rho) / h_m'(mu)

``H`` is the surface pressure relative to the free-field pressure that the same source
would give at the centre of the sphere with the sphere removed. Duda and Martens write
the series for time dependence ``exp(-i omega t)`` with ``h_m = j_m + i y_m``; this module
returns the complex conjugate, i.e. the ``exp(+i omega t)`` convention of ``numpy.fft``,
so a delay of ``tau`` appears as ``exp(-2 pi i f tau)`` and ``numpy.fft.irfft`` of the
spectrum is causal once the bulk delay is added.

The Hankel functions are never evaluated directly (they overflow for orders well above
``mu``); the series uses their ratio ``h_m / h_(m-1)``, which obeys the stable upward
recurrence ``r_(m+1) = (2m + 1) / x - 1 / r_m`` with ``r_1 = 1/x - i``.

Directions follow :mod:`earfold.renderer.geometry`: unit vectors with x to the front, y to the
left, z up; ear 0 is the left ear (on +y when ``ear_angle_deg`` is 90).
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence

import numpy as np
from scipy import special

from ..defaults import SPEED_OF_SOUND
from ..errors import HrirError, RendererError, shown
from ..geometry import direction_to_vector, normalize

#: Head radius in metres: the 8.75 cm of the Woodworth formula's usual statement
#: (common practice; Duda and Martens use it as their reference head).
DEFAULT_RADIUS = 0.0875

#: Speed of sound in m/s (air at about 20 degrees C; common practice).

#: Samples before the earliest possible arrival (the ear facing the source, which hears
#: the wave ``a / c`` before the centre of the head). Leaves room for the band-limited
#: pre-ringing of that first arrival, so every IR's -20 dB onset lies after sample ~20.
LEAD_SAMPLES = 24

#: Relative size below which a series term is considered negligible when choosing the
#: term count for a finite range (see :func:`series_terms`).
SERIES_TOLERANCE = 1e-12

#: Length (samples) of the half-Hann fade at the end of each IR. The sphere's response
#: has died away by then (below -100 dB of the peak at 48 kHz, 256 taps); the fade only
#: guarantees that truncation leaves no step.
TAIL_FADE_SAMPLES = 32

#: Fraction of the Nyquist frequency above which spectra are tapered to zero (raised
#: cosine). The sphere passes high frequencies at up to +6 dB, so an untapered spectrum
#: ends in a step at Nyquist whose sinc ringing (decaying only as 1/n) would reach -60 dB
#: at the end of a 256-tap IR and -30 dB before the onset. A cosine taper over the top
#: fifth of the band makes the ringing decay as 1/n**3 (common practice when turning
#: computed spectra into short FIR filters); it removes nothing below 19.2 kHz at 48 kHz.
TAPER_START = 0.8

#: Spectra are computed on an FFT this many times the IR length, so that the part of the
#: response cut off by truncation is not folded back onto the start (time aliasing).
_FFT_OVERSIZE = 4

#: Distance (metres) written to SOFA files for the far-field set: a plane-wave model has
#: no range, and 1 m is a nominal value readers need not interpret.
NOMINAL_DISTANCE = 1.0


def series_terms(mu_max: float, rho: float = np.inf) -> int:
    """Number of series terms (orders 0 .. n-1) summed for ``mu <= mu_max``.

    The rule is Wiscombe's criterion for the same kind of Bessel-function series in Mie
    scattering, ``n = mu + 4.05 mu**(1/3) + 2`` (Wiscombe, W. J. (1980), "Improved Mie
    scattering algorithms", Applied Optics 19(9), 1505-1509; cited from memory), plus 16
    terms of margin: beyond order ``mu`` the far-field terms fall faster than
    geometrically, and the margin leaves the last term summed below 1e-11 of the sum up
    to ``mu = 38.5`` (24 kHz for a = 8.75 cm), the omitted ones smaller still. For a
    source at finite range the terms fall only like ``rho**-m`` once ``m > mu rho``,
    so ``log(SERIES_TOLERANCE) / log(1 / rho)`` further terms are added.

    Parameters
    ----------
    mu_max : float
        Largest ``2 pi f a / c`` to be evaluated.
    rho : float
        Source range over sphere radius (``inf`` for the far field).

    Returns
    -------
    int
    """
    n = int(np.ceil(mu_max + 4.05 * np.cbrt(mu_max) + 2.0)) + 16
    if np.isfinite(rho):
        n += int(np.ceil(np.log(SERIES_TOLERANCE) / -np.log(rho)))
    return n


def _check_geometry(radius: float, distance: float, c: float) -> float:
    if not (np.isfinite(radius) and radius > 0):
        raise HrirError(f"sphere radius must be a positive number of metres, got {shown(radius)}")
    if not (np.isfinite(c) and c > 0):
        raise HrirError(f"speed of sound must be a positive number of m/s, got {shown(c)}")
    if np.isnan(distance) or distance <= radius:
        raise HrirError(
            f"source distance must be greater than the sphere radius {shown(radius)} m "
            f"(or inf for the far field), got {shown(distance)}"
        )
    return float(distance) / float(radius)


def _order_coefficients(mu: np.ndarray, rho: float, terms: int) -> np.ndarray:
    """Per-order factors ``A_m(mu)`` (shape ``(terms, F)``) such that H = sum P_m A_m.

    In Duda and Martens' ``exp(-i omega t)`` convention; ``mu`` must be positive.
    """
    coeff = np.empty((terms, mu.size), dtype=complex)
    ratio = 1.0 / mu - 1j  # r_1(mu) = h_1 / h_0
    if not np.isfinite(rho):
        inv_h = 1j * mu * np.exp(-1j * mu)  # 1 / h_0(mu), h_0(x) = -i exp(ix) / x
        for m in range(terms):
            if m == 0:
                inv_dh = -inv_h / ratio  # h_0' = -h_1
            else:
                inv_h = inv_h / ratio
                inv_dh = inv_h / (1.0 / ratio - (m + 1) / mu)  # h_m' = h_(m-1) - (m+1)/x h_m
                ratio = (2 * m + 1) / mu - 1.0 / ratio
            coeff[m] = (-1j) ** (m - 1) * (2 * m + 1) * inv_dh / mu**2
        return coeff
    x_far = mu * rho
    ratio_far = 1.0 / x_far - 1j  # r_1(mu rho)
    # q_m = exp(-i mu rho) h_m(mu rho) / h_m(mu); the exponential is folded into q_0.
    q = np.exp(-1j * mu) / rho
    for m in range(terms):
        if m == 0:
            term = q / -ratio
        else:
            q = q * ratio_far / ratio
            term = q / (1.0 / ratio - (m + 1) / mu)
            ratio = (2 * m + 1) / mu - 1.0 / ratio
            ratio_far = (2 * m + 1) / x_far - 1.0 / ratio_far
        coeff[m] = -(rho / mu) * (2 * m + 1) * term
    return coeff


def _static_limit(cos_theta: np.ndarray, rho: float) -> np.ndarray:
    """``H`` at 0 Hz: 1 in the far field, ``sum (2m+1)/(m+1) P_m rho**-m`` at range.

    The finite-range value is the small-``mu`` limit of each term of the series above
    (``h_m(mu rho) / h_m'(mu) -> -mu / ((m + 1) rho**(m + 1))``).
    """
    if not np.isfinite(rho):
        return np.ones(cos_theta.shape, dtype=complex)
    terms = series_terms(0.0, rho)
    orders = np.arange(terms)
    legendre = special.eval_legendre(orders[:, None], cos_theta.ravel()[None, :])
    weights = (2 * orders + 1) / (orders + 1) * rho ** (-orders.astype(float))
    limit: np.ndarray = (weights @ legendre).reshape(cos_theta.shape).astype(complex)
    return limit


def sphere_transfer_function(
    freqs: np.ndarray | Sequence[float] | float,
    incidence_deg: np.ndarray | Sequence[float] | float,
    *,
    radius: float = DEFAULT_RADIUS,
    distance: float = np.inf,
    c: float = SPEED_OF_SOUND,
    terms: int | None = None,
) -> np.ndarray:
    """Rigid-sphere transfer function (Duda and Martens 1998, eqs. 1-2).

    Parameters
    ----------
    freqs : array_like
        Frequencies in Hz, ``>= 0``.
    incidence_deg : array_like
        Angle in degrees between the source direction and the ear (0: the source is on
        the ear's axis, on the ear's side; 180: diametrically opposite).
    radius : float
        Sphere radius in metres.
    distance : float
        Source distance from the centre in metres; ``inf`` (default) for a plane wave.
    c : float
        Speed of sound in m/s.
    terms : int, optional
        Number of series terms; by default :func:`series_terms` of the largest ``mu``.

    Returns
    -------
    ndarray of complex, shape ``incidence.shape + freqs.shape``
        Surface pressure over free-field pressure at the sphere's centre, in the
        ``exp(+i omega t)`` (numpy.fft) convention. Tends to 1 as ``f -> 0`` in the
        far field.
    """
    rho = _check_geometry(radius, distance, c)
    f = np.asarray(freqs, dtype=float)
    theta = np.radians(np.asarray(incidence_deg, dtype=float))
    if f.size and (not np.all(np.isfinite(f)) or f.min() < 0):
        bad = f[~(np.isfinite(f) & (f >= 0))].ravel()[0]
        raise HrirError(f"frequencies must be finite and >= 0 Hz, got {float(bad)!r}")
    cos_theta = np.cos(theta).ravel()
    mu = 2.0 * np.pi * f.ravel() * radius / c
    out = np.empty((cos_theta.size, mu.size), dtype=complex)
    zero = mu == 0
    if np.any(zero):
        out[:, zero] = _static_limit(cos_theta, rho)[:, None]
    if np.any(~zero):
        mu_pos = mu[~zero]
        n = series_terms(float(mu_pos.max()), rho) if terms is None else int(terms)
        if n < 1:
            raise HrirError(f"the series needs at least 1 term, got terms={shown(terms)}")
        coeff = _order_coefficients(mu_pos, rho, n)
        legendre = special.eval_legendre(np.arange(n)[:, None], cos_theta[None, :])
        out[:, ~zero] = legendre.T @ coeff
    return np.conj(out).reshape(theta.shape + f.shape)


def ear_vectors(ear_angle_deg: float = 90.0) -> np.ndarray:
    """Unit vectors of the left and right ear, shape ``(2, 3)``.

    The ears lie in the horizontal plane at azimuth ``+ear_angle_deg`` (left) and
    ``-ear_angle_deg`` (right).
    """
    return direction_to_vector(np.array([ear_angle_deg, -ear_angle_deg]), np.zeros(2))


def sphere_hrirs(
    directions: np.ndarray,
    samplerate: float,
    *,
    taps: int = 256,
    radius: float = DEFAULT_RADIUS,
    c: float = SPEED_OF_SOUND,
    ear_angle_deg: float = 90.0,
    distance: float = np.inf,
) -> np.ndarray:
    """HRIRs of a rigid sphere with point ears, for source directions.

    Each spectrum (:func:`sphere_transfer_function` at the FFT frequencies) is delayed by
    ``LEAD_SAMPLES + a fs / c`` samples, so that the earliest arrival (ear facing the
    source) is at sample :data:`LEAD_SAMPLES` and later ones follow the sphere's physics,
    transformed with ``numpy.fft.irfft`` on an FFT :data:`_FFT_OVERSIZE` times ``taps``
    long, tapered above :data:`TAPER_START` of Nyquist, truncated to ``taps`` and faded
    out over the last :data:`TAIL_FADE_SAMPLES`.

    Parameters
    ----------
    directions : ndarray, shape (M, 3)
        Source directions as vectors (x front, y left, z up); normalised here.
    samplerate : float
        Sampling rate in Hz.
    taps : int
        IR length in samples (at least ``2 * TAIL_FADE_SAMPLES + LEAD_SAMPLES``).
    radius, c, distance : float
        As in :func:`sphere_transfer_function`.
    ear_angle_deg : float
        Azimuth of the left ear (the right ear is at its mirror image).

    Returns
    -------
    ndarray, shape (M, 2, taps), float64
        Ear 0 is the left ear.
    """
    dirs = np.asarray(directions, dtype=float)
    if dirs.ndim != 2 or dirs.shape[1] != 3:
        raise HrirError(f"directions must have shape (M, 3), got {dirs.shape!r}")
    if not (np.isfinite(samplerate) and samplerate > 0):
        raise HrirError(f"sampling rate must be a positive number of Hz, got {shown(samplerate)}")
    min_taps = 2 * TAIL_FADE_SAMPLES + LEAD_SAMPLES
    if int(taps) != taps or taps < min_taps:
        raise HrirError(f"taps must be an integer >= {min_taps}, got {shown(taps)}")
    taps = int(taps)
    unit = normalize(dirs)
    if np.any(np.linalg.norm(unit, axis=1) == 0):
        raise HrirError("directions contain a zero vector, which has no direction")
    cos_inc = np.clip(unit @ ear_vectors(ear_angle_deg).T, -1.0, 1.0)  # (M, 2)
    incidence = np.degrees(np.arccos(cos_inc))

    nfft = _FFT_OVERSIZE * taps
    freqs = np.fft.rfftfreq(nfft, 1.0 / samplerate)
    spectra = sphere_transfer_function(freqs, incidence, radius=radius, distance=distance, c=c)
    # A finite source range adds no bulk delay: H is referenced to the centre's pressure.
    bulk = LEAD_SAMPLES + radius * samplerate / c
    spectra = spectra * np.exp(-2j * np.pi * np.arange(freqs.size) * bulk / nfft)
    spectra = spectra * _nyquist_taper(freqs / (samplerate / 2.0))
    # The taper is zero at Nyquist, so no bin is left that a real IR could not hold.
    irs = np.fft.irfft(spectra, n=nfft, axis=-1)[..., :taps]
    irs *= _tail_window(taps)
    return irs


def _nyquist_taper(fraction: np.ndarray) -> np.ndarray:
    """1 up to TAPER_START, a half cosine down to 0 at Nyquist (fraction = f / (fs/2))."""
    x = np.clip((fraction - TAPER_START) / (1.0 - TAPER_START), 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * x))


def _tail_window(taps: int) -> np.ndarray:
    window = np.ones(taps)
    fade = np.hanning(2 * TAIL_FADE_SAMPLES + 1)[TAIL_FADE_SAMPLES + 1 :]
    window[taps - TAIL_FADE_SAMPLES :] = fade
    return window


def sphere_grid(grid_deg: float = 10.0) -> tuple[np.ndarray, np.ndarray]:
    """Azimuths and elevations (degrees) of a near-uniform full-sphere grid.

    Rings every ``grid_deg`` of elevation from -90 to +90; on each ring,
    ``round(360 cos(el) / grid_deg)`` equally spaced azimuths starting at 0 (one
    direction at each pole), wrapped to (-180, 180].
    """
    if not (np.isfinite(grid_deg) and 0 < grid_deg <= 90 and (90.0 / grid_deg).is_integer()):
        raise HrirError(
            f"grid spacing must divide 90 degrees (e.g. 5, 10, 15, 30), got {shown(grid_deg)}"
        )
    rings = int(round(180.0 / grid_deg)) + 1
    az_list: list[np.ndarray] = []
    el_list: list[np.ndarray] = []
    for el in np.linspace(-90.0, 90.0, rings):
        count = max(1, int(round(360.0 * np.cos(np.radians(el)) / grid_deg)))
        az = np.arange(count) * (360.0 / count)
        az = np.where(az > 180.0, az - 360.0, az)
        az_list.append(az)
        el_list.append(np.full(count, el))
    return np.concatenate(az_list), np.concatenate(el_list)


def build_sphere_set(
    path: str | os.PathLike[str],
    *,
    samplerate: int = 48000,
    taps: int = 256,
    grid_deg: float = 10.0,
    radius: float = DEFAULT_RADIUS,
) -> None:
    """Compute the far-field rigid-sphere set on a full-sphere grid and write it as SOFA.

    The file is a SimpleFreeFieldHRIR 1.0 file (written by
    :func:`earfold.renderer.hrtf.write_sofa`) whose global attributes name the model, its
    source, the radius and the speed of sound. The computation is deterministic: the same
    arguments give the same IRs.

    Parameters
    ----------
    path : path-like
        Output file.
    samplerate : int
        Sampling rate in Hz.
    taps : int
        IR length in samples.
    grid_deg : float
        Grid spacing in degrees (see :func:`sphere_grid`).
    radius : float
        Sphere radius in metres.
    """
    c = SPEED_OF_SOUND
    azimuth, elevation = sphere_grid(grid_deg)
    ir = sphere_hrirs(
        direction_to_vector(azimuth, elevation), samplerate, taps=taps, radius=radius, c=c
    )
    # Imported here so that the model itself never needs netCDF4.
    from .sofa import write_sofa

    attributes = {
        "Title": "Rigid sphere, far field, ears at +/-90 degrees azimuth",
        "ListenerShortName": "rigid-sphere",
        "DatabaseName": "earfold",
        "Comment": (
            f"Analytic rigid-sphere HRIRs (plane-wave incidence) from the series solution "
            f"in Legendre polynomials and spherical Hankel functions; sphere radius "
            f"{radius!r} m, speed of sound {c!r} m/s, point ears at azimuth +/-90 degrees "
            f"on the horizontal plane, {taps} taps at {samplerate} Hz, grid {grid_deg!r} "
            f"degrees, common bulk delay {LEAD_SAMPLES} + a*fs/c samples. Source distance "
            f"{NOMINAL_DISTANCE!r} m is nominal (the model is far-field). Generated by "
            f"'python -m earfold.renderer.hrtf.sphere'."
        ),
        "References": (
            "Duda, R. O. and Martens, W. L. (1998), Range dependence of the response of a "
            "spherical head model, J. Acoust. Soc. Am. 104(5), 3048-3058"
        ),
        "License": "CC0-1.0 (computed data, no rights reserved)",
        "Origin": "computed",
    }
    write_sofa(
        path,
        ir=ir,
        samplerate=float(samplerate),
        azimuth=azimuth,
        elevation=elevation,
        distance=NOMINAL_DISTANCE,
        attributes=attributes,
        receiver_offset=radius,
    )


def main(argv: Sequence[str] | None = None) -> int:
    """Regenerate the shipped rigid-sphere set.

    Usage: ``python -m earfold.renderer.hrtf.sphere OUTPUT``.
    """
    parser = argparse.ArgumentParser(
        prog="python -m earfold.renderer.hrtf.sphere",
        description="Write the far-field rigid-sphere HRIR set as a SOFA file.",
    )
    parser.add_argument("output", help="SOFA file to write (e.g. hrtf_sets/rigid_sphere.sofa)")
    parser.add_argument("--samplerate", type=int, default=48000, help="Hz (default 48000)")
    parser.add_argument("--taps", type=int, default=256, help="IR length (default 256)")
    parser.add_argument("--grid", type=float, default=10.0, help="degrees (default 10)")
    parser.add_argument(
        "--radius", type=float, default=DEFAULT_RADIUS, help=f"metres (default {DEFAULT_RADIUS})"
    )
    args = parser.parse_args(argv)
    try:
        build_sphere_set(
            args.output,
            samplerate=args.samplerate,
            taps=args.taps,
            grid_deg=args.grid,
            radius=args.radius,
        )
    except RendererError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
