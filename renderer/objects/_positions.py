"""Where an object is at given times: the interpolation of ITU-R BS.2076-2.

BS.2076-2, audioBlockFormat sub-elements for the Objects type (``jumpPosition`` and its
``interpolationLength`` attribute): a block's position is the value reached *by the end of
its interpolation*, starting from the previous block's position at the block's ``rtime``.

- ``jumpPosition`` 0 or absent: the position moves linearly over the whole block, from the
  previous block's position to this block's.
- ``jumpPosition`` 1: the position moves over ``interpolationLength`` seconds from the
  block's start, then holds; without ``interpolationLength`` it jumps at once (length 0).
- The first block has no previous position: its own holds from its start (a move into
  the first block is undefined, and its end value is taken for the whole block).
- Between blocks, and after the last block, the last position reached holds; before the
  first block, the first block's position.

The same weights move the block's gain, width, height, depth and diffuse. Coordinates are
interpolated component by component: polar (azimuth, elevation, distance) or cartesian
(X, Y, Z), never converted. Azimuths are given in -180 to 180 degrees, so an object that
circles past the back is written as, say, 170 then -170: as numbers that passes through 0
(the front), as directions it moves 20 degrees across the back. ``short_way=True`` (what
the renderer and the pages ask for) takes the azimuth the shorter way round, which is
where a circling object is, and what rendering each block's position and crossfading
between them (the reference renderer's way, ITU-R BS.2127, from memory) amounts to; the
default keeps the numbers as given.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from ..errors import AdmError
from ..geometry import direction_to_vector
from ._model import ObjectChannel

__all__ = ["BlockTable", "ObjectPath", "direction_vectors", "object_positions"]

Floats = npt.NDArray[np.float64]


@dataclass(frozen=True)
class ObjectPath:
    """An object's parameters at given times.

    Attributes
    ----------
    times
        The times asked for, in seconds from the start of the file.
    cartesian
        Whether ``positions`` are (X, Y, Z) rather than (azimuth, elevation, distance).
    positions
        ``(len(times), 3)``.
    gain
        Linear: the blocks' gain, interpolated, times the objects' gains; 0 where the
        object is muted or outside its span.
    width, height, depth, diffuse
        Interpolated like the position.
    active
        True where the object plays (within its span and not muted).
    """

    times: Floats
    cartesian: bool
    positions: Floats
    gain: Floats
    width: Floats
    height: Floats
    depth: Floats
    diffuse: Floats
    active: npt.NDArray[np.bool_]


def object_positions(
    channel: ObjectChannel, times: npt.ArrayLike, *, short_way: bool = False
) -> ObjectPath:
    """Position, gain and extent of an object channel at ``times`` (BS.2076-2 interpolation).

    Parameters
    ----------
    channel
        An Objects track of an :class:`~earfold.renderer.objects.AdmMaster`.
    times
        Seconds from the start of the file (sample ``n`` at rate ``fs`` is ``n / fs``).
    short_way
        Interpolate polar azimuths the shorter way round (see the module's notes).

    Returns
    -------
    ObjectPath

    Examples
    --------
    A block from 0 to 1 s at azimuth 0, then one from 1 to 3 s at azimuth 90 without a jump:
    the object reaches 45 degrees at 2 s (halfway through the second block).

    >>> from fractions import Fraction as F
    >>> from earfold.renderer.objects import ChannelFormat, ObjectBlock, ObjectChannel
    >>> def block(k, t, d, az):
    ...     return ObjectBlock(f"AB_00031001_{k:08X}", F(t), F(d), False, (az, 0.0, 1.0),
    ...                        False, None, 1.0, 0.0, 0.0, 0.0, 0.0)
    >>> blocks = (block(1, 0, 1, 0.0), block(2, 1, 2, 90.0))
    >>> ch = ChannelFormat("AC_00031001", "a", "Objects", blocks)
    >>> obj = ObjectChannel("AO_1001", "a", ("AO_1001",), ch, 0, "ATU_00000001", 1.0, False,
    ...                     F(0), None)
    >>> object_positions(obj, [0.5, 2.0, 5.0]).positions[:, 0].tolist()
    [0.0, 45.0, 90.0]
    """
    return BlockTable.of(channel).at(times, short_way=short_way)


@dataclass(frozen=True, eq=False)
class BlockTable:
    """An object channel's blocks as arrays, made once, for many lookups
    (:meth:`at`: :func:`object_positions` without going through the blocks again, so a
    stream that asks a few seconds at a time costs no more per second the longer the
    master).

    Attributes
    ----------
    values : ndarray, shape (n, 8)
        Each block's position (3), gain, width, height, depth, diffuse.
    starts, lengths : ndarray, shape (n,) or None
        Each block's start (s, from the file's start) and interpolation length; None
        for one block with no ``rtime`` (nothing moves).
    cartesian : bool
    start, end, gain, mute
        The object's span (``end`` None: to the end of the file), gain and mute.
    """

    channel_id: str
    values: Floats
    starts: Floats | None
    lengths: Floats | None
    cartesian: bool
    start: float
    end: float | None
    gain: float
    mute: bool

    @classmethod
    def of(cls, channel: ObjectChannel) -> BlockTable:
        """The table of ``channel``'s blocks."""
        blocks = channel.blocks
        if not blocks:
            raise AdmError(f"audioChannelFormat {channel.channel.channel_id} has no blocks")
        origin = float(channel.start)
        values = np.array(
            [(*b.position, b.gain, b.width, b.height, b.depth, b.diffuse) for b in blocks],
            dtype=np.float64,
        )
        starts = lengths = None
        if blocks[0].rtime is not None:
            starts = np.array([origin + float(b.rtime or 0) for b in blocks])
            lengths = np.array(
                [
                    float(b.duration or 0)
                    if not b.jump_position
                    else float(b.interpolation_length or 0)
                    for b in blocks
                ]
            )
        return cls(
            channel_id=channel.channel.channel_id,
            values=values,
            starts=starts,
            lengths=lengths,
            cartesian=bool(blocks[0].cartesian),
            start=origin,
            end=None if channel.end is None else float(channel.end),
            gain=float(channel.gain),
            mute=bool(channel.mute),
        )

    def at(self, times: npt.ArrayLike, *, short_way: bool = False) -> ObjectPath:
        """The object's parameters at ``times`` (seconds from the start of the file);
        ``short_way``: polar azimuths interpolated the shorter way round."""
        t = np.asarray(times, dtype=np.float64).reshape(-1)
        if not np.all(np.isfinite(t)):
            raise AdmError("object_positions: times must be finite seconds")
        values = self.values
        if self.starts is None or self.lengths is None:
            # One block for the whole object: nothing moves.
            current = np.broadcast_to(values[0], (t.size, values.shape[1]))
        else:
            n = len(values)
            k = np.searchsorted(self.starts, t, side="right") - 1
            before = k < 0
            k = np.clip(k, 0, n - 1)
            length = self.lengths[k]
            with np.errstate(divide="ignore", invalid="ignore"):
                frac = np.where(
                    length > 0, (t - self.starts[k]) / np.where(length > 0, length, 1), 1.0
                )
            frac = np.clip(frac, 0.0, 1.0)
            frac[before] = 1.0  # before the first block: its own values (k was clipped to 0)
            previous = values[np.maximum(k - 1, 0)]
            change = values[k] - previous
            if short_way and not self.cartesian:
                change[:, 0] = (change[:, 0] + 180.0) % 360.0 - 180.0
            current = previous + change * frac[:, None]
            if short_way and not self.cartesian:
                current[:, 0] = (current[:, 0] + 180.0) % 360.0 - 180.0
        active = t >= self.start
        if self.end is not None:
            active &= t < self.end
        if self.mute:
            active[:] = False
        gain = np.where(active, current[:, 3] * self.gain, 0.0)
        return ObjectPath(
            times=t,
            cartesian=self.cartesian,
            positions=np.ascontiguousarray(current[:, :3]),
            gain=gain,
            width=np.ascontiguousarray(current[:, 4]),
            height=np.ascontiguousarray(current[:, 5]),
            depth=np.ascontiguousarray(current[:, 6]),
            diffuse=np.ascontiguousarray(current[:, 7]),
            active=active,
        )


def direction_vectors(positions: npt.ArrayLike, cartesian: bool) -> Floats:
    """Unit direction vectors (x front, y left, z up) of ADM positions ``(n, 3)``.

    Polar: (azimuth, elevation, distance) in degrees, azimuth positive to the left, as
    ours. Cartesian: (X right, Y front, Z up) per ITU-R BS.2076, so our vector is
    (Y, -X, Z); a position at the centre (no direction) is taken as the front.

    Examples
    --------
    >>> import numpy as np
    >>> direction_vectors(np.array([[90.0, 0.0, 1.0]]), False).round(12).tolist()
    [[0.0, 1.0, 0.0]]
    >>> direction_vectors(np.array([[-1.0, 0.0, 0.0]]), True).tolist()  # X = -1: the left
    [[0.0, 1.0, 0.0]]
    """
    p = np.asarray(positions, dtype=np.float64).reshape(-1, 3)
    if not cartesian:
        return np.asarray(direction_to_vector(p[:, 0], p[:, 1]), dtype=np.float64)
    v = np.stack([p[:, 1], -p[:, 0], p[:, 2]], axis=1)
    norm = np.linalg.norm(v, axis=1, keepdims=True)
    front = np.array([1.0, 0.0, 0.0])
    return np.asarray(np.where(norm > 1e-9, v / np.maximum(norm, 1e-300), front))
