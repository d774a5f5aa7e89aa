"""Moving sources panned onto channels: gains over time, crossfaded between updates.

:class:`PanningMixer` mixes ``K`` mono sources into ``M`` channels (the virtual
loudspeakers of a dense array, say) with gains that follow each source's
:class:`~earfold.renderer.engine.moving.SourcePath`: at every update (at most
:data:`~earfold.renderer.engine.moving.MAX_UPDATE_SECONDS` apart) the gains of the
source's direction come from a gain function (such as VBAP's,
:meth:`earfold.renderer.layouts.VbapPanner.gains`) times the path's gain, and between
updates each gain moves along the same equal-gain raised-cosine ramp the moving-source
engine uses for its filters, so panning is as smooth as the filter changes and a path
whose direction is the same at two updates keeps its gains exactly.

Sources with an extent. A gain function may also take each state's spread (the path's
width, height, depth and diffuse share, :meth:`SourcePath.at_spread`): an object with a
``spread_gains(vectors, spread)`` method (the :class:`SpreadGains` protocol, such as
:class:`earfold.renderer.layouts.SpreadPanner`) is called that way, with the spread of
every state beside its direction; a plain callable is called with the directions alone,
as before. The mixer asks by that method's presence, once, when it is built.

This is the cheap half of rendering objects through a fixed array: its cost grows with
the number of sources times the few channels each feeds (three for VBAP), and the
array's channels then go through the fixed-filter engine (and a room) whatever the number
of sources. The mix has no latency: output frame ``t`` depends on input frame ``t`` only.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, Protocol, runtime_checkable

import numpy as np
from numpy.typing import NDArray

from ..errors import AudioError, LayoutError
from .convolution import FloatArray, RealArray
from .moving import LOOKAHEAD_HOPS, PathLike, update_hop

__all__ = ["GainFunction", "PanningMixer", "SpreadGains"]

#: Directions to channel gains: unit vectors ``(n, 3)`` to gains ``(n, M)``.
GainFunction = Callable[[NDArray[np.float64]], NDArray[Any]]


@runtime_checkable
class SpreadGains(Protocol):
    """Gains that depend on a source's spread as well as its direction."""

    def spread_gains(
        self, vectors: NDArray[np.float64], spread: NDArray[np.float64]
    ) -> NDArray[Any]:
        """Channel gains ``(n, M)`` of unit vectors ``(n, 3)`` with spreads ``(n, 4)``
        (columns :data:`~earfold.renderer.engine.moving.SPREAD_COLUMNS`)."""
        ...


class PanningMixer:
    """Sources into channels with gains that follow their paths (see the module's notes).

    Parameters
    ----------
    paths : sequence of SourcePath
        One per source; input blocks have ``K`` channels in this order.
    gains : callable or SpreadGains
        ``gains(vectors)`` for unit vectors ``(n, 3)`` returns non-negative channel gains
        ``(n, M)``; ``M`` is the same for every call. An object with a
        ``spread_gains(vectors, spread)`` method (:class:`SpreadGains`) is called through
        it instead, with each state's spread (zeros for a path without one).
    samplerate : float
        The stream's rate in Hz.
    hop : int, optional
        Frames between gain updates; at most 10 ms (the default).
    dtype : numpy dtype, optional
        ``float32`` (default) or ``float64``.

    Examples
    --------
    A source resting on the second of two channels feeds only that one:

    >>> import numpy as np
    >>> def two(v):  # left and right by the sign of y, for the example
    ...     return np.stack([v[:, 1] >= 0, v[:, 1] < 0], axis=1).astype(float)
    >>> from earfold.renderer.engine import SourcePath
    >>> mixer = PanningMixer([SourcePath.fixed([0.0, -1.0, 0.0])], two, 48000.0)
    >>> mixer.process(np.ones((3, 1))).tolist()
    [[0.0, 1.0], [0.0, 1.0], [0.0, 1.0]]
    """

    def __init__(
        self,
        paths: Sequence[PathLike],
        gains: GainFunction | SpreadGains,
        samplerate: float,
        *,
        hop: int | None = None,
        dtype: np.dtype[Any] | type = np.float32,
    ) -> None:
        paths = list(paths)
        if not paths or not all(isinstance(p, PathLike) for p in paths):
            raise AudioError("a panning mixer needs one path per source, at least one")
        hop = update_hop(samplerate, hop)
        real = np.dtype(dtype)
        if real not in (np.dtype(np.float32), np.dtype(np.float64)):
            raise AudioError(f"dtype must be one of 'float32', 'float64', got {dtype!r}")
        self.paths: list[PathLike] = paths
        self.sources: int = len(paths)
        self.hop: int = int(hop)
        self.dtype: np.dtype[Any] = real
        self._gains = gains
        #: Whether the gain function takes the spread (checked once, by its method).
        self.uses_spread: bool = isinstance(gains, SpreadGains)
        front = np.array([[1.0, 0.0, 0.0]])
        self.channels: int = int(self._checked(front, np.zeros((1, 4))).shape[1])
        self._ramp = (0.5 - 0.5 * np.cos(np.pi * np.arange(self.hop) / self.hop)).astype(real)
        self.reset()

    def reset(self) -> None:
        """Start again at frame 0."""
        self._frame = 0
        self._ahead_first = 0
        self._ahead = np.zeros((0, self.sources, self.channels), dtype=self.dtype)

    def process(self, block: RealArray) -> FloatArray:
        """Mix the next frames: input ``(n, K)``, output ``(n, M)`` aligned with it."""
        x = np.asarray(block)
        if x.dtype.kind not in "fiu" or x.ndim != 2 or x.shape[1] != self.sources:
            raise AudioError(
                f"expected a real block of shape (frames, {self.sources}), got "
                f"{x.dtype.name} of shape {x.shape!r}"
            )
        n, s = x.shape[0], self.hop
        if n == 0:
            return np.zeros((0, self.channels), dtype=self.dtype)
        # The block laid out in whole hops (zeros before its first frame and after its
        # last), so that each hop is two products with the gains of the states around it:
        # y = x G_j + (ramp x) (G_j+1 - G_j), for all sources and channels at once.
        lead = self._frame % s
        hops = -(-(lead + n) // s)
        first = self._frame // s
        g = self._states(first, hops + 1)
        padded = np.zeros((hops * s, self.sources), dtype=self.dtype)
        padded[lead : lead + n] = x
        xh = padded.reshape(hops, s, self.sources)
        out = np.matmul(xh, g[:-1])
        change = g[1:] - g[:-1]
        if np.any(change):
            out += np.matmul(xh * self._ramp[None, :, None], change)
        self._frame += n
        mixed: FloatArray = out.reshape(hops * s, self.channels)[lead : lead + n]
        return mixed

    def _states(self, first: int, count: int) -> NDArray[Any]:
        """Gains ``(count, K, M)`` of states ``first ..``, worked out
        :data:`LOOKAHEAD_HOPS` at a time (paths read and gains computed in bulk)."""
        held = self._ahead_first + len(self._ahead)
        if first < self._ahead_first or first + count > held:
            span = max(count, LOOKAHEAD_HOPS)
            frames = (first + np.arange(span)) * float(self.hop)
            vectors = np.empty((self.sources, span, 3))
            path_gains = np.empty((self.sources, span))
            spread = np.zeros((self.sources, span, 4))
            for k, path in enumerate(self.paths):
                vectors[k], path_gains[k] = path.at(frames)
                if self.uses_spread:
                    spread[k] = path.at_spread(frames)
            # One call of the gain function for every source and state.
            g = self._checked(vectors.reshape(-1, 3), spread.reshape(-1, 4))
            g = g.reshape(self.sources, span, -1)
            g = g * path_gains[:, :, None]
            self._ahead = np.ascontiguousarray(g.transpose(1, 0, 2), dtype=self.dtype)
            self._ahead_first = first
        lo = first - self._ahead_first
        states: NDArray[Any] = self._ahead[lo : lo + count]
        return states

    def _checked(self, vectors: NDArray[np.float64], spread: NDArray[np.float64]) -> NDArray[Any]:
        if isinstance(self._gains, SpreadGains):
            g = np.asarray(self._gains.spread_gains(vectors, spread))
        else:
            g = np.asarray(self._gains(vectors))
        if g.dtype.kind not in "fiu" or g.ndim != 2 or g.shape[0] != len(vectors):
            raise LayoutError(
                f"the gain function must return real gains of shape (n, M) for n = "
                f"{len(vectors)} directions, got {g.dtype.name} of shape {g.shape!r}"
            )
        if hasattr(self, "channels") and g.shape[1] != self.channels:
            raise LayoutError(
                f"the gain function returned {g.shape[1]} channels; earlier {self.channels}"
            )
        if not np.all(np.isfinite(g)):
            raise LayoutError("the gain function returned non-finite gains")
        return g
