"""``/v1/health``, ``/v1/layouts``, ``/v1/rooms`` and ``/v1/hrtf-sets``."""

from __future__ import annotations

import time

from anyio import to_thread
from fastapi import APIRouter, Depends, Request, Response

from earfold.renderer import __version__

from ..auth import current_owner
from ..hrtf_check import HrtfCheckFailed, check_sofa
from ..problems import (
    BAD_REQUEST,
    NO_SPACE,
    NOT_FOUND,
    TOO_LARGE,
    UNAUTHORIZED,
    UNAVAILABLE,
    UNPROCESSABLE,
    UNSUPPORTED,
    Problem,
    problem_responses,
)
from ..request_gate import streams_body
from ..storage import META, Storage, new_id, write_json_atomic
from ..uploads import staged_upload
from .models import Health

router = APIRouter(prefix="/v1")

_SOFA_BODY = {
    "requestBody": {
        "required": True,
        "content": {
            "multipart/form-data": {
                "schema": {
                    "type": "object",
                    "required": ["file"],
                    "properties": {
                        "file": {
                            "type": "string",
                            "format": "binary",
                            "description": "a SOFA (AES69) file",
                        }
                    },
                }
            }
        },
    }
}


@router.get(
    "/health",
    tags=["service"],
    summary="Liveness and queue counts",
    response_model=Health,
    responses=problem_responses(UNAVAILABLE),
)
def health(request: Request) -> dict:
    """Queue counts; 503 (problem details naming the job store) while the queue's store
    does not answer, so that load balancers and container health checks see it."""
    return {
        "status": "ok",
        "version": __version__,
        "queue": request.app.state.queue.counts(),
        "auth": request.app.state.settings.auth_enabled,
    }


@router.get(
    "/layouts",
    tags=["catalog"],
    summary="Loudspeaker layouts, then Ambisonic scenes",
    responses=problem_responses(UNAUTHORIZED),
)
def layouts(owner: str = Depends(current_owner)) -> list[dict]:
    """Every built-in layout: name, ``kind`` (``loudspeakers``), description, source,
    speakers (label, azimuth, elevation, lfe, and ``spread`` for a channel on several
    loudspeakers) and ``orders``, the named channel orders (``wav``, ``film``) as label
    lists, which ``channel_order`` accepts by name.

    Then the Ambisonic scenes (``kind`` ``scene``: ``foa``, ``hoa2`` ... ``hoa7``): order,
    channels, ACN labels, the normalisations they take, no speakers, and ``directions``,
    the [azimuth, elevation] pairs in degrees of the order's virtual loudspeakers (a
    (2 order + 1)-design), to draw the scene's sphere."""
    from earfold.renderer.layouts import LAYOUTS, SCENES

    return [layout.listing() for layout in LAYOUTS.values()] + [
        {**scene.listing(), "directions": scene_directions(scene.order)}
        for scene in SCENES.values()
    ]


def scene_directions(order: int) -> list[list[float]]:
    """[azimuth, elevation] in degrees (0.01 degree) of the virtual loudspeakers of an
    order-``order`` scene (:func:`earfold.renderer.scenes.virtual_layout`)."""
    from earfold.renderer.geometry import vector_to_direction
    from earfold.renderer.scenes import virtual_layout

    az, el = vector_to_direction(virtual_layout(order))
    return [[round(float(a), 2), round(float(e), 2)] for a, e in zip(az, el)]


def room_names() -> list[str]:
    """Names of the room presets the renderer has (only "none" until it has a room model)."""
    try:
        from earfold.renderer.room import ROOMS  # type: ignore[import-not-found]
    except ImportError:
        return ["none"]
    names = list(ROOMS)
    return names if "none" in names else ["none", *names]


@router.get(
    "/rooms", tags=["catalog"], summary="Room presets", responses=problem_responses(UNAUTHORIZED)
)
def rooms(owner: str = Depends(current_owner)) -> list[dict]:
    try:
        from earfold.renderer.room import ROOMS  # type: ignore[import-not-found]
    except ImportError:
        ROOMS = {}
    out = []
    for name in room_names():
        entry = ROOMS.get(name) if hasattr(ROOMS, "get") else None
        described = entry.to_dict() if entry is not None else {}
        out.append({**described, "name": name})
    return out


def hrtf_summary(meta: dict) -> dict:
    out = {k: v for k, v in meta.items() if k not in ("owner", "created_ts", "stored")}
    out["kind"] = "uploaded"
    out["links"] = {"self": f"/v1/hrtf-sets/{meta['id']}"}
    return out


@router.get(
    "/hrtf-sets",
    tags=["hrtf"],
    summary="Shipped and uploaded HRTF sets",
    responses=problem_responses(UNAUTHORIZED),
)
def list_hrtf_sets(request: Request, owner: str = Depends(current_owner)) -> list[dict]:
    from earfold.hrtf_sets import DEFAULT_SET, list_shipped

    shipped = [
        {
            "id": s.name,
            "name": s.name,
            "kind": "shipped",
            "title": s.title,
            "citation": s.citation,
            "licence": s.licence,
            "description": s.description,
            "default": s.name == DEFAULT_SET,
        }
        for s in list_shipped()
    ]
    storage: Storage = request.app.state.storage
    return shipped + [hrtf_summary(m) for m in storage.list_meta("hrtf", owner)]


@router.get(
    "/hrtf-sets/{set_id}",
    tags=["hrtf"],
    summary="One uploaded HRTF set",
    responses=problem_responses(UNAUTHORIZED, NOT_FOUND),
)
def get_hrtf_set(set_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    return hrtf_summary(request.app.state.storage.read_meta("hrtf", set_id, owner))


@router.delete(
    "/hrtf-sets/{set_id}",
    tags=["hrtf"],
    status_code=204,
    summary="Delete an uploaded HRTF set",
    responses=problem_responses(UNAUTHORIZED, NOT_FOUND),
)
def delete_hrtf_set(set_id: str, request: Request, owner: str = Depends(current_owner)) -> Response:
    storage: Storage = request.app.state.storage
    storage.read_meta("hrtf", set_id, owner)
    storage.delete("hrtf", set_id)
    return Response(status_code=204)


@router.post(
    "/hrtf-sets",
    tags=["hrtf"],
    status_code=201,
    openapi_extra=_SOFA_BODY,
    responses=problem_responses(UNAUTHORIZED, BAD_REQUEST, TOO_LARGE, UNSUPPORTED, NO_SPACE),
    summary="Upload a SOFA file as an HRTF set",
)
@streams_body
async def upload_hrtf_set(
    request: Request, response: Response, owner: str = Depends(current_owner)
) -> dict:
    settings = request.app.state.settings
    storage: Storage = request.app.state.storage
    async with staged_upload(
        request, storage, limit=settings.max_hrtf_bytes, min_free_bytes=settings.min_free_bytes
    ) as (folder, files):
        if len(files) != 1:
            raise Problem(BAD_REQUEST, f"send one SOFA file as field 'file', not {len(files)}")
        up = files[0]
        set_id = new_id()
        stored = folder / f"{set_id}.sofa"
        up.path.rename(stored)
        try:
            summary = await to_thread.run_sync(
                lambda: check_sofa(
                    stored,
                    up.filename,
                    timeout_s=settings.hrtf_check_timeout_s,
                    memory_bytes=settings.hrtf_check_memory_bytes,
                )
            )
        except HrtfCheckFailed as exc:
            raise Problem(UNPROCESSABLE, str(exc)) from None
        meta = {
            "id": set_id,
            "owner": owner,
            "name": up.filename,
            "stored": stored.name,
            "size": up.size,
            "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "created_ts": time.time(),
            **summary.to_dict(),
        }
        write_json_atomic(folder / META, meta)
        storage.commit(folder, "hrtf", set_id)
    response.headers["Location"] = f"/v1/hrtf-sets/{set_id}"
    return hrtf_summary(meta)
