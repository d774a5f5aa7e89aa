"""A command-ready summary of an ADM master: what ``earfold adm inspect FILE`` prints."""

from __future__ import annotations

import os
from typing import Any

from ._model import ObjectChannel
from ._read import read_adm

__all__ = ["inspect_adm", "motion_summary"]


def motion_summary(channel: ObjectChannel) -> dict[str, Any]:
    """Blocks, the span of motion and the range of each coordinate of an object channel.

    The span of motion runs from the start of the first block whose position differs from
    the previous block's to the end of the last such block's interpolation (BS.2076-2:
    the whole block, or ``interpolationLength`` after a jump); None for a static object.
    """
    blocks = channel.blocks
    origin = channel.start
    moving: list[tuple[float, float]] = []
    for prev, block in zip(blocks, blocks[1:]):
        if block.position != prev.position and block.rtime is not None:
            begin = origin + block.rtime
            length = block.interpolation_length or 0 if block.jump_position else block.duration or 0
            moving.append((float(begin), float(begin + length)))
    cartesian = bool(blocks and blocks[0].cartesian)
    names = ("X", "Y", "Z") if cartesian else ("azimuth", "elevation", "distance")
    ranges = {
        name: [min(b.position[i] for b in blocks), max(b.position[i] for b in blocks)]
        for i, name in enumerate(names)
    }
    return {
        "blocks": len(blocks),
        "cartesian": cartesian,
        "motion": None if not moving else [moving[0][0], max(e for _, e in moving)],
        "jumps": sum(1 for b in blocks[1:] if b.jump_position),
        "ranges": ranges,
        "gain_range": [min(b.gain for b in blocks), max(b.gain for b in blocks)],
        "spread": max(max(b.width, b.height, b.depth) for b in blocks) > 0,
        "diffuse": max(b.diffuse for b in blocks) > 0,
    }


def inspect_adm(path: str | os.PathLike[str], *, programme: str | None = None) -> dict[str, Any]:
    """A JSON-ready summary of an ADM master's chosen programme.

    Lists the file's programmes, the chosen programme's contents, its objects (each with
    its number of blocks, span of motion and position ranges: :func:`motion_summary`), beds,
    HOA packs, the packs used, and what is ignored and why.

    Raises
    ------
    AdmError
        As :func:`~earfold.renderer.objects.read_adm`.
    """
    master = read_adm(path, programme=programme)
    summary = master.to_dict()
    for entry, channel in zip(summary["objects"], master.objects):
        entry.update(motion_summary(channel))
    summary["duration"] = master.frames / master.sample_rate
    return summary
