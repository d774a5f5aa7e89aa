"""The render's engine: per-channel convolution, the shared room tail and headphone EQ.

:class:`FoldEngine` runs the whole two-ear response of a render on a stream of
``frames x C`` blocks: each channel's own two-ear filter (:class:`BinauralConvolver`),
optionally one diffuse room tail shared by all channels (fed with a weighted mono mix of
them, on a second thread) and optionally a headphone compensation applied once to the
two ears. It is built from plain arrays, so any input kind (loudspeaker layouts today)
can feed it.
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .convolution import DEFAULT_BLOCK_SIZE, BinauralConvolver, FloatArray, RealArray

__all__ = ["TAIL_BLOCK_FRAMES", "FoldEngine"]

#: Frames per call of the shared tail's convolver (rounded up to a power of two, and at
#: least the engine block). The
#: tail (a whole second or more of the large room) costs ``length / block`` spectral
#: multiply-adds per frame in a uniformly partitioned engine: at the engine's 8192 frames,
#: 16 partitions for the large room. 32768 frames cut that to 4 at a little more FFT
#: work; measured on the 128801-frame large-room tail, one minute of 48 kHz mono into
#: two ears: 0.173 s at 8192, 0.150 at 16384, 0.121 at 32768, 0.136 at 65536.
TAIL_BLOCK_FRAMES = 32768

_Audio = NDArray[np.float32]


class FoldEngine:
    """The per-channel convolution plus, optionally, a shared tail path and headphone EQ.

    The tail path mixes the channels with ``tail_weights``, delays the mix by
    ``tail_offset`` (a FIFO: cheaper than leading zeros in the tail filter, which would
    cost whole zero partitions) and convolves it with the two-ear ``tail`` in chunks of
    :data:`TAIL_BLOCK_FRAMES`, on a second thread. The direct output waits in a queue
    until the tail of the same frames is ready, so :meth:`process` returns what is
    complete (possibly nothing) and :meth:`tail_blocks` returns the rest: in all, exactly
    the frames of a whole convolution, in order.

    Parameters
    ----------
    filters : numpy.ndarray, shape (C, 2, L)
        Each input channel's two-ear filter pair.
    block_size : int
        Frames per block of the stream (a power of two, :class:`BinauralConvolver`'s
        rule). Each convolver's transforms come from its cost model
        (:func:`~earfold.renderer.engine.convolution.choose_transform`); frames wait in a
        convolver until its hop is whole (:meth:`BinauralConvolver.push`), so
        :meth:`process` returns whole hops of output, possibly none, and
        :meth:`tail_blocks` the rest.
    tail : numpy.ndarray, shape (2, Lt), optional
        The two-ear room tail shared by all channels.
    tail_weights : numpy.ndarray, shape (C,), optional
        Each channel's share of the tail's input (required with ``tail``).
    tail_offset : int
        Samples from the filters' time zero to the tail's first sample.
    headphone : numpy.ndarray, shape (2, 2, N), optional
        Headphone compensation as a two-ear filter bank (each ear to itself), applied to
        the summed output.
    """

    def __init__(
        self,
        filters: RealArray,
        block_size: int = DEFAULT_BLOCK_SIZE,
        *,
        tail: RealArray | None = None,
        tail_weights: RealArray | None = None,
        tail_offset: int = 0,
        headphone: RealArray | None = None,
    ) -> None:
        self.direct = BinauralConvolver(filters, block_size=block_size)
        self.block_size = self.direct.block_size
        self.channels: int = filters.shape[0]
        self.tail: BinauralConvolver | None = None
        # Headphone compensation: once, on the two-channel output (each ear to itself).
        self.headphone = (
            None if headphone is None else BinauralConvolver(headphone, block_size=block_size)
        )

        self.fifo: _Audio = np.zeros(0, dtype=np.float32)
        if tail is not None:
            if tail_weights is None:
                raise ValueError("a shared tail needs its tail_weights")
            # A power of two (the convolver's rule) and so a whole number of engine blocks.
            chunk = max(self.block_size, 1 << max(0, int(TAIL_BLOCK_FRAMES) - 1).bit_length())
            # The tail's chunks are its convolver's hops (its fast path).
            self.tail = BinauralConvolver(tail[None], block_size=chunk)
            self.weights: _Audio = np.asarray(tail_weights, dtype=np.float32)
            self.fifo = np.zeros(tail_offset, dtype=np.float32)
            self._mix: list[_Audio] = []  # tail input not yet handed to the thread
            self._mix_frames = 0
            self._direct: list[FloatArray] = []  # direct output waiting for its tail
            self._direct_frames = 0
            self._tail_ready: FloatArray = np.zeros((0, 2), dtype=np.float32)
            self._pending: Future[FloatArray] | None = None  # the tail chunk being convolved
            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="earfold-tail")

    def process(self, block: RealArray) -> FloatArray:
        """The output frames that are complete after ``block`` (``(n, 2)``, possibly fewer)."""
        out = self._binaural(block)
        return out if self.headphone is None else self.headphone.push(out)

    def _binaural(self, block: RealArray) -> FloatArray:
        if self.tail is None:
            return self.direct.push(block)
        n = len(block)
        mono = np.concatenate([self.fifo, block @ self.weights])
        self.fifo = mono[n:]
        self._mix.append(mono[:n])
        self._mix_frames += n
        if self._mix_frames >= self.tail.hop:
            self._submit_tail()
        # The direct part runs here while the thread convolves the last full tail chunk:
        # both are FFTs and array arithmetic that release the GIL.
        out = self.direct.push(block)
        self._direct.append(out)
        self._direct_frames += len(out)
        return self._take(min(self._direct_frames, len(self._tail_ready)))

    def _submit_tail(self) -> None:
        """Hand the whole tail chunks waiting (at least one, the last zero-padded at the
        end of the stream) to the thread, as one job.

        Blocks larger than a chunk then keep the thread as busy as the direct part: the
        convolver takes the chunks one hop after another, so the output is the same as
        with one job per chunk.
        """
        assert self.tail is not None
        mix = np.concatenate(self._mix) if len(self._mix) != 1 else self._mix[0]
        size = self.tail.hop
        whole = max(1, len(mix) // size) * size
        chunk = mix[:whole]
        if len(chunk) < whole:
            chunk = np.concatenate([chunk, np.zeros(whole - len(chunk), dtype=np.float32)])
        self._mix = [mix[whole:]]
        self._mix_frames = max(0, len(mix) - whole)
        self._collect_tail()
        self._pending = self._pool.submit(self.tail.process, chunk[:, None])

    def _collect_tail(self) -> None:
        if self._pending is not None:
            self._tail_ready = np.concatenate([self._tail_ready, self._pending.result()])
            self._pending = None

    def _take(self, frames: int) -> FloatArray:
        """Sum and return the first ``frames`` of the waiting direct output and tail."""
        if frames == 0:
            return np.zeros((0, 2), dtype=np.float32)
        direct = np.concatenate(self._direct) if len(self._direct) > 1 else self._direct[0]
        out = direct[:frames] + self._tail_ready[:frames]
        self._direct = [direct[frames:]]
        self._direct_frames -= frames
        self._tail_ready = self._tail_ready[frames:]
        return out

    def close(self) -> None:
        """Stop the tail thread (the engine is not used afterwards)."""
        if self.tail is not None:
            self._pool.shutdown(wait=True)

    def tail_blocks(self, frames: int) -> Iterator[FloatArray]:
        """The remaining ``frames`` of output after the last input (zeros pushed through)."""
        zeros = np.zeros((self.block_size, self.channels), dtype=np.float32)
        pushed = frames
        while pushed > 0:
            n = min(pushed, self.block_size)
            out = self.process(zeros[:n])
            if len(out):
                yield out
            pushed -= n
        last = self.direct.drain()
        if self.tail is None:
            out = self._headphone(last)
            if len(out):
                yield out
            return
        self._direct.append(last)
        self._direct_frames += len(last)
        # What is still waiting: the last tail chunks. Past the whole convolution's
        # length the tail is zero, so a padded last chunk is cut to the direct output.
        while len(self._tail_ready) < self._direct_frames:
            if self._pending is None:
                self._submit_tail()
            self._collect_tail()
        out = self._headphone(self._take(self._direct_frames))
        if len(out):
            yield out

    def _headphone(self, last: FloatArray) -> FloatArray:
        """The headphone EQ's output for the stream's ``last`` frames and all it holds."""
        if self.headphone is None:
            return last
        return np.concatenate([self.headphone.push(last), self.headphone.drain()])

    def describe(self) -> dict[str, Any]:
        """The report's ``engine`` section: block size, partitions, filter lengths."""
        info: dict[str, Any] = {
            "block_size": self.block_size,
            "partitions": self.direct.partitions,
            "filter_length": self.direct.filter_length,
            "transform_size": self.direct.transform_size,
            "hop": self.direct.hop,
        }
        if self.headphone is not None:
            info["headphone_eq"] = {
                "length": self.headphone.filter_length,
                "partitions": self.headphone.partitions,
                "transform_size": self.headphone.transform_size,
            }
        if self.tail is not None:
            info["shared_tail"] = {
                "length": self.tail.filter_length,
                "block_size": self.tail.block_size,
                "partitions": self.tail.partitions,
                "transform_size": self.tail.transform_size,
                "hop": self.tail.hop,
                "offset": len(self.fifo),
            }
        return info
