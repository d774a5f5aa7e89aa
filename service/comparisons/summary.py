"""A variant in a few words, for lists: what it sets apart from the render defaults.

A comparison's variants are stored with every sound option filled in (defaults too);
a list of comparisons wants to show what each variant *changes*. :func:`variant_summary`
keeps the options whose value differs from the declaration's default
(:data:`earfold.renderer.render.RENDER_OPTIONS`) and words them briefly. It says nothing
about which label played which variant: it describes the request, in request order.
"""

from __future__ import annotations

from typing import Any

from earfold.renderer.layouts import SCENES
from earfold.renderer.render import RENDER_OPTIONS

__all__ = ["variant_settings", "variant_summary"]

_SPECS = {s.name: s for s in RENDER_OPTIONS}

#: Options shown by their value alone (the value says what it is).
_BARE = ("layout",)

#: Ambisonic decoders and normalisations in words.
_DECODERS = {"magls": "MagLS decoder", "virtual": "virtual-loudspeaker decoder"}
_NORMS = {"sn3d": "SN3D input", "n3d": "N3D input", "fuma": "FuMa input"}


def _rotation(value: Any) -> str:
    """``rotated 30 deg`` (yaw alone) or ``rotated 30, 10, 0 deg (yaw, pitch, roll)``."""
    from earfold.renderer.render import option

    try:
        angles = option("rotate").check(value)
    except ValueError:
        return f"rotate {value}"
    if angles is None:
        return "not rotated"
    yaw, pitch, roll = angles
    if pitch == 0 and roll == 0:
        return f"rotated {_number(yaw)} deg"
    return f"rotated {_number(yaw)}, {_number(pitch)}, {_number(roll)} deg (yaw, pitch, roll)"


def variant_settings(request: dict[str, Any]) -> dict[str, Any]:
    """The options of a variant's request whose value is not the declared default."""
    out = {}
    for name, value in request.items():
        spec = _SPECS.get(name)
        if spec is None or value is None or value == spec.default:
            continue
        out[name] = value
    return out


def _number(value: float) -> str:
    return f"{value:g}"


def _word(name: str, value: Any, uploads: dict[str, str]) -> str:
    spec = _SPECS[name]
    if name == "layout" and isinstance(value, dict):
        speakers = value.get("speakers") or []
        return f"custom layout '{value.get('name') or 'custom'}' ({len(speakers)} speakers)"
    if name == "room" and isinstance(value, dict):
        dims = value.get("dimensions") or []
        size = " x ".join(_number(d) for d in dims if isinstance(d, (int, float)))
        return f"room '{value.get('name') or 'custom'}' {size} m".rstrip()
    if name == "headphone_eq":
        if isinstance(value, str):
            return (
                f"headphone EQ {uploads['headphone_eq']}"
                if "headphone_eq" in uploads
                else ("headphone EQ (uploaded)")
            )
        return f"headphone EQ ({len(value)} band{'s' if len(value) != 1 else ''})"
    if name == "hrtf" and isinstance(value, str) and len(value) == 32:
        return f"HRTF set {uploads['hrtf']}" if "hrtf" in uploads else "HRTF set (uploaded)"
    if name == "layout" and isinstance(value, str) and value.strip().lower() in SCENES:
        return f"order {SCENES[value.strip().lower()].order} scene"
    if name == "ambisonic_decoder":
        return _DECODERS.get(value, f"decoder {value}")
    if name == "ambisonic_norm":
        return _NORMS.get(value, str(value))
    if name == "rotate":
        return _rotation(value)
    if name == "channel_order" and isinstance(value, list):
        return "channel order " + ",".join(map(str, value))
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        unit = f" {spec.unit}" if spec.unit else ""
        return f"{name} {_number(value)}{unit}"
    if name in _BARE:
        return str(value)
    return f"{name} {value}"


def variant_summary(request: dict[str, Any], uploads: dict[str, str] | None = None) -> str:
    """A variant in words: its non-default options in declaration order, or "defaults".

    ``uploads`` names uploaded files by option (``hrtf``, ``headphone_eq``): the user's
    file names, recorded when the comparison was made.

    Examples
    --------
    >>> variant_summary({"layout": "5.1", "room": "small", "lfe_gain": 4.0, "seed": 0})
    '5.1, room small, lfe_gain 4 dB'
    >>> variant_summary({"layout": "hoa3", "ambisonic_decoder": "magls", "rotate": [30]})
    'order 3 scene, MagLS decoder, rotated 30 deg'
    >>> variant_summary({"room": "none"})
    'defaults'
    """
    settings = variant_settings(request)
    words = [
        _word(s.name, settings[s.name], uploads or {}) for s in RENDER_OPTIONS if s.name in settings
    ]
    return ", ".join(words) or "defaults"
