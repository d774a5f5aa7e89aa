"""Variants that would render identically: a blind comparison of them measures nothing.

Two variants are the same when their resolved sound-shaping options are: the options a
render job gets after the route has checked them (names resolved, defaults filled in,
an uploaded HRTF set by its id), keeping only the options that shape the sound
(:data:`earfold.renderer.render.SOUND_OPTIONS`) and, of those, only the ones that can
make a difference to this render:

* ``block_size`` changes speed and memory, not the sound (its declaration says so);
* ``room_mode`` only matters with a room, and so does ``seed``: a comparison renders
  32-bit float files, which are not dithered, so the seed only draws the room's tail;
* ``lfe_cutoff`` and ``lfe_gain`` only matter for a layout with an LFE channel;
* an Ambisonic scene (layout ``foa``, ``hoa2`` ... ``hoa7``) resolves its own options:
  ``ambisonic_norm`` left out is SN3D, ``ambisonic_decoder`` left out is the order's
  default (virtual at first order, MagLS above), and a rotation is compared by its
  three angles (``"30"``, ``[30]`` and ``[30, 0, 0]`` are one rotation; all zero is none);
* ``fold`` ``stereo`` (the ITU-R BS.775 fold-down) uses no HRTF set, equalisation or
  room and leaves the LFE out, so those options do not matter to it.

What is not resolved here: ``eq`` left out (the set's own default) is not taken for the
equalisation it resolves to, since that needs the HRTF set read; such a pair is let through.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from earfold.renderer.layouts import SCENES
from earfold.renderer.render import SOUND_OPTIONS, option

__all__ = ["identical_pair", "sound_key"]

#: Sound options that cannot change the rendered samples (see the module docstring).
_NEVER_AUDIBLE = frozenset({"block_size"})


def sound_key(options: dict[str, Any], hrtf_id: str | None, lfe_in_layout: bool) -> str:
    """A canonical text of what shapes the sound of a render job's ``options``."""
    key = {
        name: options.get(name)
        for name in SOUND_OPTIONS
        if name not in _NEVER_AUDIBLE and name in options
    }
    if hrtf_id:
        key["hrtf"] = {"uploaded": hrtf_id}
    layout = key.get("layout")
    if isinstance(layout, str) and layout.strip().lower() in SCENES:
        _resolve_scene(key, SCENES[layout.strip().lower()].order)
    if key.get("fold") == "stereo":
        for name in ("hrtf", "eq", "room", "lfe_cutoff", "lfe_gain"):
            key.pop(name, None)
    if str(key.get("room", "none")).lower() == "none":
        key.pop("room", None)
        key.pop("room_mode", None)
        key.pop("seed", None)
    if not lfe_in_layout:
        key.pop("lfe_cutoff", None)
        key.pop("lfe_gain", None)
    return json.dumps(key, sort_keys=True, separators=(",", ":"))


def _resolve_scene(key: dict[str, Any], order: int) -> None:
    """A scene's options as the render resolves them (see the module docstring)."""
    from earfold.renderer.scenes import default_method

    key["ambisonic_norm"] = key.get("ambisonic_norm") or "sn3d"
    key["ambisonic_decoder"] = key.get("ambisonic_decoder") or default_method(order)
    angles = option("rotate").check(key.get("rotate"))  # the route has checked it
    key["rotate"] = None if angles is None or not any(angles) else list(angles)


def identical_pair(keys: Sequence[str]) -> tuple[int, int] | None:
    """The first pair (i, j), i < j, of equal keys, or None if all differ."""
    first: dict[str, int] = {}
    for j, key in enumerate(keys):
        if key in first:
            return first[key], j
        first[key] = j
    return None
