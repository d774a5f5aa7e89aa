"""``/v1/stems``: upload (streamed to disk), describe and delete stems."""

from __future__ import annotations

import hashlib
import json
import re
import time
from pathlib import Path

from anyio import to_thread
from fastapi import APIRouter, Depends, Query, Request, Response
from pydantic import BaseModel, Field

from earfold.renderer.errors import AdmError, AudioError
from earfold.renderer.io import measure_levels, probe_stem
from earfold.renderer.layouts import (
    LAYOUTS,
    SCENES,
    labels_from_filenames,
    labels_from_mask,
    suggest_layout,
)
from earfold.renderer.objects import PATH_POINTS, adm_overview, probe_adm

from ..auth import current_owner
from ..problems import (
    BAD_REQUEST,
    CONFLICT,
    NO_SPACE,
    NOT_FOUND,
    TOO_LARGE,
    UNAUTHORIZED,
    UNPROCESSABLE,
    UNSUPPORTED,
    Problem,
    problem_responses,
)
from ..request_gate import streams_body
from ..storage import META, Storage, new_id, write_json_atomic
from ..uploads import MAX_PARTS, UploadedFile, staged_upload

router = APIRouter(prefix="/v1/stems", tags=["stems"], responses=problem_responses(UNAUTHORIZED))

#: File of a stem's levels in its folder (GET /v1/stems/{id}/levels).
LEVELS = "levels.json"


class ChannelLevelsView(BaseModel):
    """Levels of one channel; dB relative to full scale, null where silent."""

    index: int = Field(ge=0, description="channel in file order, from 0")
    label: str | None = Field(description="the channel's label, where known")
    peak_dbfs: float | None = Field(description="sample peak, 20 log10 max|x|")
    rms_dbfs: float | None = Field(description="RMS, 10 log10 mean(x^2)")
    low_share: float | None = Field(
        ge=0, le=1, description="share of the channel's energy below 120 Hz"
    )
    overview: list[tuple[float | None, float | None]] = Field(
        description="[peak dB, RMS dB] of each of 'points' consecutive windows"
    )


class StemLevelsView(BaseModel):
    """Levels of every channel of a stem."""

    frames: int = Field(ge=0)
    sample_rate: int = Field(gt=0)
    points: int = Field(gt=0, description="windows of each overview")
    channels: list[ChannelLevelsView]


class ObjectPathView(BaseModel):
    """One object of an ADM master: its direction and gain over its time span."""

    object: str = Field(description="the audioObject's name")
    object_id: str = Field(description="the audioObject's ID, e.g. AO_1001")
    track: int = Field(ge=1, description="the file track that carries it, from 1 (chna)")
    start_s: float = Field(ge=0, description="when it starts, s from the file's start")
    end_s: float | None = Field(description="when it ends (s); null: with the file")
    muted: bool
    cartesian: bool = Field(description="whether the file gives X, Y, Z rather than angles")
    blocks: int = Field(ge=1, description="its audioBlockFormats")
    times_s: list[float] = Field(description="sample times, s from the file's start")
    azimuth_deg: list[float] = Field(
        description="azimuth at each time, degrees counter-clockwise from the front (left +)"
    )
    elevation_deg: list[float] = Field(description="elevation at each time, degrees up")
    gain: list[float] = Field(description="linear gain at each time (0 where muted)")


class BedDirectionView(BaseModel):
    """One bed loudspeaker (DirectSpeakers) of an ADM master."""

    label: str | None = Field(description="its speaker label, e.g. M+030")
    track: int = Field(ge=1)
    azimuth_deg: float
    elevation_deg: float
    lfe: bool


class StemObjectsView(BaseModel):
    """An ADM master's programme: its summary, object paths and bed directions."""

    model_config = {"extra": "allow"}

    programme: dict = Field(description="the programme drawn: {id, name}")
    programmes: list[dict] = Field(description="every programme of the file: {id, name}")
    duration_s: float
    objects: int = Field(ge=0, description="object tracks the programme plays")
    beds: int = Field(ge=0, description="bed loudspeakers the programme plays")
    hoa_tracks: int = Field(ge=0, description="HOA tracks the programme plays")
    ignored: list[str] = Field(description="what is not rendered, and why")
    points: int = Field(description="most samples of each path")
    paths: list[ObjectPathView]
    bed_directions: list[BedDirectionView]


_SAFE_EXT = re.compile(r"\.[a-z0-9]{1,5}")
_SAFE_LABEL = re.compile(r"[A-Za-z0-9+\-]{1,16}")

_UPLOAD_BODY = {
    "requestBody": {
        "required": True,
        "content": {
            "multipart/form-data": {
                "schema": {
                    "type": "object",
                    "required": ["file"],
                    "properties": {
                        "file": {
                            "type": "array",
                            "items": {"type": "string", "format": "binary"},
                            "minItems": 1,
                            "maxItems": MAX_PARTS,
                            "description": "one multichannel file, or several mono files "
                            f"(at most {MAX_PARTS}); parts of other fields carry no files",
                        },
                    },
                }
            }
        },
    }
}


def stem_summary(meta: dict) -> dict:
    """The public JSON of a stem (its metadata without the owner), with its
    ``scene_hint`` (:func:`scene_hint`; none for an ADM master, whose metadata places its
    tracks) and ``adm`` (the master's summary, null for other stems)."""
    out = {k: v for k, v in meta.items() if k not in ("owner", "created_ts")}
    out["adm"] = meta.get("adm")
    out["scene_hint"] = None if out["adm"] else scene_hint(meta["channels"])
    out["files"] = [{k: v for k, v in f.items() if k != "stored"} for f in meta["files"]]
    out["links"] = {"self": f"/v1/stems/{meta['id']}"}
    return out


def scene_hint(channels: int) -> dict | None:
    """For a stem of (N + 1)**2 channels (4, 9, ... 64), the Ambisonic scene it could be:
    ``{"layout", "order", "channels"}``; None otherwise. Only a hint: a 4-channel file
    may as well be 4.0, so the suggested layout is never a scene."""
    for scene in SCENES.values():
        if scene.channels == channels:
            return {"layout": scene.name, "order": scene.order, "channels": channels}
    return None


def _stored_name(index: int, upload: UploadedFile, label: str | None) -> str:
    suffix = Path(upload.filename).suffix.lower()
    ext = suffix if _SAFE_EXT.fullmatch(suffix) else ".audio"
    # The label goes into the stored name so that the renderer reads it from the file
    # name, exactly as it does for files given on the command line.
    tag = f".{label}" if label and _SAFE_LABEL.fullmatch(label) else ""
    return f"{index:02d}{tag}{ext}"


def _user_message(exc: Exception | str, names: dict[str, str]) -> str:
    """A renderer message with our stored paths replaced by the client's file names."""
    text = str(exc)
    for stored, user in sorted(names.items(), key=lambda kv: -len(kv[0])):
        text = text.replace(stored, user)
    return text


def _probe(
    folder: Path, uploads: list[UploadedFile], max_channels: int, max_duration_s: float
) -> dict:
    """Name the parts, probe them and describe the stem; raises Problem (415/422)."""
    several = len(uploads) > 1
    labels = labels_from_filenames([u.filename for u in uploads]) if several else None
    stored: list[Path] = []
    names: dict[str, str] = {}
    for i, up in enumerate(uploads):
        dest = folder / _stored_name(i, up, labels[i] if labels else None)
        up.path.rename(dest)
        stored.append(dest)
        names[str(dest)] = up.filename
        names[dest.name] = up.filename
    # Each file alone first: what fails here is the file's own format (415) ...
    infos = []
    for path in stored:
        try:
            infos.append(probe_stem([path]))
        except AudioError as exc:
            raise Problem(UNSUPPORTED, _user_message(exc, names)) from None
    # ... and what fails only together is a mismatch between the files (422).
    try:
        stem = probe_stem(stored)
    except AudioError as exc:
        raise Problem(UNPROCESSABLE, _user_message(exc, names)) from None
    if stem.channels > max_channels:
        raise Problem(
            UNPROCESSABLE,
            f"the stem has {stem.channels} channels; this server accepts at most {max_channels}",
        )
    if stem.duration > max_duration_s:
        raise Problem(
            UNPROCESSABLE,
            f"the stem lasts {stem.duration:.1f} s; this server "
            f"accepts at most {max_duration_s:.0f} s",
        )
    # A single WAV may be an ADM master (BS.2076 metadata in axml, BS.2088 chna): its
    # metadata places every track, so it gets no labels and no suggested layout. A master
    # whose metadata cannot be read is refused now: the renderer would refuse it later,
    # and as plain channels it cannot be rendered either.
    adm = None
    if not several:
        try:
            adm = probe_adm(stored[0])
        except AdmError as exc:
            raise Problem(UNPROCESSABLE, _user_message(exc, names)) from None
    source = "file names" if labels else None
    if adm is not None:
        labels, source = None, None
    elif not several and stem.channel_mask:
        labels = labels_from_mask(stem.channel_mask, stem.channels)
        source = "WAV channel mask" if labels else None
    layout = None if adm is not None else suggest_layout(stem.channels, labels)
    if layout is None and labels is not None:
        layout = suggest_layout(stem.channels)
    # One read of the whole stem, in blocks, measures its levels (kept beside it for the
    # desk) and, for a float stem, refuses a NaN or infinite sample now, named, rather
    # than when a render meets it (integer PCM cannot hold one).
    try:
        levels = measure_levels(
            stem,
            labels=labels or (layout.labels if layout else None),
            check_finite=stem.subtype in ("FLOAT", "DOUBLE"),
        )
    except AudioError as exc:
        raise Problem(UNPROCESSABLE, _user_message(exc, names)) from None
    write_json_atomic(folder / LEVELS, levels.to_dict(), indent=None)
    return {
        "files": [
            {
                "name": up.filename,
                "stored": path.name,
                "size": up.size,
                "sha256": up.sha256,
                "channels": info.channels,
                "frames": info.frames,
            }
            for up, path, info in zip(uploads, stored, infos)
        ],
        "format": stem.format,
        "subtype": stem.subtype,
        "samplerate": stem.samplerate,
        "channels": stem.channels,
        "frames": stem.frames,
        "duration_s": round(stem.duration, 6),
        "channel_mask": None if stem.channel_mask is None else f"0x{stem.channel_mask:X}",
        "channel_labels": labels,
        "labels_source": source,
        "suggested_layout": layout.name if layout else None,
        "adm": adm,
        "warnings": [_user_message(w, names) for w in stem.warnings],
    }


@router.post(
    "",
    status_code=201,
    openapi_extra=_UPLOAD_BODY,
    responses=problem_responses(BAD_REQUEST, TOO_LARGE, UNSUPPORTED, NO_SPACE),
    summary="Upload a stem: one multichannel file or several mono files",
)
@streams_body
async def upload_stem(
    request: Request, response: Response, owner: str = Depends(current_owner)
) -> dict:
    settings = request.app.state.settings
    storage: Storage = request.app.state.storage
    async with staged_upload(
        request, storage, limit=settings.max_upload_bytes, min_free_bytes=settings.min_free_bytes
    ) as (folder, uploads):
        described = await to_thread.run_sync(
            _probe, folder, uploads, settings.max_channels, settings.max_duration_s
        )
        stem_id = new_id()
        meta = {
            "id": stem_id,
            "owner": owner,
            "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "created_ts": time.time(),
            **described,
        }
        write_json_atomic(folder / META, meta)
        storage.commit(folder, "stems", stem_id)
    response.headers["Location"] = f"/v1/stems/{stem_id}"
    return stem_summary(meta)


@router.get("", summary="List your stems")
def list_stems(request: Request, owner: str = Depends(current_owner)) -> list[dict]:
    return [stem_summary(m) for m in request.app.state.storage.list_meta("stems", owner)]


@router.get("/{stem_id}", summary="Describe a stem", responses=problem_responses(NOT_FOUND))
def get_stem(stem_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    return stem_summary(request.app.state.storage.read_meta("stems", stem_id, owner))


@router.get(
    "/{stem_id}/levels",
    summary="Levels of each channel: peak, RMS, low-frequency share, an overview in time",
    response_model=StemLevelsView,
    responses=problem_responses(NOT_FOUND, UNPROCESSABLE),
)
def get_stem_levels(stem_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    """``{"frames", "sample_rate", "points", "channels": [{"index", "label", "peak_dbfs",
    "rms_dbfs", "low_share", "overview": [[peak_db, rms_db] x points]}]}``; dB relative to
    full scale, null where silent; ``low_share`` is the share of the channel's energy
    below 120 Hz. Measured at upload; a stem uploaded before levels existed is measured
    on its first request (one pass in blocks) and the result kept."""
    storage: Storage = request.app.state.storage
    meta = storage.read_meta("stems", stem_id, owner)
    folder = storage.path("stems", stem_id)
    try:
        return json.loads((folder / LEVELS).read_text())
    except (OSError, ValueError):
        pass  # not measured yet (or the file is damaged): measure now
    layout = LAYOUTS.get(meta.get("suggested_layout") or "")
    labels = meta.get("channel_labels") or (layout.labels if layout else None)
    try:
        info = probe_stem([folder / f["stored"] for f in meta["files"]])
        levels = measure_levels(info, labels=labels).to_dict()
    except AudioError as exc:
        why = str(exc).replace(f"{folder}/", "")  # no server paths in the answer
        raise Problem(
            UNPROCESSABLE, f"the stem's files can no longer be read ({why}); upload it again"
        ) from None
    write_json_atomic(folder / LEVELS, levels, indent=None)
    return levels


#: Files of a stem's object paths at the default number of points, one per programme
#: asked for (GET /v1/stems/{id}/objects): reading a long master's metadata takes seconds
#: (some 3 s for 80,000 blocks on 2 cores), drawing it again should not. Other numbers of
#: points are computed each time, so that the kept files stay as few as the programmes.
OBJECTS = "objects{}.json"


@router.get(
    "/{stem_id}/objects",
    summary="An ADM master's objects: each one's path over time, and the bed's directions",
    response_model=StemObjectsView,
    responses=problem_responses(NOT_FOUND),
)
def get_stem_objects(
    stem_id: str,
    request: Request,
    owner: str = Depends(current_owner),
    programme: str | None = Query(
        None,
        max_length=200,
        description="the audioProgramme, by ID or name (stem.adm.programmes); default the "
        "file's first, the one a render without adm_programme plays",
    ),
    points: int = Query(
        PATH_POINTS, ge=2, le=1000, description="most samples of each object's path"
    ),
) -> dict:
    """For a stem that is an ADM master (``stem.adm`` not null): the programme's summary
    (as ``stem.adm``), ``paths`` (per object: ``times_s``, ``azimuth_deg``,
    ``elevation_deg``, ``gain``, sampled evenly over the object's span with the BS.2076-2
    interpolation, at most ``points`` samples; runs that neither move nor change gain
    keep only their ends, so a resting object has two) and ``bed_directions`` (each bed
    loudspeaker's label, track and direction). Azimuth counter-clockwise from the front
    (left positive), elevation up, degrees. 422 for a stem that is not an ADM master or
    a programme the file does not have."""
    storage: Storage = request.app.state.storage
    meta = storage.read_meta("stems", stem_id, owner)
    if not meta.get("adm"):
        raise Problem(
            UNPROCESSABLE,
            f"stem {stem_id!r} is not an ADM master (a WAV with BS.2076 axml and chna "
            "chunks): it has channels, not objects",
        )
    folder = storage.path("stems", stem_id)
    kept = None
    if points == PATH_POINTS:
        tag = "" if programme is None else "-" + hashlib.sha256(programme.encode()).hexdigest()[:16]
        kept = folder / OBJECTS.format(tag)
        try:
            return json.loads(kept.read_text())
        except (OSError, ValueError):
            pass  # not kept yet (or damaged): read the metadata now
    stored = folder / meta["files"][0]["stored"]  # a master is one file
    try:
        overview = adm_overview(stored, programme=programme, points=points)
    except AdmError as exc:
        why = str(exc).replace(f"{folder}/", "").replace(stored.name, meta["files"][0]["name"])
        raise Problem(UNPROCESSABLE, why) from None
    overview["points"] = points
    if kept is not None:
        write_json_atomic(kept, overview, indent=None)
    return overview


@router.delete(
    "/{stem_id}",
    status_code=204,
    summary="Delete a stem",
    responses=problem_responses(NOT_FOUND, CONFLICT),
)
def delete_stem(stem_id: str, request: Request, owner: str = Depends(current_owner)) -> Response:
    storage: Storage = request.app.state.storage
    storage.read_meta("stems", stem_id, owner)
    busy = [
        j.id
        for j in request.app.state.queue.list(owner=owner, active=True)
        if j.payload.get("stem_id") == stem_id
    ]
    if busy:
        raise Problem(
            CONFLICT,
            f"stem {stem_id!r} is used by render(s) {', '.join(busy)} that "
            "are queued or running; cancel them first",
        )
    storage.delete("stems", stem_id)
    return Response(status_code=204)
