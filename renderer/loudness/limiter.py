"""A look-ahead true-peak limiter that keeps a render under its ceiling.

The gain is computed from the same interpolated peaks the true-peak meter reads
(:class:`earfold.renderer.loudness.PeakInterpolator`), applied identically to every channel (so
a binaural image does not move), and checked: the limited signal is interpolated again
before it leaves, and wherever a point still reads above the ceiling the gain there is
lowered and recomputed. The output is time-aligned with the input and exactly as long.

How the gain is made, per input frame ``n`` (``E = 11`` frames of interpolator history,
``L`` the look-ahead in frames):

1. A point ``q`` (the interpolated values whose newest sample is ``q``, and the sample
   itself) needs every sample of its window ``q - E .. q`` scaled by at most
   ``target / peak(q)``. Each sample takes the strictest need of the points it is in.
2. That need is held (running minimum of the gain) over the next ``L + E`` frames, and
   released exponentially (in dB) with the release time constant.
3. The held gain is averaged over the last ``L`` frames: a smooth ramp down over the
   look-ahead (no click), and since every frame of the averaging window holds the need
   of frame ``n``, the average never exceeds it. The extra ``E`` frames of hold make the
   gain flat over the window of the point that set it.
4. The product is interpolated again, in float32 as it will be written; a point still
   above ``ceiling - 0.02 dB`` lowers the need of its window's samples in proportion,
   and steps 2-4 run again. Thanks to the flat hold of step 3 no test signal has needed
   this (the tests force it to check it works). After :data:`_NORMAL_PASSES` passes the
   windows of points still over are muted outright, which always terminates.

All of this runs in fixed steps of :data:`_STEP` frames counted from the start of the
stream, whatever block sizes the caller uses, so a stream limited block by block is
bit-identical to the same signal limited in one block.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..blocks import check_block
from ..defaults import TRUE_PEAK_RANGE_DBTP
from ..errors import AudioError, shown
from ._gain_curve import gain_curve, quantise
from ._levels import check_channels, check_range
from ._true_peak import PeakInterpolator

__all__ = [
    "DEFAULT_CEILING_DBTP",
    "DEFAULT_LOOKAHEAD_MS",
    "DEFAULT_RELEASE_MS",
    "TARGET_MARGIN_DB",
    "TruePeakLimiter",
]

DEFAULT_CEILING_DBTP = -1.0
"""Default ceiling in dBTP (EBU R 128's maximum true peak for production; common
practice for delivery)."""

DEFAULT_LOOKAHEAD_MS = 5.0
"""Look-ahead, which is also the attack ramp. 5 ms keeps the gain's movement below about
200 Hz (1 / 5 ms), so a limited transient is turned down rather than clicked or
splattered, yet the reduction stays confined to the peak (common practice for
true-peak limiters: 1 to 10 ms)."""

DEFAULT_RELEASE_MS = 100.0
"""Release time constant (dB decay by 1/e). Fast enough that an isolated over leaves no
audible hole, slow enough that the gain does not follow the waveform of low bass (a
40 Hz cycle lasts 25 ms), which would distort it (common practice: 50 to 500 ms)."""

TARGET_MARGIN_DB = 0.05
"""The gain aims this far below the ceiling, so that rounding to the output format and
PCM_16 dither (under 0.001 dB at -1 dBTP) cannot cross it."""

_CHECK_MARGIN_DB = 0.02
# Points above ceiling - 0.02 dB after limiting are corrected. Between the target (-0.05)
# and this nothing is done: such points are safe, and correcting them would only add
# passes.

_CORRECTION_AIM = 10.0 ** (-0.01 / 20.0)
# A correction aims at the target, or 0.01 dB under the check level should that be lower,
# so that a corrected point is never left at the check level itself.

_STEP = 8192
# Frames per processing step. Each step recomputes the gain over the frames not yet
# emitted (the look-ahead plus the lag below) and one step's new frames, so larger steps
# mean less recomputation but more delay inside the limiter.

_BYPASS_MARGIN = 1e-5
# A known true peak at most target * (1 - 1e-5) (0.0001 dB under) lets the limiter pass
# its input through: the input's own points differ from the known value times a gain by
# float32 rounding (about 1e-7 relative), a hundred times less.

_NORMAL_PASSES = 8
_MAX_PASSES = 64


class TruePeakLimiter:
    """Streaming, channel-linked, look-ahead true-peak limiter.

    Parameters
    ----------
    samplerate : int
        Sample rate in Hz.
    channels : int
        Channels per frame; all share one gain.
    ceiling_dbtp : float
        Ceiling in dBTP, within :data:`~earfold.renderer.defaults.TRUE_PEAK_RANGE_DBTP`.
        The output's true peak (4x oversampled,
        :class:`~earfold.renderer.loudness.TruePeakMeter`) does not exceed it; the gain
        aims :data:`TARGET_MARGIN_DB` below.
    lookahead_ms : float
        Look-ahead and attack ramp, 0.5 to 50 ms (:data:`DEFAULT_LOOKAHEAD_MS`).
    release_ms : float
        Release time constant, 1 to 5000 ms (:data:`DEFAULT_RELEASE_MS`).
    known_true_peak : float, optional
        The input's true peak (linear), measured in advance with the same interpolation
        (:class:`earfold.renderer.loudness.TruePeakMeter`), e.g. while the input was being made,
        times any gain applied since. When it is clearly under the target (by
        :data:`_BYPASS_MARGIN`, far more than float32 rounding of the gain) no point can
        need a gain, so the limiter would pass every frame unchanged: it then does so at
        once, without interpolating (:meth:`process` returns a float32 block itself, not
        a copy), and both true peaks report this value. Otherwise it is ignored and the
        limiter works as without it.

    Attributes
    ----------
    max_gain_reduction_db : float
        Largest reduction applied so far, in dB (0 if none).
    samples_limited : int
        Frames emitted so far with a gain below 1 (ramps and release included).
    corrections : int
        Checking passes that had to lower the gain again (diagnostic).
    bypassed : bool
        True when ``known_true_peak`` showed there is nothing to limit.
    input_true_peak, output_true_peak : float
        True peaks (linear) of the input received and of the output emitted so far, as
        :class:`earfold.renderer.loudness.TruePeakMeter` reads them; after :meth:`flush` they
        include the interpolation past the end. Both come from the interpolation the
        limiter does anyway, so a caller need not meter either again.
    latency : int
        Frames held inside; :meth:`process` returns fewer frames than it is given until
        the pipeline is full, and :meth:`flush` returns the rest.

    Notes
    -----
    :meth:`process` returns the frames that are final (possibly none, early on); the
    concatenation of everything it returned and :meth:`flush` is exactly as long as the
    input and aligned with it: output frame ``i`` is input frame ``i`` times the gain.
    Signals whose true peak stays below the target pass bit-identically.
    """

    def __init__(
        self,
        samplerate: int,
        channels: int,
        ceiling_dbtp: float = DEFAULT_CEILING_DBTP,
        lookahead_ms: float = DEFAULT_LOOKAHEAD_MS,
        release_ms: float = DEFAULT_RELEASE_MS,
        known_true_peak: float | None = None,
    ) -> None:
        if (
            isinstance(samplerate, bool)
            or not isinstance(samplerate, (int, np.integer))
            or not 8000 <= samplerate <= 768000
        ):
            raise AudioError(
                f"sample rate must be an integer from 8000 to 768000 Hz, not {shown(samplerate)}"
            )
        check_channels(channels)
        check_range("ceiling_dbtp", ceiling_dbtp, *TRUE_PEAK_RANGE_DBTP, "dBTP")
        check_range("lookahead_ms", lookahead_ms, 0.5, 50.0, "ms")
        check_range("release_ms", release_ms, 1.0, 5000.0, "ms")
        self.samplerate = int(samplerate)
        self.channels = int(channels)
        self.ceiling_dbtp = float(ceiling_dbtp)
        self.lookahead_ms = float(lookahead_ms)
        self.release_ms = float(release_ms)

        self._interp = PeakInterpolator(self.samplerate)
        e = self._interp.history
        lookahead = max(1, int(round(self.lookahead_ms * 1e-3 * self.samplerate)))
        self._E = e
        self._L = lookahead
        self._reach = lookahead - 1 + 2 * e  # the gain of frame n needs points up to n + reach
        # Emission lags the checked points by two back-spreads of a correction (a lowered
        # need at q moves the gain from q - L - 2E on), so corrections never reach frames
        # already emitted.
        self._lag = 2 * (lookahead + 2 * e)
        self.latency = self._lag + self._reach
        ceiling = 10.0 ** (self.ceiling_dbtp / 20.0)
        self._target = ceiling * 10.0 ** (-TARGET_MARGIN_DB / 20.0)
        self._check = ceiling * 10.0 ** (-_CHECK_MARGIN_DB / 20.0)
        self._lambda = 1.0 / (self.release_ms * 1e-3 * self.samplerate)  # log decay per frame

        c = self.channels
        self._x = np.zeros((e, c))  # input frames [emitted - E, received)
        self._p = np.zeros(0)  # point peaks for [emitted, received)
        self._f = np.ones(0)  # extra gain limits from corrections, same frames
        self._t = np.zeros(0)  # threshold each point of _p was computed with, same frames
        self._in_peak = 0.0
        self._out_peak = 0.0
        self._emitted = 0
        self._received = 0
        self._steps = 0
        self._r_prev = 0.0
        self._u_hist = np.zeros(lookahead - 1, dtype=np.int64)
        self._z_hist = np.zeros((e, c), dtype=np.float32)
        self._flushed = False
        # Frames whose point is above the target, in order (only those not yet emitted),
        # and the end of the frames whose extra limits (_f) a correction may have lowered:
        # the idle test of a step needs only these, not a scan of its arrays.
        self._overs = np.zeros(0, dtype=np.int64)
        self._f_lowered_until = 0
        self.max_gain_reduction_db = 0.0
        self.samples_limited = 0
        self.corrections = 0
        self.bypassed = False
        if known_true_peak is not None:
            known = float(known_true_peak)
            if not math.isfinite(known) or known < 0.0:
                raise AudioError(
                    f"known_true_peak must be a finite level >= 0, not {shown(known_true_peak)}"
                )
            if known <= self._target * (1.0 - _BYPASS_MARGIN):
                self.bypassed = True
                self.latency = 0
                self._in_peak = self._out_peak = known

    # ------------------------------------------------------------------------ public

    def process(self, block: NDArray[np.floating[Any]]) -> NDArray[np.float32]:
        """Feed a ``(n, channels)`` float block; return the frames now final (float32)."""
        if self._flushed:
            raise AudioError("the limiter was flushed; create a new one for another stream")
        x = check_block(block, self.channels)
        if x.shape[0] and not np.all(np.isfinite(x)):
            raise AudioError("the block holds NaN or infinity")
        if self.bypassed:
            self._received += x.shape[0]
            self._emitted = self._received
            return np.asarray(x, dtype=np.float32)  # a float32 block itself, uncopied
        self._append(x)
        out = []
        while self._received >= (self._steps + 1) * _STEP + self._reach:
            out.append(self._step((self._steps + 1) * _STEP, final=False))
            self._steps += 1
        return _join(out, self.channels)

    def flush(self) -> NDArray[np.float32]:
        """Return the remaining frames (float32); the limiter is finished afterwards."""
        if self._flushed:
            return np.zeros((0, self.channels), dtype=np.float32)
        self._flushed = True
        if self.bypassed:
            return np.zeros((0, self.channels), dtype=np.float32)
        end = self._received
        e = self._E
        # The points around the last frames read the silence after the end, as a meter
        # does; points further on read nothing.
        if e:
            tail = np.zeros((e, self.channels))
            threshold = min(self._target, self._in_peak)
            peaks = self._interp.point_peaks(tail, threshold=threshold, context=self._x[-e:])
            self._in_peak = max(self._in_peak, float(peaks.max()))
            self._note_overs(peaks, end)
            self._p = np.concatenate([self._p, peaks])
            self._t = np.concatenate([self._t, np.full(e, threshold)])
            self._x = np.concatenate([self._x, tail])
            self._f = np.concatenate([self._f, np.ones(e)])
        last = end + e
        pad = self._reach + self._L + e
        self._p = np.concatenate([self._p, np.zeros(pad)])
        self._t = np.concatenate([self._t, np.zeros(pad)])
        self._f = np.concatenate([self._f, np.ones(pad)])
        out = []
        while True:
            checked = min((self._steps + 1) * _STEP, last)
            out.append(self._step(checked, final=checked == last, end=end))
            self._steps += 1
            if checked == last:
                break
        return _join(out, self.channels)

    # ---------------------------------------------------------------------- internals

    def _append(self, block: NDArray[np.floating[Any]]) -> None:
        if block.shape[0] == 0:
            return
        x = block.astype(np.float64)
        e = self._E
        # The gain needs every point above the target exactly; the input's true peak
        # needs those above its running maximum (a meter's rule, seeded with the sample
        # peak): one interpolation serves both.
        self._in_peak = max(self._in_peak, float(x.max()), -float(x.min()))
        threshold = min(self._target, self._in_peak)
        # float32 is ample for the peaks (errors near 1e-7 against margins of 1e-3) and
        # twice as fast.
        peaks = self._interp.point_peaks(
            block.astype(np.float32, copy=False),
            threshold=threshold,
            context=self._x[-e:] if e else None,
        )
        self._in_peak = max(self._in_peak, float(peaks.max()))
        self._note_overs(peaks, self._received)
        self._x = np.concatenate([self._x, x])
        self._p = np.concatenate([self._p, peaks])
        self._t = np.concatenate([self._t, np.full(x.shape[0], threshold)])
        self._f = np.concatenate([self._f, np.ones(x.shape[0])])
        self._received += x.shape[0]

    def _note_overs(self, peaks: NDArray[np.float64], first: int) -> None:
        """Record the frames (``first`` + index) of points above the target."""
        over = np.flatnonzero(peaks > self._target)
        if over.size:
            self._overs = np.concatenate([self._overs, over + first])

    def _step(self, checked: int, final: bool, end: int | None = None) -> NDArray[np.float32]:
        """Settle the gain of frames [emitted, checked) and emit what can no longer change."""
        start = self._emitted
        m = checked - start
        e, lookahead = self._E, self._L
        x = self._x[e : e + m]  # input frames [start, checked)
        p = self._p[: m + self._reach]
        stop = end if final and end is not None else max(start, checked - self._lag)

        # Points at or under the target need no gain (they may read lower, or 0). A step
        # is idle when none of its points is over, no release or ramp is running and no
        # correction lowered a limit in its window: then its gain is exactly 1, which the
        # general path below would compute too, only slower.
        first_over = int(np.searchsorted(self._overs, start))
        idle = (
            (first_over == self._overs.size or self._overs[first_over] >= start + p.size)
            and start >= self._f_lowered_until
            and self._r_prev == 0.0
            and not np.any(self._u_hist)
            and np.array_equal(self._z_hist, self._x[:e])
        )
        if idle:
            return self._pass_idle(x, p, start, stop, final)

        f = self._f[: m + lookahead - 1 + e].copy()
        for passes in range(_MAX_PASSES):
            g, r, u, held0 = self._gain(p, f, m)
            # Checked as it will be written: in float32.
            z = (x * g[:, None]).astype(np.float32)
            # Exact above the output's running peak too, for output_true_peak.
            peaks = self._interp.point_peaks(
                z, threshold=min(self._check, self._out_peak), context=self._z_hist if e else None
            )
            over = np.flatnonzero(peaks > self._check)
            if over.size == 0:
                break
            self.corrections += 1
            # Lower the limit of every sample in the window of each point still
            # over, in proportion to its excess (last resort: mute the windows).
            aim = min(self._target, self._check * _CORRECTION_AIM)
            scale = aim / peaks[over] if passes < _NORMAL_PASSES else np.zeros(over.size)
            for d in range(e + 1):
                j = over - d
                ok = j >= 0
                np.minimum.at(f, j[ok], g[j[ok]] * scale[ok])
            self._f_lowered_until = max(self._f_lowered_until, start + f.size)
        self._f[: f.size] = f

        count = stop - start
        # Points of the frames emitted now are final (and at the end, those past it).
        k = m if final else max(count, 0)
        if k:
            self._track_output(z[:k], peaks[:k], p[:k], self._t[:k])
        if count <= 0:
            return np.zeros((0, self.channels), dtype=np.float32)
        out = z[:count]
        gains = g[:count]
        limited = gains < 1.0
        if np.any(limited):
            self.samples_limited += int(np.count_nonzero(limited))
            lowest = max(float(gains.min()), 1e-15)  # a muted window counts as 300 dB
            self.max_gain_reduction_db = max(self.max_gain_reduction_db, -20.0 * math.log10(lowest))
        # Carry the state of the frames emitted into the next step.
        self._r_prev = float(r[count - 1])
        if lookahead > 1:
            if start == 0:
                self._u_hist = np.full(lookahead - 1, quantise(held0)[0])
            self._u_hist = np.concatenate([self._u_hist, u])[count : count + lookahead - 1]
        self._advance(z, count, stop)
        return out

    def _pass_idle(
        self,
        x: NDArray[np.float64],
        p: NDArray[np.float64],
        start: int,
        stop: int,
        final: bool,
    ) -> NDArray[np.float32]:
        """Emit an idle step's frames as they are (gain 1; the state stays at rest)."""
        count = stop - start
        k = x.shape[0] if final else max(count, 0)
        z = x[:k].astype(np.float32)
        if k:
            self._track_output(z, None, p[:k], self._t[:k])
        if count <= 0:
            return np.zeros((0, self.channels), dtype=np.float32)
        # The release, the ramp history (all 0) and the counters do not change.
        self._advance(z, count, stop)
        return z[:count]

    def _advance(self, z: NDArray[np.float32], count: int, stop: int) -> None:
        """Drop the ``count`` frames emitted (output ``z`` starts with them)."""
        e = self._E
        if e:
            if count >= e:
                self._z_hist = z[count - e : count].copy()
            else:
                self._z_hist = np.concatenate([self._z_hist, z[:count]])[count : count + e]
        self._x = self._x[count:]
        self._p = self._p[count:]
        self._f = self._f[count:]
        self._t = self._t[count:]
        self._overs = self._overs[np.searchsorted(self._overs, stop) :]
        self._emitted = stop

    def _track_output(
        self,
        z: NDArray[np.float32],
        checked: NDArray[np.float64] | None,
        p: NDArray[np.float64],
        t: NDArray[np.float64],
    ) -> None:
        """Raise the output's running true peak with the final points of ``z``.

        ``checked`` holds the points of a step that was checked (exact above the running
        peak). An idle step passes its input unchanged, so its points are the input's,
        exact above the thresholds ``t`` they were computed with; where a threshold is
        above the running peak they are computed again, like a meter would.
        """
        self._out_peak = max(self._out_peak, float(z.max()), -float(z.min()))
        if checked is None:
            if float(t.max()) <= self._out_peak:
                checked = p
            else:
                e = self._E
                checked = self._interp.point_peaks(
                    z, threshold=self._out_peak, context=self._z_hist if e else None
                )
        self._out_peak = max(self._out_peak, float(checked.max()))

    @property
    def input_true_peak(self) -> float:
        """True peak of the input so far (linear); see the class attributes."""
        return self._in_peak

    @property
    def output_true_peak(self) -> float:
        """True peak of the output so far (linear); see the class attributes."""
        return self._out_peak

    def _gain(
        self, p: NDArray[np.float64], f: NDArray[np.float64], m: int
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.int64], NDArray[np.float64]]:
        """Gain of the frames [emitted, emitted + m) from point peaks and extra limits."""
        return gain_curve(
            p,
            f,
            m,
            history=self._E,
            lookahead=self._L,
            target=self._target,
            release_per_frame=self._lambda,
            previous_release=self._r_prev,
            ramp_history=None if self._emitted == 0 else self._u_hist,
        )


def _join(parts: list[NDArray[np.float32]], channels: int) -> NDArray[np.float32]:
    parts = [p for p in parts if p.shape[0]]
    if not parts:
        return np.zeros((0, channels), dtype=np.float32)
    return parts[0] if len(parts) == 1 else np.concatenate(parts)
