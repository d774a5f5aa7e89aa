"""Streaming binaural convolution: C loudspeaker channels into two ears.

:class:`BinauralConvolver` convolves a stream of ``frames x C`` blocks with one filter per
(channel, ear) and sums the products into two ears, in bounded memory. It uses uniformly
partitioned overlap-save convolution with a frequency-domain delay line (FDL):

* the filters ``(C, 2, L)`` are cut into ``P = ceil(L / K)`` partitions of ``K`` samples,
  each zero-padded to ``N`` and transformed once, giving ``H`` of shape
  ``(P, C, 2, N / 2 + 1)``;
* for each hop of ``S`` new frames, the last ``N`` input samples of every channel are
  transformed once and the spectrum is pushed into the FDL, which holds the spectra of the
  last ``P`` hops;
* each ear's spectrum is ``Y[e] = sum_p sum_c X[p, c] * H[p, c, e]``; two inverse transforms
  give ``N`` samples per ear, of which the last ``S`` are free of circular wrap-around and
  are the output (overlap-save, ``S <= N - K + 1``).

``K``, ``S`` and ``N`` come from a cost model (:func:`choose_transform`): a filter that
fits one transform is one partition (``K = L``) and each transform keeps ``N - L + 1``
frames, instead of half of a ``2B``-point transform; long filters are cut into uniform
partitions with ``S = K`` and ``N = 2K``.

References: A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, overlap-save
block convolution; F. Wefers, *Partitioned convolution algorithms for real-time auralization*
(Logos, 2015), uniformly partitioned overlap-save with a frequency-domain delay line.

The engine's state is bounded by the filter length and the block size, never by the length
of the stream. :func:`convolve_reference` is the whole-signal oracle and the benchmark's
baseline.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from ..errors import AudioError, HrirError

__all__ = [
    "DEFAULT_BLOCK_SIZE",
    "MIN_BLOCK_SIZE",
    "MAX_BLOCK_SIZE",
    "BinauralConvolver",
    "TransformPlan",
    "choose_transform",
    "convolve_reference",
]

#: Default number of frames per block of the stream (reads, writes, the tail's blocks).
#:
#: The engine's own transforms no longer follow it: :func:`choose_transform` picks them
#: (for the HRIR filters, one partition and transforms of about 17,000 points keeping
#: 12,000-16,700 frames each, where the table below had transforms of 2B keeping B).
#: The block was chosen when it was also the transform's unit, by measurement: 12
#: channels, 48 kHz, 60 s of noise, engine alone (no file I/O), 2 shared cores,
#: milliseconds of compute per second of audio, two runs (best of two each):
#:
#: ========  ==========  ==========  ===========  ==========  ==========
#: L         B = 1024    2048        4096         8192        16384
#: ========  ==========  ==========  ===========  ==========  ==========
#: 512       5.3 - 5.7   4.8 - 6.0   4.8 - 6.2    4.7 - 5.0   6.2 - 7.1
#: 4096      8.3         6.1 - 6.5   5.1 - 5.6    5.0 - 5.6   5.8 - 6.7
#: ========  ==========  ==========  ===========  ==========  ==========
#:
#: (the whole-signal ``scipy.signal.oaconvolve`` baseline: 39-42 and 53-54 ms/s). With short
#: filters every B up to 8192 is within the run-to-run noise; with 4096 taps small blocks pay
#: for more partitions and more Python-level calls, and B = 16384 is slower again (bigger
#: transforms, larger working set, twice the state). 8192 is at the floor for both lengths,
#: and the render pipeline reads and writes in blocks of this size. Latency does not
#: enter: the engine adds none, and renders are offline. (scipy.fft's ``workers=-1`` was
#: slower on 2 shared cores, 7-20 ms/s, so the transforms run single-threaded.)
DEFAULT_BLOCK_SIZE = 8192

#: Smallest allowed block size. Below this the per-call overhead of numpy dominates.
MIN_BLOCK_SIZE = 64

#: Largest allowed block size (2**20 frames, about 22 s at 48 kHz); larger only costs memory.
MAX_BLOCK_SIZE = 1 << 20

#: Real arrays the engine takes (audio blocks, filters): any float or integer dtype.
RealArray = NDArray[np.floating[Any] | np.integer[Any]]

#: What the engine gives back: its working precision, float32 (default) or float64.
FloatArray = NDArray[np.floating[Any]]

_DTYPES: dict[np.dtype[Any], np.dtype[Any]] = {
    np.dtype(np.float32): np.dtype(np.complex64),
    np.dtype(np.float64): np.dtype(np.complex128),
}


@dataclass(frozen=True)
class TransformPlan:
    """How the engine cuts its filters and its input: ``hop`` new frames per transform of
    ``size`` points, filters cut into partitions of ``partition`` taps.

    Overlap-save keeps ``size - partition + 1`` outputs per transform, so ``hop`` is at
    most that. With more than one partition the frequency-domain delay line delays
    partition ``p`` by ``p`` hops, which must be its ``p * partition`` taps: then
    ``hop == partition``.
    """

    hop: int
    partition: int
    size: int

    @classmethod
    def uniform(cls, block: int) -> TransformPlan:
        """Partitions of ``block`` taps, a hop of ``block`` frames, transforms of ``2 * block``."""
        return cls(hop=block, partition=block, size=2 * block)

    def partitions(self, length: int) -> int:
        """Partitions a filter of ``length`` taps needs."""
        return -(-length // self.partition)

    def cost(self, length: int, channels: int) -> float:
        """Modelled seconds per output frame (see :func:`choose_transform`)."""
        n = self.size
        bins = n // 2 + 1
        fft = _FFT_SECONDS * n * math.log2(n)
        mac = _MAC_SECONDS * bins * 2 * channels * self.partitions(length)
        # The spectra of one hop (C inputs, 2 ears, complex64) out of the cache: every
        # pass over them costs more per point.
        slow = _OUT_OF_CACHE if (channels + 2) * bins * 8 > _CACHE_BYTES else 1.0
        return (slow * ((channels + 2) * fft + mac) + _HOP_SECONDS) / self.hop


# The cost model's constants, measured with scipy.fft on float32 (2 shared cores, best of
# five): a real transform of N points costs about 0.13 ns * N log2 N and a complex64
# product with its share of the tree sum about 0.6 ns per bin, while one hop's spectra
# stay in the cache (about 1 MB here); past that the whole engine, timed on 12 channels
# and 30 s of noise, cost 1.3-1.6 times as much per frame (600 taps: 2.6 ms per second
# of audio at N = 16384, 2.8 at 24576, 3.3 at 32768-65536, against 4.4 for the 2B =
# 16384 transforms keeping B = 8192). Each hop costs about 40 us of Python calls.
_FFT_SECONDS = 0.13e-9
_MAC_SECONDS = 0.6e-9
_CACHE_BYTES = 1 << 20
_OUT_OF_CACHE = 1.6
_HOP_SECONDS = 40e-6
#: Largest transform the model considers (2**18 points: 1 MB per channel in float32).
_MAX_TRANSFORM = 1 << 18


def choose_transform(length: int, channels: int, block_size: int) -> TransformPlan:
    """The transform plan with the least modelled cost per output frame.

    Candidates, after Wefers (*Partitioned convolution algorithms for real-time
    auralization*, 2015, ch. 5, the cost of uniformly partitioned overlap-save):

    * one partition holding the whole filter, transforms of ``N`` points for ``N`` among
      scipy's fast sizes (:func:`scipy.fft.next_fast_len`) of ``k * B / 4 + L - 1``,
      keeping ``N - L + 1`` frames per transform (``k`` = 1 .. 64, ``N <= 2**18``);
    * uniform partitions of ``K`` taps (a power of two from 64, at most
      ``max(block_size, 2**16)``), transforms of ``2K`` points: the long filters' choice,
      where one transform of the whole filter would be too large.

    The cost per output frame is ``((C + 2) F(N) + 2 C P M(N) + O) / hop``: ``C`` forward
    and two inverse real transforms, ``2 C P`` spectral products of ``N / 2 + 1`` bins and
    a fixed cost per hop, with the measured constants above.

    Examples
    --------
    >>> plan = choose_transform(4800, 12, 8192)
    >>> plan.partitions(4800), plan.hop == plan.size - 4800 + 1, plan.hop > 8192
    (1, True, True)
    >>> choose_transform(1000, 12, 64).cost(1000, 12) < TransformPlan.uniform(64).cost(1000, 12)
    True
    """
    candidates: list[TransformPlan] = []
    step = max(block_size // 4, 1)
    for k in range(1, 65):
        n = int(scipy.fft.next_fast_len(k * step + length - 1, real=True))
        if n > _MAX_TRANSFORM and candidates:
            break
        candidates.append(TransformPlan(hop=n - length + 1, partition=length, size=n))
    part = MIN_BLOCK_SIZE
    while part <= max(block_size, 1 << 16) and part < length:
        candidates.append(TransformPlan.uniform(part))
        part *= 2
    return min(candidates, key=lambda plan: plan.cost(length, channels))


def _check_filters(filters: RealArray) -> RealArray:
    arr = np.asarray(filters)
    if arr.dtype.kind not in "fiu":
        raise HrirError(
            f"filters must be real numbers, got dtype {arr.dtype.name!r}; "
            "expected float32 or float64 of shape (channels, 2, taps)"
        )
    if arr.ndim != 3 or arr.shape[1] != 2 or arr.shape[0] < 1 or arr.shape[2] < 1:
        raise HrirError(
            f"filters must have shape (channels, 2, taps) with channels >= 1 and taps >= 1, "
            f"got shape {arr.shape!r}"
        )
    if not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        raise HrirError(
            f"filters contain non-finite values (NaN or infinity), first at "
            f"[channel, ear, tap] = {tuple(int(i) for i in bad)!r}"
        )
    return arr


class BinauralConvolver:
    """Streaming convolution of C channels with per-ear filters, summed into 2 ears.

    Parameters
    ----------
    filters : numpy.ndarray
        Filters of shape ``(C, 2, L)``: ``filters[c, e]`` is the impulse response from
        input channel ``c`` to ear ``e`` (0 left, 1 right).
    block_size : int, optional
        The block ``B`` of the stream in frames (the size of the tail's blocks from
        :meth:`flush`, and the unit of the transform sizes tried): a power of two from
        :data:`MIN_BLOCK_SIZE` to :data:`MAX_BLOCK_SIZE`. See :data:`DEFAULT_BLOCK_SIZE`.
    dtype : numpy dtype, optional
        Working precision, ``float32`` (default; spectra in complex64) or ``float64``.
        Output blocks have this dtype.
    plan : TransformPlan, optional
        Hop, partition and transform size; by default the cheapest by the cost model of
        :func:`choose_transform`. ``TransformPlan.uniform(B)`` gives the classic
        ``2B``-point transforms keeping ``B`` frames each.

    Notes
    -----
    Frames out per call: :meth:`process` returns exactly as many frames as it was given,
    aligned with them (output frame ``t`` is ``sum_c sum_k x_c[t - k] h_c[k]`` and depends
    only on input frames ``<= t``); :attr:`latency` is 0. Calls may pass any number of frames;
    the engine buffers them into hops of :attr:`hop` frames. Whole hops, starting on a
    hop boundary, take the fast path (one forward transform per channel, one
    multiply-accumulate over all partitions, two inverse transforms). A call that leaves a
    block part-filled is still exact: the missing future frames are taken as zeros, which
    do not affect the frames already present; the contribution of the earlier blocks is
    computed once per block and kept, so each further part-block call costs only the first
    partition's product and the transforms.

    After the last input, :meth:`flush` yields the remaining ``L - 1`` frames of the tail, so
    the whole output is ``input + L - 1`` frames long, and leaves the engine reset.
    Callers that want only the fast path feed whole hops (:class:`FoldEngine` does).

    References
    ----------
    Uniformly partitioned overlap-save convolution with a frequency-domain delay line:
    F. Wefers, *Partitioned convolution algorithms for real-time auralization* (2015).

    Examples
    --------
    Two channels, each with a three-tap filter per ear, streamed in uneven blocks; the
    output equals the whole-signal convolution:

    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> filters = rng.standard_normal((2, 2, 3))
    >>> x = rng.standard_normal((200, 2)).astype(np.float32)
    >>> engine = BinauralConvolver(filters, block_size=64)
    >>> y = np.concatenate([engine.process(x[:70]), engine.process(x[70:]), *engine.flush()])
    >>> y.shape, y.dtype
    ((202, 2), dtype('float32'))
    >>> bool(np.allclose(y, convolve_reference(x, filters), atol=1e-5))
    True
    """

    def __init__(
        self,
        filters: RealArray,
        block_size: int = DEFAULT_BLOCK_SIZE,
        *,
        dtype: np.dtype | type = np.float32,
        plan: TransformPlan | None = None,
    ) -> None:
        arr = _check_filters(filters)
        if (
            isinstance(block_size, bool)
            or not isinstance(block_size, (int, np.integer))
            or not MIN_BLOCK_SIZE <= block_size <= MAX_BLOCK_SIZE
            or block_size & (block_size - 1)
        ):
            raise AudioError(
                f"block_size must be a power of two from {MIN_BLOCK_SIZE} to "
                f"{MAX_BLOCK_SIZE} frames, got {block_size!r}"
            )
        try:
            real = None if dtype is None else np.dtype(dtype)
        except TypeError:
            real = None
        if real is None or real not in _DTYPES:
            raise AudioError(f"dtype must be one of 'float32', 'float64', got {dtype!r}")

        channels, _, length = arr.shape
        if plan is None:
            plan = choose_transform(length, channels, int(block_size))
        parts = plan.partitions(length)
        if (
            plan.hop < 1
            or plan.size < plan.hop + plan.partition - 1
            or (parts > 1 and plan.hop != plan.partition)
        ):
            raise AudioError(
                f"transform plan {plan!r} does not fit filters of {length} taps: the size "
                "must hold a hop and a partition, and several partitions need hop == partition"
            )
        b = plan.hop
        n = plan.size
        self.channels: int = channels
        self.block_size: int = int(block_size)
        self.plan: TransformPlan = plan
        self.hop: int = b
        self.transform_size: int = n
        self.filter_length: int = length
        self.partitions: int = parts
        self.dtype: np.dtype[Any] = real
        cplx = _DTYPES[real]
        bins = n // 2 + 1
        k = plan.partition

        # Partition spectra, transformed once in float64 and then rounded, laid out
        # (ear, partition * channel, bin) so that each ear's multiply-accumulate is one
        # product over a contiguous (P * C, bins) block and one sum over its first axis.
        padded = np.zeros((channels, 2, parts * k), dtype=np.float64)
        padded[:, :, :length] = arr
        cut = padded.reshape(channels, 2, parts, k).transpose(1, 2, 0, 3)  # (2, P, C, K)
        spectra = scipy.fft.rfft(cut, n=n, axis=-1)
        self._spectra = np.ascontiguousarray(spectra.reshape(2, parts * channels, bins), dtype=cplx)

        # The FDL holds each block's spectrum twice, at slots w and w + P, with w stepping
        # down by one per block: the P most recent spectra are then always the contiguous
        # window [w, w + P), newest first, matching partitions 0 .. P - 1 without a copy.
        self._fdl = np.zeros((2 * parts, channels, bins), dtype=cplx)
        # Last N input samples per channel: N - hop of history, then the current hop
        # (zeros where its frames have not arrived yet).
        self._window = np.zeros((channels, n), dtype=real)
        # Scratch for the products and the two ear spectra, reused every block.
        self._products = np.empty((parts * channels, bins), dtype=cplx)
        self._ears = np.empty((2, bins), dtype=cplx)
        # Output of partitions 1 .. P - 1 for the current hop (time domain, last hop samples),
        # valid only while a block is part-filled.
        self._earlier = np.zeros((2, b), dtype=real)
        self._zeros = np.zeros((self.block_size, channels), dtype=real)
        self.reset()

    @property
    def latency(self) -> int:
        """Delay in frames between input and output: 0 (overlap-save needs no extra delay)."""
        return 0

    @property
    def nbytes(self) -> int:
        """Bytes held by the engine's arrays; fixed by the filters and the block size."""
        return sum(v.nbytes for v in vars(self).values() if isinstance(v, np.ndarray))

    def reset(self) -> None:
        """Forget all input: the next :meth:`process` call starts a new stream."""
        self._fdl[...] = 0
        self._window[...] = 0
        self._slot = 0  # w: the FDL window is [w, w + P)
        self._fill = 0  # frames of the current block received so far
        self._held = 0  # of those, frames taken by push() whose output is not given yet
        self._earlier_valid = False

    def process(self, block: RealArray) -> FloatArray:
        """Convolve the next frames of the stream.

        Parameters
        ----------
        block : numpy.ndarray
            Input of shape ``(n, C)``, any ``n >= 0``.

        Returns
        -------
        numpy.ndarray
            Output of shape ``(n, 2)``, aligned with the input frames, in the engine's dtype.
        """
        x = self._checked(block)
        if self._held and len(x):
            raise AudioError("push() holds frames: call drain() before process()")
        n = x.shape[0]
        out = np.empty((n, 2), dtype=self.dtype)
        b = self.hop
        history = self.transform_size - b
        pos = 0
        while pos < n:
            take = min(b - self._fill, n - pos)
            start = history + self._fill
            self._window[:, start : start + take] = x[pos : pos + take].T
            if self._fill == 0 and take == b:
                out[pos : pos + take] = self._whole_block().T
            else:
                out[pos : pos + take] = self._part_block()[:, self._fill : self._fill + take].T
            self._fill += take
            pos += take
            if self._fill == b:
                self._advance()
        return out

    def push(self, block: RealArray) -> FloatArray:
        """Take the next frames; return the output of the hops they complete, if any.

        The fast path only, whatever the caller's block size: frames wait in the
        engine's window until their hop is whole, and the output of a hop (``hop``
        frames) is returned by the call that completes it, so a call returns a multiple
        of :attr:`hop` frames, possibly none. :meth:`drain` returns the frames still
        waiting. Output is the same as :meth:`process` gives for the same frames.
        """
        x = self._checked(block)
        b = self.hop
        history = self.transform_size - b
        n = x.shape[0]
        if self._fill != self._held:
            raise AudioError(
                "process() left a hop part-filled: push() continues only from a hop boundary "
                "or from its own frames"
            )
        whole = (self._fill + n) // b
        out = np.empty((whole * b, 2), dtype=self.dtype)
        done = 0
        pos = 0
        while pos < n:
            take = min(b - self._fill, n - pos)
            start = history + self._fill
            self._window[:, start : start + take] = x[pos : pos + take].T
            self._fill += take
            self._held += take
            pos += take
            if self._fill == b:
                self._transform_window()
                out[done : done + b] = self._accumulate(0, self.partitions).T
                done += b
                self._advance()
                self._held = 0
        return out

    def drain(self) -> FloatArray:
        """The output of the frames :meth:`push` holds (fewer than :attr:`hop`).

        Afterwards the engine is where :meth:`process` of the same frames leaves it.
        """
        held = self._held
        if held == 0:
            return np.empty((0, 2), dtype=self.dtype)
        self._held = 0
        fill = self._fill
        out: FloatArray = np.ascontiguousarray(self._part_block()[:, fill - held : fill].T)
        return out

    def flush(self) -> Iterator[FloatArray]:
        """Yield the tail after the last input: ``L - 1`` frames in blocks of ``<= B``.

        Frames :meth:`push` still holds come first (:meth:`drain`).

        A block is short where needed to end the current part-filled hop. When the
        generator is exhausted the engine is reset.
        """
        if self._held:
            yield self.drain()
        remaining = self.filter_length - 1
        while remaining > 0:
            take = min(remaining, self.block_size, self.hop - self._fill)
            yield self.process(self._zeros[:take])
            remaining -= take
        self.reset()

    # -- internals -------------------------------------------------------------------

    def _checked(self, block: RealArray) -> RealArray:
        x = np.asarray(block)
        if x.dtype.kind not in "fiu":
            raise AudioError(f"audio blocks must be real numbers, got dtype {x.dtype.name!r}")
        if x.ndim != 2 or x.shape[1] != self.channels:
            raise AudioError(
                f"expected a block of shape (frames, {self.channels}) for {self.channels} "
                f"channels, got shape {x.shape!r}"
            )
        return x

    def _transform_window(self) -> None:
        """Spectrum of the current N-sample window into FDL slots w and w + P."""
        spec = scipy.fft.rfft(self._window, axis=-1)
        self._fdl[self._slot] = spec
        self._fdl[self._slot + self.partitions] = spec

    def _accumulate(self, first: int, last: int) -> FloatArray:
        """Time-domain output (2, hop) of partitions ``first .. last - 1``."""
        c = self.channels
        w = self._slot
        x = self._fdl[w + first : w + last].reshape((last - first) * c, -1)
        prod = self._products[: x.shape[0]]
        for ear in range(2):
            np.multiply(x, self._spectra[ear, first * c : last * c], out=prod)
            self._ears[ear] = _pairwise_sum(prod)
        n = self.transform_size
        out: FloatArray = scipy.fft.irfft(self._ears, n=n, axis=-1)
        return out[:, n - self.hop :]

    def _whole_block(self) -> FloatArray:
        self._transform_window()
        return self._accumulate(0, self.partitions)

    def _part_block(self) -> FloatArray:
        if not self._earlier_valid:
            if self.partitions > 1:
                self._earlier[...] = self._accumulate(1, self.partitions)
            else:
                self._earlier[...] = 0
            self._earlier_valid = True
        self._transform_window()
        return self._accumulate(0, 1) + self._earlier

    def _advance(self) -> None:
        """Close the current block: its spectrum stays in the FDL at slot w."""
        b = self.hop
        history = self.transform_size - b
        self._window[:, :history] = self._window[:, b:]
        self._window[:, history:] = 0
        self._slot = (self._slot - 1) % self.partitions
        self._fill = 0
        self._earlier_valid = False


def _pairwise_sum(
    rows: NDArray[np.complexfloating[Any, Any]],
) -> NDArray[np.complexfloating[Any, Any]]:
    """Sum over the first axis by pairwise (tree) addition, in place; returns ``rows[0]``.

    Summing row after row, as ``rows.sum(axis=0)`` does across rows, lets the rounding
    error grow with the square root of the number of terms (P * C, into the thousands for
    long filters and small blocks), which in complex64 exceeded 1e-6 of full scale. A tree
    grows it only with the logarithm, for the same number of additions (Higham, *Accuracy
    and Stability of Numerical Algorithms*, 2nd ed., chapter 4, pairwise summation).
    """
    k = rows.shape[0]
    while k > 1:
        half = k // 2
        keep = k - half
        np.add(rows[:half], rows[keep:k], out=rows[:half])
        k = keep
    first: NDArray[np.complexfloating[Any, Any]] = rows[0]
    return first


def convolve_reference(signal: RealArray, filters: RealArray) -> NDArray[np.float64]:
    """Whole-signal binaural convolution: the engine's oracle and the benchmark's baseline.

    ``scipy.signal.oaconvolve`` once per (channel, ear) over the whole signal, in float64,
    summed over channels.

    Parameters
    ----------
    signal : numpy.ndarray
        Input of shape ``(T, C)``.
    filters : numpy.ndarray
        Filters of shape ``(C, 2, L)``.

    Returns
    -------
    numpy.ndarray
        Output of shape ``(T + L - 1, 2)``, float64.

    Examples
    --------
    One channel: an impulse reproduces each ear's filter.

    >>> import numpy as np
    >>> filters = np.array([[[1.0, 0.5], [0.0, 0.25]]])  # (1 channel, 2 ears, 2 taps)
    >>> y = convolve_reference(np.array([[1.0], [0.0]]), filters)
    >>> y.shape
    (3, 2)
    >>> np.round(y, 12).tolist()
    [[1.0, 0.0], [0.5, 0.25], [0.0, 0.0]]
    """
    import scipy.signal  # only here: the oracle needs it, the engine does not

    h = _check_filters(filters)
    x = np.asarray(signal, dtype=np.float64)
    if x.ndim != 2 or x.shape[1] != h.shape[0]:
        raise AudioError(
            f"expected a signal of shape (frames, {h.shape[0]}) for filters of shape "
            f"{h.shape!r}, got shape {x.shape!r}"
        )
    frames, channels = x.shape
    out = np.zeros((frames + h.shape[2] - 1, 2), dtype=np.float64)
    if frames == 0:
        return out
    for c in range(channels):
        for ear in range(2):
            out[:, ear] += scipy.signal.oaconvolve(x[:, c], h[c, ear].astype(np.float64))
    return out
