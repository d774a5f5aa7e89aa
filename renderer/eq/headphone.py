"""Headphone compensation: Audio EQ Cookbook biquads and headphone-EQ files.

A headphone EQ is applied once, to the two-channel output. It comes either as

* a JSON list of parametric bands (or an object ``{"bands": [...], "gain_db": G}``), each
  ``{"type": T, "frequency": Hz, "gain_db": dB, "q": Q}`` with ``T`` one of
  :data:`BAND_TYPES`; the bands are built as biquads from R. Bristow-Johnson's *Cookbook
  formulae for audio EQ biquad filter coefficients* and cascaded; or
* an impulse response as a WAV (or FLAC) file, one channel for both ears or two (left,
  right), at any rate: it is resampled to the render's rate.

Either way the result is a :class:`HeadphoneEq` holding a two-ear FIR (the biquad cascade
is taken as its impulse response, kept until it has decayed by :data:`IIR_DECAY_DB`), which
the render's engine convolves with its output.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Any, cast

import numpy as np
from numpy.typing import NDArray

from ..errors import HeadphoneEqError, shown
from ..files import read_bytes_bounded
from ..signals import scipy_signal

#: Band types of a JSON headphone EQ (Audio EQ Cookbook names, in snake case).
BAND_TYPES = ("peaking", "low_shelf", "high_shelf", "low_pass", "high_pass")

#: Q used when a band gives none: 1/sqrt(2), the Butterworth value for pass filters and a
#: moderate slope for shelves (common practice).
DEFAULT_Q = 1 / math.sqrt(2)

#: The biquad cascade's impulse response is kept until it has decayed this far (dB below
#: its total energy); the rest is far below 24-bit resolution.
IIR_DECAY_DB = -120.0

#: Longest headphone EQ impulse response accepted (seconds at the render's rate).
MAX_IR_SECONDS = 1.0

#: Largest gain (dB, either sign) a band or the overall gain may ask for.
MAX_GAIN_DB = 24.0

#: Range of a band's Q.
Q_RANGE = (0.05, 50.0)

#: Zeros put before an impulse response that is resampled (input samples; about 0.7 ms at
#: 44.1 kHz): room for the resampling filter's pre-ringing.
RESAMPLE_LEAD = 32

#: Most bands in one file.
MAX_BANDS = 64

#: Largest JSON headphone-EQ file accepted (bytes): 64 bands take a few kilobytes.
MAX_EQ_JSON_BYTES = 2**20

#: Largest impulse-response headphone-EQ file accepted (bytes): one second of two channels
#: of 64-bit samples at 384 kHz is 6 MB; 16 MiB leaves room for headers and metadata.
MAX_EQ_IR_BYTES = 16 * 2**20


@dataclass(frozen=True)
class Band:
    """One parametric band."""

    type: str
    frequency: float
    gain_db: float = 0.0
    q: float = DEFAULT_Q

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: type, frequency, gain and Q (to six decimals)."""
        return {
            "type": self.type,
            "frequency": self.frequency,
            "gain_db": self.gain_db,
            "q": round(self.q, 6),
        }


def cookbook_biquad(band: Band, samplerate: float) -> NDArray[np.float64]:
    """One band as a second-order section ``[b0, b1, b2, 1, a1, a2]``.

    Formulas from R. Bristow-Johnson, *Cookbook formulae for audio EQ biquad filter
    coefficients*: ``A = 10^(gain/40)``, ``w0 = 2 pi f0 / fs``, ``alpha = sin(w0) / (2 Q)``
    (shelves use the same Q form). The bilinear transform is pre-warped at ``f0``, so the
    gain at ``f0`` is exact: the full gain for a peaking band, half of it (in dB) for a
    shelf, ``20 log10(Q)`` for the pass filters.
    """
    fs = float(samplerate)
    f0 = float(band.frequency)
    if not 0 < f0 < fs / 2:
        raise HeadphoneEqError(
            f"band frequency {shown(band.frequency)} Hz must lie between 0 and the Nyquist "
            f"frequency, {fs / 2:g} Hz, at {fs:g} Hz"
        )
    a = 10 ** (band.gain_db / 40)
    w0 = 2 * math.pi * f0 / fs
    cw, sw = math.cos(w0), math.sin(w0)
    alpha = sw / (2 * band.q)
    if band.type == "peaking":
        b = [1 + alpha * a, -2 * cw, 1 - alpha * a]
        den = [1 + alpha / a, -2 * cw, 1 - alpha / a]
    elif band.type == "low_shelf":
        r = 2 * math.sqrt(a) * alpha
        b = [
            a * ((a + 1) - (a - 1) * cw + r),
            2 * a * ((a - 1) - (a + 1) * cw),
            a * ((a + 1) - (a - 1) * cw - r),
        ]
        den = [
            (a + 1) + (a - 1) * cw + r,
            -2 * ((a - 1) + (a + 1) * cw),
            (a + 1) + (a - 1) * cw - r,
        ]
    elif band.type == "high_shelf":
        r = 2 * math.sqrt(a) * alpha
        b = [
            a * ((a + 1) + (a - 1) * cw + r),
            -2 * a * ((a - 1) + (a + 1) * cw),
            a * ((a + 1) + (a - 1) * cw - r),
        ]
        den = [(a + 1) - (a - 1) * cw + r, 2 * ((a - 1) - (a + 1) * cw), (a + 1) - (a - 1) * cw - r]
    elif band.type == "low_pass":
        b = [(1 - cw) / 2, 1 - cw, (1 - cw) / 2]
        den = [1 + alpha, -2 * cw, 1 - alpha]
    elif band.type == "high_pass":
        b = [(1 + cw) / 2, -(1 + cw), (1 + cw) / 2]
        den = [1 + alpha, -2 * cw, 1 - alpha]
    else:
        raise HeadphoneEqError(
            f"unknown band type {shown(band.type)}; choose one of {', '.join(BAND_TYPES)}"
        )
    return np.array([b[0], b[1], b[2], den[0], den[1], den[2]]) / den[0]


def bands_sos(bands: list[Band], samplerate: float) -> NDArray[np.float64]:
    """The cascade of bands as second-order sections, shape ``(len(bands), 6)``."""
    return np.array([cookbook_biquad(b, samplerate) for b in bands]).reshape(-1, 6)


def parse_bands(value: Any, *, source: str = "headphone EQ") -> tuple[list[Band], float]:
    """Bands and overall gain (dB) from parsed JSON: a list, or ``{"bands": [...], "gain_db"}``."""
    gain = 0.0
    if isinstance(value, dict):
        unknown = set(value) - {"bands", "gain_db", "name", "description"}
        if unknown:
            raise HeadphoneEqError(
                f"{source}: unknown key(s) {', '.join(sorted(map(repr, unknown)))}; "
                "expected 'bands', 'gain_db', 'name', 'description'"
            )
        gain = _number(value.get("gain_db", 0.0), f"{source}: gain_db")
        if abs(gain) > MAX_GAIN_DB:
            raise HeadphoneEqError(
                f"{source}: gain_db {shown(gain)} is outside +/-{MAX_GAIN_DB:g} dB"
            )
        value = value.get("bands")
    if not isinstance(value, list) or not value:
        raise HeadphoneEqError(
            f"{source}: expected a non-empty list of bands, got {type(value).__name__}"
        )
    if len(value) > MAX_BANDS:
        raise HeadphoneEqError(f"{source}: {len(value)} bands; at most {MAX_BANDS}")
    bands = []
    for i, item in enumerate(value):
        where = f"{source}: band {i + 1}"
        if not isinstance(item, dict):
            raise HeadphoneEqError(f"{where}: expected an object, got {shown(item)}")
        unknown = set(item) - {"type", "frequency", "gain_db", "q"}
        if unknown:
            raise HeadphoneEqError(
                f"{where}: unknown key(s) {', '.join(sorted(map(repr, unknown)))}; "
                "expected 'type', 'frequency', 'gain_db', 'q'"
            )
        kind = item.get("type")
        if kind not in BAND_TYPES:
            raise HeadphoneEqError(
                f"{where}: unknown type {shown(kind)}; choose one of {', '.join(BAND_TYPES)}"
            )
        freq = _number(item.get("frequency"), f"{where}: frequency")
        band_gain = _number(item.get("gain_db", 0.0), f"{where}: gain_db")
        q = _number(item.get("q", DEFAULT_Q), f"{where}: q")
        if freq <= 0:
            raise HeadphoneEqError(f"{where}: frequency must be positive, got {shown(freq)}")
        if abs(band_gain) > MAX_GAIN_DB:
            raise HeadphoneEqError(
                f"{where}: gain_db {shown(band_gain)} is outside +/-{MAX_GAIN_DB:g} dB"
            )
        if not Q_RANGE[0] <= q <= Q_RANGE[1]:
            raise HeadphoneEqError(
                f"{where}: q must be from {Q_RANGE[0]:g} to {Q_RANGE[1]:g}, got {shown(q)}"
            )
        bands.append(Band(kind, freq, band_gain, q))
    return bands, gain


def _number(value: Any, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise HeadphoneEqError(f"{what} must be a number, got {shown(value)}")
    return float(value)


@dataclass(frozen=True)
class HeadphoneEq:
    """A headphone compensation ready to apply at one rate.

    Attributes
    ----------
    ir : ndarray, shape (2, N)
        Left and right impulse responses at :attr:`samplerate`.
    samplerate : float
    kind : str
        ``"bands"`` or ``"impulse response"``.
    report : dict
        What the render report says about it (file name, hash, bands, taps).
    """

    ir: NDArray[np.float64]
    samplerate: float
    kind: str
    report: dict[str, Any]

    def filters(self) -> NDArray[np.float64]:
        """The EQ as a ``(2, 2, N)`` filter bank (each ear to itself) for the engine."""
        out = np.zeros((2, 2, self.ir.shape[-1]))
        out[0, 0] = self.ir[0]
        out[1, 1] = self.ir[1]
        return out


def bands_impulse_response(
    bands: list[Band], gain_db: float, samplerate: float
) -> NDArray[np.float64]:
    """Impulse response of the cascade, cut once it has decayed by :data:`IIR_DECAY_DB`."""
    signal = scipy_signal()

    sos = bands_sos(bands, samplerate)
    n_max = int(MAX_IR_SECONDS * samplerate)
    impulse = np.zeros(n_max)
    impulse[0] = 10 ** (gain_db / 20)
    h = signal.sosfilt(sos, impulse)
    energy = np.cumsum((h**2)[::-1])[::-1]  # energy from each sample to the end
    keep = int(np.searchsorted(-energy, -energy[0] * 10 ** (IIR_DECAY_DB / 10)))
    return cast(NDArray[np.float64], h[: max(keep, 64)])


def load_headphone_eq(
    value: str | os.PathLike[str] | list[Any] | dict[str, Any], samplerate: float
) -> HeadphoneEq:
    """A headphone EQ from a JSON or audio file, or from an already parsed band list."""
    if isinstance(value, (list, dict)):
        bands, gain = parse_bands(value, source="headphone_eq")
        text = json.dumps(value, sort_keys=True).encode()
        return _from_bands(
            bands, gain, samplerate, {"file": None, "sha256": hashlib.sha256(text).hexdigest()}
        )
    path = Path(os.fspath(value))
    # Checked before it is read: a regular file (not /dev/zero or a pipe) of bounded size.
    limit = MAX_EQ_JSON_BYTES if path.suffix.lower() == ".json" else MAX_EQ_IR_BYTES
    raw = read_bytes_bounded(path, kind="headphone EQ", max_bytes=limit, error=HeadphoneEqError)
    digest = hashlib.sha256(raw).hexdigest()
    meta = {"file": path.name, "sha256": digest}
    if path.suffix.lower() == ".json":
        try:
            parsed = json.loads(raw.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise HeadphoneEqError(f"headphone EQ {path.name!r} is not valid JSON: {exc}") from None
        bands, gain = parse_bands(parsed, source=path.name)
        return _from_bands(bands, gain, samplerate, meta)
    return _from_audio(path, samplerate, meta)


def _from_bands(
    bands: list[Band], gain: float, samplerate: float, meta: dict[str, Any]
) -> HeadphoneEq:
    h = bands_impulse_response(bands, gain, samplerate)
    return HeadphoneEq(
        np.stack([h, h]),
        float(samplerate),
        "bands",
        {
            **meta,
            "kind": "bands",
            "gain_db": gain,
            "bands": [b.to_dict() for b in bands],
            "taps": len(h),
        },
    )


def _from_audio(path: Path, samplerate: float, meta: dict[str, Any]) -> HeadphoneEq:
    signal = scipy_signal()

    from ..errors import AudioError
    from ..io import read_audio  # soundfile stays behind audio_io

    try:
        data, rate = read_audio(path)
    except AudioError as exc:
        raise HeadphoneEqError(
            f"headphone EQ {path.name!r} is neither a JSON band list nor a readable impulse "
            f"response: {exc}"
        ) from None
    if data.shape[1] not in (1, 2):
        raise HeadphoneEqError(
            f"headphone EQ impulse response {path.name!r} has {data.shape[1]} channels; "
            "give one (both ears) or two (left, right)"
        )
    ir = np.asarray(data.T, dtype=np.float64)
    if rate != samplerate:
        ratio = Fraction(samplerate / rate).limit_denominator(10000)
        # Scale by old rate / new rate so the frequency response, not the waveform, is kept.
        # Lead zeros first: resample_poly aligns output and input starts, which would cut
        # off the interpolation's pre-ringing of an IR that starts at its first sample.
        lead = np.zeros((ir.shape[0], RESAMPLE_LEAD))
        ir = signal.resample_poly(
            np.concatenate([lead, ir], axis=1), ratio.numerator, ratio.denominator, axis=-1
        ) * (rate / samplerate)
    if ir.shape[-1] > MAX_IR_SECONDS * samplerate:
        raise HeadphoneEqError(
            f"headphone EQ impulse response {path.name!r} is {ir.shape[-1] / samplerate:.2f} s "
            f"long; at most {MAX_IR_SECONDS:g} s"
        )
    if not np.any(ir):
        raise HeadphoneEqError(f"headphone EQ impulse response {path.name!r} is silent")
    if ir.shape[0] == 1:
        ir = np.concatenate([ir, ir])
    return HeadphoneEq(
        ir,
        float(samplerate),
        "impulse response",
        {
            **meta,
            "kind": "impulse response",
            "source_samplerate": rate,
            "channels": int(data.shape[1]),
            "taps": int(ir.shape[-1]),
        },
    )
