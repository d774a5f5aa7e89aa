"""``/v1/renders``: queue a render, follow it, cancel or delete it, download the result.

Everything that can be checked without audio is checked here, from the stem's stored
probe, before the job is queued: layout against channel count, channel order, HRTF set,
room, loudness and true-peak options, output format. Rendering itself happens only in
a worker (:mod:`earfold.service.jobs.worker`); a route never calls DSP.
"""

from __future__ import annotations

import json
import re
import time
from pathlib import Path
from typing import Any

from fastapi import APIRouter, Depends, Query, Request, Response
from fastapi.responses import FileResponse
from pydantic import Field

from earfold.renderer.errors import LayoutError, OptionError
from earfold.renderer.layouts import (
    LAYOUTS,
    SCENES,
    Layout,
    SceneLayout,
    layout_from_dict,
    resolve_channel_order,
    scene_layout,
    stem_scene,
)
from earfold.renderer.render import option

from ..auth import current_owner
from ..job_inputs import HEADPHONE_EQ_KIND
from ..jobs import Job, JobNotFound, JobState, QueueFull, WrongState
from ..jobs.worker import COMPARISON_KIND, output_paths
from ..problems import (
    BAD_REQUEST,
    CONFLICT,
    NO_SPACE,
    NOT_FOUND,
    QUEUE_FULL,
    RANGE_NOT_SATISFIABLE,
    UNAUTHORIZED,
    UNAVAILABLE,
    UNPROCESSABLE,
    Problem,
    problem_responses,
)
from ..signed_links import render_owner
from ..storage import Storage, new_id, valid_id
from .catalog import room_names
from .models import RenderView
from .option_models import EqBand, http_options, options_model
from .stems import scene_hint

router = APIRouter(
    prefix="/v1/renders", tags=["renders"], responses=problem_responses(UNAUTHORIZED)
)

_MEDIA = {"wav": "audio/wav", "flac": "audio/flac"}
_UNSAFE = re.compile(r"[^A-Za-z0-9._ -]+")


RenderRequest = options_model(
    "RenderRequest",
    "What to render (the JSON body of ``POST /v1/renders``): every render option of the "
    "renderer's declaration offered over HTTP.",
    http_options(),
    stem_id=(str, Field(pattern=r"^[0-9a-f]{32}$", description="id from POST /v1/stems")),
)


def _iso(ts: float | None) -> str | None:
    """ISO 8601 UTC with milliseconds, or None."""
    if ts is None:
        return None
    return time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(ts)) + f".{int(ts % 1 * 1000):03d}Z"


def render_view(job: Job, queue_position: int | None = None) -> dict:
    """The public JSON of a render job; ``queue_position`` as :func:`queue_position`
    gives it (only queued jobs have one)."""
    base = f"/v1/renders/{job.id}"
    done = job.state is JobState.DONE
    links = {
        "self": base,
        "stem": f"/v1/stems/{job.payload.get('stem_id')}",
        "audio": f"{base}/audio" if done else None,
        "report": f"{base}/report" if done else None,
    }
    return {
        "id": job.id,
        "state": job.state.value,
        "progress": round(job.progress, 4),
        "queue_position": queue_position if job.state is JobState.QUEUED else None,
        "message": job.message or None,
        "attempts": job.attempts,
        "created": _iso(job.created),
        "started": _iso(job.started),
        "finished": _iso(job.finished),
        "request": job.payload.get("request", {}),
        "result": job.result,
        "links": links,
    }


def queue_position(queue: Any, job: Job) -> int | None:
    """1 for the next job to start, n with n - 1 jobs ahead; None unless ``job`` is queued
    (the store is asked only then)."""
    return queue.queue_position(job.id) if job.state is JobState.QUEUED else None


def _names() -> str:
    """Every layout name a request may give: loudspeaker layouts, then scenes."""
    return f"{', '.join(LAYOUTS)}, or an Ambisonic scene {', '.join(SCENES)}"


def _layout(value: str | dict | None, stem: dict) -> Layout:
    if value is None:
        value = stem.get("suggested_layout")
        if value is None:
            hint = scene_hint(stem["channels"])
            maybe = f" (it may be Ambisonic scene {hint['layout']})" if hint else ""
            raise Problem(
                UNPROCESSABLE,
                f"the stem has {stem['channels']} channels and no layout "
                f"is suggested for it{maybe}; give 'layout' (one of {_names()}) "
                "or a layout object",
            )
    if isinstance(value, dict):
        try:
            return layout_from_dict(value, name="custom", origin="layout")
        except LayoutError as exc:
            raise Problem(UNPROCESSABLE, str(exc)) from None
    # Names only: over HTTP a layout is never read from a server path.
    key = value.strip().lower()
    for name, layout in (*LAYOUTS.items(), *SCENES.items()):
        if name.lower() == key:
            return layout
    raise Problem(
        UNPROCESSABLE,
        f"unknown layout {value!r}; choose one of {_names()} or send a layout object",
    )


def _refuse(field: str, message: str) -> Problem:
    return Problem(UNPROCESSABLE, message, errors=[{"field": field, "message": message}])


def _scene_checks(req: Any, layout: Layout, stem: dict) -> None:
    """422 naming the option for a scene option on loudspeakers, or a loudspeaker option
    (channel order, stereo fold) or a channel count that does not fit on a scene; the
    renderer's plan refuses the same (:mod:`earfold.renderer.render.plan`)."""
    scene_opts = ("ambisonic_norm", "ambisonic_decoder", "rotate")
    if not isinstance(layout, SceneLayout):
        for name in scene_opts:
            if getattr(req, name, None) is not None:
                raise _refuse(
                    name,
                    f"{name} applies to Ambisonic scenes only (layout {', '.join(SCENES)}); "
                    f"layout {layout.name!r} is loudspeakers: leave {name} out, or name "
                    "the scene's layout",
                )
        return
    try:
        if getattr(req, "rotate", None) is not None:
            option("rotate").check(req.rotate)
    except OptionError as exc:
        raise _refuse("rotate", str(exc)) from None
    try:
        scene = scene_layout(layout.name, req.ambisonic_norm or layout.normalisation)
    except LayoutError as exc:
        raise _refuse("ambisonic_norm", str(exc)) from None
    if req.channel_order:
        raise _refuse(
            "channel_order",
            f"channel_order does not apply to Ambisonic scene {scene.name!r}: its channels "
            "are in ACN order (AmbiX), or W X Y Z with ambisonic_norm fuma; leave it out",
        )
    if getattr(req, "fold", None) == "stereo":
        raise _refuse(
            "fold",
            f"fold stereo is the ITU-R BS.775 fold-down of loudspeaker channels; "
            f"{scene.name!r} is an Ambisonic scene: render it binaurally",
        )
    try:  # the stem's own scene: this order, or a higher one decoded at this order
        stem_scene(scene, stem["channels"])
    except LayoutError as exc:
        raise _refuse("layout", str(exc)) from None


#: Options an ADM master's render refuses in this version, with the value that means
#: "not given" (the renderer's plan refuses the same: earfold.renderer.render.plan).
_NOT_FOR_ADM = (
    "channel_order",
    "solo",
    "fold",
    "headphone_eq",
    "ambisonic_norm",
    "ambisonic_decoder",
    "rotate",
)


def _adm_checks(req: Any, stem: dict) -> None:
    """422 naming the option for a layout, or an option an ADM master's render does not
    take, on an ADM master; for ``adm_programme``, a programme the master does not have;
    and for ``adm_programme`` on any other stem."""
    adm = stem.get("adm")
    programme = getattr(req, "adm_programme", None)
    if not adm:
        if programme is not None:
            raise _refuse(
                "adm_programme",
                "adm_programme applies to ADM masters only (a WAV with BS.2076 axml and "
                "chna chunks); this stem is channels: leave it out",
            )
        return
    name = stem["files"][0]["name"] if stem.get("files") else "the stem"
    if req.layout is not None:
        raise _refuse(
            "layout",
            f"{name!r} is an ADM object master: its metadata (ITU-R BS.2076, axml and chna) "
            "places every track, so it takes no layout; leave 'layout' out",
        )
    for option_name in _NOT_FOR_ADM:
        value = getattr(req, option_name, None)
        given = value not in (None, [], "")
        if option_name == "fold":
            given = value == "stereo"
        if given:
            raise _refuse(
                option_name,
                f"{option_name}: not available for ADM masters in this version ({name!r} is "
                "rendered as its metadata places it); leave it out",
            )
    listed = adm.get("programmes") or []
    if programme is not None and len(listed) == adm.get("programmes_total", len(listed)):
        if not any(programme.upper() == p["id"] or programme == p["name"] for p in listed):
            choices = ", ".join(f"{p['id']} ({p['name']!r})" for p in listed) or "none"
            raise _refuse(
                "adm_programme",
                f"no audioProgramme {programme!r} in {name!r}; its programmes: {choices}",
            )


def room_object(value: dict, field: str) -> None:
    """422 naming ``field`` unless ``value`` is a room the renderer accepts (the schema of
    a ``--room FILE.json``, :func:`earfold.renderer.room.room_from_dict`)."""
    from earfold.renderer.errors import RoomError
    from earfold.renderer.room import room_from_dict

    try:
        room_from_dict(value)
    except RoomError as exc:
        raise Problem(
            UNPROCESSABLE, f"{field}: {exc}", errors=[{"field": field, "message": str(exc)}]
        ) from None


def uploaded_bands(eq_id: str, storage: Storage, owner: str) -> list[Any]:
    """The bands of the owner's uploaded headphone EQ ``eq_id`` (none for an impulse
    response), for the stem's checks; 422 if there is no such upload."""
    try:
        meta = storage.read_meta(HEADPHONE_EQ_KIND, eq_id, owner)
    except Problem:
        raise Problem(
            UNPROCESSABLE,
            f"headphone_eq: no uploaded headphone EQ with id {eq_id!r}; upload one with "
            "POST /v1/headphone-eq (GET /v1/headphone-eq lists yours) or give a list of bands",
            errors=[{"field": "headphone_eq", "message": "unknown id"}],
        ) from None
    return [EqBand.model_validate(b) for b in meta["summary"].get("band_list", [])]


def _hrtf(value: str | None, storage: Storage, owner: str) -> tuple[str | None, str | None]:
    """(shipped name, uploaded id) for the request's HRTF set; 422 if unknown."""
    from earfold.hrtf_sets import DEFAULT_SET, SHIPPED

    if value is None:
        return DEFAULT_SET, None
    for s in SHIPPED:
        if s.name == value.strip().lower():
            return s.name, None
    if valid_id(value):
        try:
            storage.read_meta("hrtf", value, owner)
            return None, value
        except Problem:
            pass
    names = ", ".join(repr(s.name) for s in SHIPPED)
    raise Problem(
        UNPROCESSABLE,
        f"unknown HRTF set {value!r}; shipped sets: {names}, or the id "
        "of a set you uploaded (GET /v1/hrtf-sets)",
    )


def _download_name(stem: dict, fmt: str) -> str:
    first = Path(stem["files"][0]["name"]).stem if stem["files"] else "render"
    if len(stem["files"]) > 1 and stem.get("labels_source") == "file names":
        first = re.split(r"[._\- ]", first)[0] or first  # drop the channel label
    base = _UNSAFE.sub("_", first).strip(" .") or "render"
    return f"{base[:100]}.binaural.{fmt}"


def _job(request: Request, render_id: str, owner: str) -> Job:
    if not valid_id(render_id):
        raise Problem(NOT_FOUND, f"no render with id {render_id!r}")
    try:
        job = request.app.state.queue.get(render_id)
    except JobNotFound:
        raise Problem(NOT_FOUND, f"no render with id {render_id!r}") from None
    if job.owner != owner or job.payload.get("kind") == COMPARISON_KIND:
        raise Problem(NOT_FOUND, f"no render with id {render_id!r}")
    return job


def _checked_layout(req: Any, stem: dict) -> Layout:
    """The layout of a render of a stem of channels, checked with its scene options,
    channel count, channel order and solo (422 problems otherwise)."""
    layout = _layout(req.layout, stem)
    _scene_checks(req, layout, stem)
    if not isinstance(layout, SceneLayout) and layout.channels != stem["channels"]:
        raise Problem(
            UNPROCESSABLE,
            f"the stem has {stem['channels']} channel(s) but layout "
            f"{layout.name!r} has {layout.channels} ({', '.join(layout.labels)}); "
            "choose the layout the stem was mixed for",
        )
    try:
        if isinstance(layout, SceneLayout):
            # its labels in the normalisation asked for (W X Y Z for FuMa)
            layout = scene_layout(layout.name, req.ambisonic_norm or layout.normalisation)
        elif req.channel_order:
            resolve_channel_order(layout, req.channel_order)
        elif stem.get("labels_source") == "file names" and stem.get("channel_labels"):
            resolve_channel_order(layout, stem["channel_labels"])
        if getattr(req, "solo", None):
            layout.index(req.solo)  # an unknown label: 422 now, not a failed job later
    except LayoutError as exc:
        raise Problem(UNPROCESSABLE, str(exc)) from None
    return layout


def render_options(req: Any, stem: dict, storage: Storage, owner: str) -> tuple[dict, str | None]:
    """A render job's options and uploaded HRTF id for ``req`` on ``stem``, every option
    checked against the stem's probe (422 problems otherwise). Also used by comparisons,
    whose variants are renders of one stem. An ADM master (``stem["adm"]``) takes no
    layout: its metadata places the tracks."""
    _adm_checks(req, stem)
    layout = None if stem.get("adm") else _checked_layout(req, stem)
    try:
        option("block_size").check(req.block_size)
    except OptionError as exc:
        raise Problem(UNPROCESSABLE, str(exc)) from None
    if isinstance(req.room, dict):
        room_object(req.room, "room")
    elif req.room not in (rooms := room_names()):
        raise Problem(UNPROCESSABLE, f"unknown room {req.room!r}; choose one of {', '.join(rooms)}")
    fmt = req.format or "wav"  # the output is named .wav or .flac by the service
    if fmt == "flac" and req.subtype == "FLOAT":
        raise Problem(
            UNPROCESSABLE,
            "FLAC holds integer samples only; choose subtype PCM_16 or PCM_24, or format 'wav'",
        )
    shipped, hrtf_id = _hrtf(req.hrtf, storage, owner)
    bands = req.headphone_eq if isinstance(req.headphone_eq, list) else []
    if isinstance(req.headphone_eq, str):
        bands = uploaded_bands(req.headphone_eq, storage, owner)
    for i, band in enumerate(bands):
        if band.frequency >= stem["samplerate"] / 2:
            raise Problem(
                UNPROCESSABLE,
                f"headphone_eq band {i + 1}: frequency "
                f"{band.frequency:g} Hz is not below the stem's Nyquist frequency, "
                f"{stem['samplerate'] / 2:g} Hz",
            )
    # Every declared option, as JSON; the worker checks them again against the declaration
    # (earfold.service.jobs.render_child.build_settings).
    options = req.model_dump(mode="json", include={s.name for s in http_options()})
    if layout is not None:
        options["layout"] = layout.to_dict() if isinstance(req.layout, dict) else layout.name
    options.update(
        hrtf=shipped,
        format=fmt,
    )
    return options, hrtf_id


@router.post(
    "",
    status_code=202,
    summary="Queue a render",
    response_model=RenderView,
    responses=problem_responses(BAD_REQUEST, NOT_FOUND, QUEUE_FULL, UNAVAILABLE, NO_SPACE),
)
def create_render(
    req: RenderRequest,  # type: ignore[valid-type]  # a model built from the declaration
    request: Request,
    response: Response,
    owner: str = Depends(current_owner),
) -> dict:
    body: Any = req  # a model built at import time: typed by the declaration, not mypy
    settings = request.app.state.settings
    storage: Storage = request.app.state.storage
    stem = storage.read_meta("stems", body.stem_id, owner)
    options, hrtf_id = render_options(body, stem, storage, owner)
    payload = {
        "stem_id": body.stem_id,
        "hrtf_id": hrtf_id,
        "options": options,
        "download_name": _download_name(stem, options["format"]),
        "request": body.model_dump(),
    }
    job_id = new_id()
    try:
        job = request.app.state.queue.submit(job_id, owner, payload, max_queued=settings.max_queued)
    except QueueFull as exc:
        raise Problem(
            QUEUE_FULL,
            f"the queue is full ({exc}); try again in a minute",
            headers={"Retry-After": "30"},
        ) from None
    response.headers["Location"] = f"/v1/renders/{job_id}"
    return render_view(job, queue_position(request.app.state.queue, job))


@router.get("", summary="List your renders, newest first", response_model=list[RenderView])
def list_renders(
    request: Request, owner: str = Depends(current_owner), limit: int = Query(100, ge=1, le=1000)
) -> list[dict]:
    # Comparison builds share the queue but are not renders (see /v1/comparisons).
    queue = request.app.state.queue
    jobs = queue.list(owner=owner, limit=limit)
    places = queue.queue_positions() if any(j.state is JobState.QUEUED for j in jobs) else {}
    renders = [j for j in jobs if j.payload.get("kind") != COMPARISON_KIND]
    return [render_view(j, places.get(j.id)) for j in renders]


@router.get(
    "/{render_id}",
    summary="State and progress of a render",
    response_model=None,
    responses={200: {"model": RenderView}, **problem_responses(NOT_FOUND)},
)
async def get_render(
    render_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    # The one route clients poll: async (no thread-pool hop), one indexed read on the
    # store's read-only connection (two while queued: the place in line), and JSON built
    # directly, without validating our own answer against RenderView (the fuzz test
    # checks that it matches).
    job = _job(request, render_id, owner)
    view = render_view(job, queue_position(request.app.state.queue, job))
    return Response(json.dumps(view, separators=(",", ":")), media_type="application/json")


@router.delete(
    "/{render_id}",
    summary="Cancel a queued or running render, or delete a finished one",
    response_model=None,
    responses={
        200: {"model": RenderView, "description": "cancelled"},
        204: {"description": "deleted"},
        **problem_responses(NOT_FOUND),
    },
)
def delete_render(
    render_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    job = _job(request, render_id, owner)
    queue = request.app.state.queue
    storage: Storage = request.app.state.storage
    if not job.state.finished:
        try:
            job = queue.cancel(render_id)
        except WrongState:
            job = queue.get(render_id)  # finished meanwhile: fall through to delete
        else:
            return Response(
                json.dumps(render_view(job)), status_code=200, media_type="application/json"
            )
    try:
        queue.delete(render_id)
    except (WrongState, JobNotFound):
        pass
    storage.delete("renders", render_id)
    return Response(status_code=204)


def _done(request: Request, render_id: str, owner: str) -> Job:
    job = _job(request, render_id, owner)
    if job.state is not JobState.DONE:
        hint = {"queued": "poll until it is done", "running": "poll until it is done"}.get(
            job.state.value, "its output was not kept"
        )
        raise Problem(CONFLICT, f"render {render_id!r} is {job.state.value}; {hint}")
    return job


@router.get(
    "/{render_id}/audio",
    summary="Download the binaural file (HTTP Range supported)",
    response_class=FileResponse,
    responses={
        200: {"content": {"audio/wav": {}, "audio/flac": {}}},
        206: {"description": "partial content", "content": {"audio/wav": {}, "audio/flac": {}}},
        **problem_responses(NOT_FOUND, CONFLICT, RANGE_NOT_SATISFIABLE),
    },
)
def get_audio(
    render_id: str,
    request: Request,
    key: str | None = Query(
        None, max_length=80, description="a signed key from POST /v1/renders/{id}/listen"
    ),
):
    job = _done(request, render_id, render_owner(request, render_id, key))
    output, _ = output_paths(request.app.state.storage, job)
    if not output.is_file():
        raise Problem(NOT_FOUND, f"the audio of render {render_id!r} is gone (expired or deleted)")
    fmt = job.payload["options"].get("format", "wav")
    return FileResponse(
        output,
        media_type=_MEDIA.get(fmt, "application/octet-stream"),
        filename=job.payload.get("download_name") or f"render.{fmt}",
    )


@router.get(
    "/{render_id}/report",
    summary="The render report (JSON)",
    responses=problem_responses(NOT_FOUND, CONFLICT),
)
def get_report(render_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    job = _done(request, render_id, owner)
    _, report = output_paths(request.app.state.storage, job)
    try:
        return json.loads(report.read_text())
    except (OSError, ValueError):
        raise Problem(NOT_FOUND, f"the report of render {render_id!r} is gone") from None
