"""The HTTP request models of render options, built from the renderer's declaration.

Every field of ``POST /v1/renders`` and of a comparison's variants is made here from
:data:`earfold.renderer.render.RENDER_OPTIONS`: its type, range or choices, default and
description. Only what HTTP spells differently is added: a layout may be a layout object,
a room a room object, an HRTF set an uploaded set's id, and the headphone EQ the list of
bands itself or an uploaded file's id.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, create_model

from earfold.renderer.eq import BAND_TYPES, DEFAULT_Q, MAX_GAIN_DB, Q_RANGE
from earfold.renderer.render import RENDER_OPTIONS, OptionSpec

__all__ = ["EqBand", "http_options", "option_fields", "options_model"]

Label = Annotated[str, Field(min_length=1, max_length=16)]
Name = Annotated[str, Field(max_length=64)]

#: The id of an uploaded file (POST /v1/headphone-eq).
UploadId = Annotated[
    str, Field(pattern=r"^[0-9a-f]{32}$", description="id of an uploaded headphone EQ file")
]


class EqBand(BaseModel):
    """One parametric band of an inline headphone EQ (Audio EQ Cookbook biquads); the
    bounds are the renderer's (:mod:`earfold.renderer.eq`)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal[BAND_TYPES]  # type: ignore[valid-type]
    frequency: float = Field(
        gt=0, le=96000, allow_inf_nan=False, description="Hz, under half the stem's rate"
    )
    gain_db: float = Field(
        0.0,
        ge=-MAX_GAIN_DB,
        le=MAX_GAIN_DB,
        allow_inf_nan=False,
        description="dB (peaking and shelves; ignored by the pass filters)",
    )
    q: float = Field(DEFAULT_Q, ge=Q_RANGE[0], le=Q_RANGE[1], allow_inf_nan=False)


#: The OpenAPI description of a room object (the renderer checks it: room_from_dict).
_ROOM_OBJECT: dict[str, Any] = {
    "title": "RoomObject",
    "description": "a room as in a --room FILE.json: dimensions [length, width, height] in "
    "metres, listener {to_front_wall, to_left_wall, ear_height}, and either rt60 (seconds, "
    "one number or one per octave band 125 Hz to 8 kHz) or absorption per surface (front, "
    "back, left, right, floor, ceiling); optional name, description, speaker_radius, "
    "air_absorption, order, mixing_time_ms, seed",
    "required": ["dimensions"],
}


def http_options(*, sound_only: bool = False) -> tuple[OptionSpec, ...]:
    """The declared options offered over HTTP (only those that shape the sound)."""
    return tuple(s for s in RENDER_OPTIONS if s.http and (s.shapes_sound or not sound_only))


def _bounds(spec: OptionSpec) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if spec.minimum is not None:
        out["gt" if spec.exclusive else "ge"] = spec.minimum
    if spec.maximum is not None:
        out["lt" if spec.exclusive else "le"] = spec.maximum
    return out


def _powers_of_two(spec: OptionSpec) -> list[int]:
    """The powers of two within a declared option's bounds (what its check accepts)."""
    low = int(spec.minimum if spec.minimum is not None else 1)
    high = int(spec.maximum if spec.maximum is not None else 1 << 30)
    return [1 << n for n in range(high.bit_length()) if low <= 1 << n <= high]


def _field(spec: OptionSpec) -> tuple[Any, Any]:
    """(annotation, FieldInfo) of one declared option."""
    nullable = spec.default is None
    extra: dict[str, Any] = {}
    annotation: Any
    if spec.name == "layout":
        annotation = Name | dict[str, Any]
    elif spec.name == "room":
        # a room object is checked by the renderer's room schema (render_options)
        annotation = Name | Annotated[dict[str, Any], Field(json_schema_extra=_ROOM_OBJECT)]
    elif spec.name in ("hrtf", "adm_programme"):
        annotation = Name
    elif spec.name == "solo":
        annotation = Label
    elif spec.kind == "labels":
        # A list of labels, or the name of one of the layout's orders ("film").
        annotation = Annotated[list[Label], Field(min_length=1, max_length=64)] | Label
    elif spec.kind == "headphone_eq":
        annotation = Annotated[list[EqBand], Field(min_length=1, max_length=64)] | UploadId
    elif spec.kind == "choice":
        annotation = Literal[spec.choices]  # type: ignore[valid-type]
    elif spec.kind == "number":
        annotation = float
        extra = {**_bounds(spec), "allow_inf_nan": False}
    elif spec.kind == "integer":
        annotation = int
        extra = _bounds(spec)
        if spec.power_of_two:
            # JSON Schema has no "power of two"; multipleOf would admit 3 x 64. The
            # allowed values are few (2^6 to 2^20 for the block size): list them.
            extra["json_schema_extra"] = {"enum": _powers_of_two(spec)}
    elif spec.kind == "level":
        number = Annotated[float, Field(allow_inf_nan=False, **_bounds(spec))]
        annotation = number | Literal[spec.choices]  # type: ignore[valid-type]
    elif spec.kind == "rotation":
        # [yaw], [yaw, pitch] or [yaw, pitch, roll] in degrees, or the text "yaw,pitch,roll"
        # (the renderer's check reads both and says what it takes).
        angle = Annotated[float, Field(allow_inf_nan=False)]
        annotation = Annotated[list[angle], Field(min_length=1, max_length=3)] | Name
    else:
        raise ValueError(f"option {spec.name!r} of kind {spec.kind!r} has no HTTP form")
    if nullable:
        annotation = annotation | None
    return annotation, Field(spec.default, description=spec.help, **extra)


def option_fields(specs: tuple[OptionSpec, ...]) -> dict[str, Any]:
    """``create_model`` field definitions of ``specs``."""
    return {spec.name: _field(spec) for spec in specs}


def options_model(
    model_name: str, doc: str, specs: tuple[OptionSpec, ...], /, **fields: Any
) -> Any:
    """A pydantic model (extra keys forbidden) with ``fields`` first, then ``specs``."""
    model = create_model(  # type: ignore[call-overload]
        model_name,
        __config__=ConfigDict(extra="forbid"),
        __doc__=doc,
        **fields,
        **option_fields(specs),
    )
    return model
