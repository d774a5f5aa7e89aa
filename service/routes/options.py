"""``GET /v1/options``: every render option and the limits of a comparison, for forms.

Built from the same declarations the request models are built from: the renderer's
:data:`~earfold.renderer.render.RENDER_OPTIONS` (through :func:`.option_models.http_options`)
and the comparison request models (:mod:`.comparisons`), so a page never hard-codes a
range, a default or a list of choices. ``tests/service/test_options_endpoint.py`` checks
that the answer agrees with both.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends

from earfold.renderer.render import OptionSpec

from ..auth import current_owner
from ..comparisons.session import ANSWER_CHOICES
from ..problems import UNAUTHORIZED, problem_responses
from .comparisons import ComparisonRequest, ExcerptRequest
from .option_models import http_options

__all__ = ["comparison_limits", "option_entry", "router"]

router = APIRouter(prefix="/v1", tags=["catalog"], responses=problem_responses(UNAUTHORIZED))

#: Where the values of an option that names something are listed (an option not here
#: takes a number, a word of ``choices`` or a list); a layout's order names and labels
#: are in its entry of ``/v1/layouts``.
CATALOGS = {
    "layout": "/v1/layouts",
    "hrtf": "/v1/hrtf-sets",
    "room": "/v1/rooms",
    "headphone_eq": "/v1/headphone-eq",
    "channel_order": "/v1/layouts",
}

#: What else than its declared kind an option takes over HTTP (see option_models).
HTTP_FORMS = {
    "layout": ["name", "layout object"],
    "hrtf": ["name", "uploaded id"],
    "room": ["name", "room object"],
    "headphone_eq": ["list of bands", "uploaded id"],
    "channel_order": ["list of labels", "order name"],
    "solo": ["channel label"],
    "rotate": ["list of 1 to 3 numbers (yaw, pitch, roll)", "text yaw,pitch,roll"],
}


def option_entry(spec: OptionSpec) -> dict[str, Any]:
    """One option as ``GET /v1/options`` shows it.

    Bounds follow JSON Schema 2020-12: ``minimum``/``maximum`` are inclusive,
    ``exclusive_minimum``/``exclusive_maximum`` open; of each pair at most one is set.
    """
    exclusive = spec.exclusive
    return {
        "name": spec.name,
        "kind": spec.kind,
        "unit": spec.unit or None,
        "minimum": None if exclusive else spec.minimum,
        "maximum": None if exclusive else spec.maximum,
        "exclusive_minimum": spec.minimum if exclusive else None,
        "exclusive_maximum": spec.maximum if exclusive else None,
        "power_of_two": spec.power_of_two,
        "choices": list(spec.choices),
        "default": spec.default,
        "help": spec.help,
        "shapes_sound": spec.shapes_sound,
        "forms": HTTP_FORMS.get(spec.name, [spec.kind]),
        "catalog": CATALOGS.get(spec.name),
    }


def comparison_limits() -> dict[str, Any]:
    """The limits of ``POST /v1/comparisons``, read from its request models' schemas."""
    request = ComparisonRequest.model_json_schema()
    props = request["properties"]
    excerpt = ExcerptRequest.model_json_schema()["properties"]["length"]
    designs = list(props["mode"]["enum"])
    return {
        "excerpt_min_seconds": excerpt["minimum"],
        "excerpt_max_seconds": excerpt["maximum"],
        "excerpt_default_seconds": excerpt["default"],
        "min_variants": props["variants"]["minItems"],
        "max_variants": props["variants"]["maxItems"],
        "designs": designs,
        "design_default": props["mode"]["default"],
        "trials_min": props["trials"]["minimum"],
        "trials_max": props["trials"]["maximum"],
        "trials_default": props["trials"]["default"],
        "answers": {design: list(ANSWER_CHOICES[design]) for design in designs},
        "variant_options": [s.name for s in http_options(sound_only=True)],
    }


@router.get("/options", summary="Render options and comparison limits, for forms")
def get_options(owner: str = Depends(current_owner)) -> dict[str, Any]:
    """Every render option offered over HTTP (name, kind, unit, bounds, choices, default,
    help, whether it shapes the sound) and the limits of a blind comparison."""
    return {
        "render": [option_entry(s) for s in http_options()],
        "comparison": comparison_limits(),
        "presets": preset_limits(),
        "headphone_eq": headphone_eq_limits(),
    }


def preset_limits() -> dict[str, Any]:
    """The limits of ``/v1/presets``."""
    from ..presets import MAX_PRESETS, PRESET_KINDS
    from .presets import MAX_NAME_CHARS

    return {"kinds": list(PRESET_KINDS), "max_per_owner": MAX_PRESETS, "name_max": MAX_NAME_CHARS}


def headphone_eq_limits() -> dict[str, Any]:
    """The limits of ``/v1/headphone-eq`` (the renderer's loader's, and the store's)."""
    from earfold.renderer.eq.headphone import (
        BAND_TYPES,
        MAX_BANDS,
        MAX_EQ_IR_BYTES,
        MAX_EQ_JSON_BYTES,
        MAX_GAIN_DB,
        MAX_IR_SECONDS,
        Q_RANGE,
    )

    from .headphone_eq import MAX_FILES

    return {
        "max_per_owner": MAX_FILES,
        "band_types": list(BAND_TYPES),
        "max_bands": MAX_BANDS,
        "max_gain_db": MAX_GAIN_DB,
        "q_range": list(Q_RANGE),
        "max_json_bytes": MAX_EQ_JSON_BYTES,
        "max_ir_bytes": MAX_EQ_IR_BYTES,
        "max_ir_seconds": MAX_IR_SECONDS,
    }
