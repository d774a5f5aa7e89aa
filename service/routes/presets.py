"""``/v1/presets``: named render settings and loudspeaker layouts, kept per owner.

A ``settings`` preset's body is any set of the render options of ``POST /v1/renders``
(no ``stem_id``), checked by the very model that checks a render request; a ``layout``
preset's body is a layout object, checked by the renderer's layout schema (the same as
``layout`` in a render request). What depends on a stem (channel counts, a Nyquist
frequency) is checked when the preset is used in a render. Storage:
:mod:`earfold.service.presets`.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request, Response
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from earfold.renderer.errors import LayoutError, OptionError
from earfold.renderer.layouts import layout_from_dict
from earfold.renderer.render import option

from ..auth import current_owner
from ..presets import MAX_PRESETS, PresetStore, preset_view
from ..problems import (
    BAD_REQUEST,
    CONFLICT,
    NO_SPACE,
    NOT_FOUND,
    UNAUTHORIZED,
    UNPROCESSABLE,
    Problem,
    problem_responses,
)
from ..storage import Storage
from .renders import RenderRequest, room_object, uploaded_bands

__all__ = ["PresetRequest", "PresetView", "router", "settings_body"]

router = APIRouter(
    prefix="/v1/presets", tags=["presets"], responses=problem_responses(UNAUTHORIZED)
)

#: Longest preset name (characters).
MAX_NAME_CHARS = 80

#: Kinds of option whose declared check needs no stem (numbers, words).
_PLAIN_KINDS = ("number", "integer", "level", "choice")

#: A stand-in stem id: the render request model needs one; a preset holds none.
_NO_STEM = "0" * 32


class PresetRequest(BaseModel):
    """The JSON body of ``POST /v1/presets`` and ``PUT /v1/presets/{id}``."""

    model_config = ConfigDict(extra="forbid")

    name: Annotated[str, Field(min_length=1, max_length=MAX_NAME_CHARS)] = Field(
        description=f"1 to {MAX_NAME_CHARS} characters, shown in lists"
    )
    kind: Literal["settings", "layout"] = Field(
        description="settings: render options; layout: a loudspeaker layout object"
    )
    body: dict[str, Any] = Field(
        description="settings: any render options of POST /v1/renders but stem_id; "
        "layout: a layout object (as 'layout' in a render request)"
    )

    @field_validator("name")
    @classmethod
    def _visible(cls, value: str) -> str:
        name = value.strip()
        if not name or not name.isprintable():
            raise ValueError("a name needs a visible character and no control characters")
        return name


class PresetView(BaseModel):
    """A stored preset."""

    id: str = Field(pattern=r"^[0-9a-f]{32}$")
    name: str
    kind: Literal["settings", "layout"]
    body: dict[str, Any]
    created: str
    updated: str


def _body_errors(exc: ValidationError) -> Problem:
    errors = [
        {"field": ".".join(["body", *map(str, e["loc"])]), "message": e["msg"]}
        for e in exc.errors()
    ]
    detail = "; ".join(f"{e['field']}: {e['message']}" for e in errors)
    return Problem(UNPROCESSABLE, detail, title="Invalid request", errors=errors)


def settings_body(
    body: dict[str, Any], storage: Storage | None = None, owner: str = ""
) -> dict[str, Any]:
    """A settings preset's body checked by the render request model: the options given,
    in their checked JSON form; 422 naming the field otherwise. With ``storage``, an
    uploaded headphone EQ's id must be one of ``owner``'s."""
    if "stem_id" in body:
        raise Problem(
            UNPROCESSABLE,
            "body.stem_id: a settings preset holds render options only; the stem is chosen "
            "when the preset is used",
            errors=[{"field": "body.stem_id", "message": "not allowed in a preset"}],
        )
    try:
        model: Any = RenderRequest.model_validate({**body, "stem_id": _NO_STEM})
    except ValidationError as exc:
        raise _body_errors(exc) from None
    if isinstance(model.layout, dict):
        _layout_object(model.layout, "body.layout")
    if isinstance(model.room, dict):
        room_object(model.room, "body.room")
    if isinstance(model.headphone_eq, str) and storage is not None:
        try:
            uploaded_bands(model.headphone_eq, storage, owner)
        except Problem as exc:
            raise Problem(
                exc.status,
                f"body.{exc.detail}",
                errors=[{"field": "body.headphone_eq", "message": "unknown id"}],
            ) from None
    checked: dict[str, Any] = model.model_dump(mode="json", exclude_unset=True)
    checked.pop("stem_id", None)
    # What the model cannot say (a power of two), as the worker will check it.
    for name, value in checked.items():
        spec = option(name)
        if spec.kind in _PLAIN_KINDS and value is not None:
            try:
                spec.check(value)
            except OptionError as exc:
                raise Problem(
                    UNPROCESSABLE,
                    f"body.{name}: {exc}",
                    errors=[{"field": f"body.{name}", "message": str(exc)}],
                ) from None
    return checked


def _layout_object(body: dict[str, Any], field: str) -> None:
    try:
        layout_from_dict(body, name="custom")
    except LayoutError as exc:
        raise Problem(
            UNPROCESSABLE,
            f"{field}: {exc}",
            errors=[{"field": field, "message": str(exc)}],
        ) from None


def _checked(req: PresetRequest, request: Request, owner: str) -> dict[str, Any]:
    if req.kind == "settings":
        return settings_body(req.body, request.app.state.storage, owner)
    _layout_object(req.body, "body")
    return req.body


def _store(request: Request) -> PresetStore:
    return PresetStore(request.app.state.storage)


@router.get("", summary="List your presets, by name", response_model=list[PresetView])
def list_presets(
    request: Request,
    owner: str = Depends(current_owner),
    kind: Literal["settings", "layout"] | None = Query(None, description="only this kind"),
) -> list[dict]:
    metas = _store(request).list(owner)
    return [preset_view(m) for m in metas if kind is None or m["kind"] == kind]


@router.post(
    "",
    status_code=201,
    summary="Save a preset",
    description=f"At most {MAX_PRESETS} presets per owner; one more is refused (409).",
    response_model=PresetView,
    responses=problem_responses(BAD_REQUEST, CONFLICT, NO_SPACE),
)
def create_preset(
    req: PresetRequest, request: Request, response: Response, owner: str = Depends(current_owner)
) -> dict:
    meta = _store(request).create(owner, req.name, req.kind, _checked(req, request, owner))
    response.headers["Location"] = f"/v1/presets/{meta['id']}"
    return preset_view(meta)


@router.get(
    "/{preset_id}",
    summary="One preset",
    response_model=PresetView,
    responses=problem_responses(NOT_FOUND),
)
def get_preset(preset_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    return preset_view(_store(request).get(preset_id, owner))


@router.put(
    "/{preset_id}",
    summary="Replace a preset's name, kind and body",
    response_model=PresetView,
    responses=problem_responses(BAD_REQUEST, NOT_FOUND, NO_SPACE),
)
def replace_preset(
    preset_id: str, req: PresetRequest, request: Request, owner: str = Depends(current_owner)
) -> dict:
    store = _store(request)
    store.get(preset_id, owner)  # 404 before the body is judged
    return preset_view(
        store.replace(preset_id, owner, req.name, req.kind, _checked(req, request, owner))
    )


@router.delete(
    "/{preset_id}",
    status_code=204,
    summary="Delete a preset",
    responses=problem_responses(NOT_FOUND),
)
def delete_preset(
    preset_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    _store(request).delete(preset_id, owner)
    return Response(status_code=204)
