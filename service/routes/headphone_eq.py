"""``/v1/headphone-eq``: upload, list and delete headphone compensation files.

A file is a JSON band list (``[{"type", "frequency", "gain_db", "q"}, ...]`` or
``{"bands": [...], "gain_db": G}``) or an impulse response (WAV or FLAC, one channel for
both ears or two), read by the renderer's loader exactly as ``--headphone-eq FILE`` reads
it (:func:`earfold.renderer.eq.load_headphone_eq`, at 48 kHz for the check). It is kept in
``DATA_DIR/headphone-eq/ID/`` and used by its id: the ``headphone_eq`` option of a render,
a comparison variant or a settings preset takes the id in place of a list of bands.

Uploaded files are not swept by the retention sweep (presets may name them); an owner
keeps at most :data:`MAX_FILES`.
"""

from __future__ import annotations

import fcntl
import time
from pathlib import Path
from typing import Any, Literal

from anyio import to_thread
from fastapi import APIRouter, Depends, Request, Response
from pydantic import BaseModel, Field

from earfold.renderer.eq.headphone import MAX_EQ_IR_BYTES, MAX_EQ_JSON_BYTES

from ..auth import current_owner
from ..job_inputs import HEADPHONE_EQ_KIND
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
from ..uploads import staged_upload

__all__ = ["CHECK_SAMPLERATE", "MAX_FILES", "eq_summary", "router"]

router = APIRouter(
    prefix="/v1/headphone-eq", tags=["headphone EQ"], responses=problem_responses(UNAUTHORIZED)
)

#: Most headphone EQ files one owner keeps.
MAX_FILES = 50

#: Rate the upload is checked at (Hz): the common rate of stems; a render loads the
#: file again at its own rate (and refuses a band above that rate's Nyquist frequency).
CHECK_SAMPLERATE = 48000.0

#: The first bytes of the audio containers an impulse response may come in (WAV, RF64,
#: BW64 and FLAC: the formats the renderer reads and writes; the four-byte magic numbers
#: of each format's specification).
_AUDIO_MAGIC = {b"RIFF": ".wav", b"RF64": ".wav", b"BW64": ".wav", b"fLaC": ".flac"}

_BODY = {
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
                            "description": "a JSON band list or a WAV/FLAC impulse response",
                        }
                    },
                }
            }
        },
    }
}


class HeadphoneEqView(BaseModel):
    """An uploaded headphone EQ file."""

    id: str = Field(pattern=r"^[0-9a-f]{32}$")
    name: str = Field(description="the uploaded file's name")
    kind: Literal["bands", "impulse_response"]
    summary: dict[str, Any] = Field(description="what the renderer read from it")
    size: int
    sha256: str
    created: str
    links: dict[str, str]


def eq_view(meta: dict[str, Any]) -> dict[str, Any]:
    """The public JSON of an uploaded file (no owner, no stored name)."""
    return {
        **{k: meta[k] for k in ("id", "name", "kind", "summary", "size", "sha256", "created")},
        "links": {"self": f"/v1/headphone-eq/{meta['id']}"},
    }


def _container(path: Path) -> str:
    """``.json`` or an audio extension from the file's first bytes; 415 for anything else."""
    with open(path, "rb") as fh:
        head = fh.read(64)
    if head.lstrip()[:1] in (b"[", b"{"):
        return ".json"
    suffix = _AUDIO_MAGIC.get(head[:4])
    if suffix is None:
        raise Problem(
            UNSUPPORTED,
            "a headphone EQ is a JSON band list or an impulse response as a WAV or FLAC "
            "file; this file is neither",
        )
    return suffix


def eq_summary(path: Path, display_name: str) -> tuple[str, dict[str, Any]]:
    """(kind, summary) of a stored file, read by the renderer's loader; 422 if unusable."""
    from earfold.renderer.eq import load_headphone_eq
    from earfold.renderer.errors import HeadphoneEqError

    try:
        loaded = load_headphone_eq(path, CHECK_SAMPLERATE)
    except HeadphoneEqError as exc:
        raise Problem(
            UNPROCESSABLE, str(exc).replace(path.name, display_name), title="Unusable headphone EQ"
        ) from None
    report = loaded.report
    if loaded.kind == "bands":
        bands = report["bands"]
        freqs = [b["frequency"] for b in bands]
        return "bands", {
            "bands": len(bands),
            "gain_db": report["gain_db"],
            "types": sorted({b["type"] for b in bands}),
            "frequency_min_hz": min(freqs),
            "frequency_max_hz": max(freqs),
            "band_list": bands,
        }
    rate = float(report["source_samplerate"])
    return "impulse_response", {
        "channels": report["channels"],
        "samplerate": rate,
        "taps_at_48k": report["taps"],
        "seconds": round(report["taps"] / CHECK_SAMPLERATE, 6),
    }


def _check_and_store(folder: Path, part: Path, file_name: str, size: int) -> dict[str, Any]:
    suffix = _container(part)
    if suffix == ".json" and size > MAX_EQ_JSON_BYTES:
        raise Problem(
            TOO_LARGE,
            f"a JSON band list may be at most {MAX_EQ_JSON_BYTES} bytes; this one is {size}",
        )
    eq_id = new_id()
    stored = folder / f"{eq_id}{suffix}"
    part.rename(stored)
    kind, summary = eq_summary(stored, file_name)
    return {"id": eq_id, "stored": stored.name, "kind": kind, "summary": summary}


def _check_room(storage: Storage, owner: str) -> None:
    held = sum(1 for _ in storage.list_meta(HEADPHONE_EQ_KIND, owner))
    if held >= MAX_FILES:
        raise Problem(
            CONFLICT,
            f"you keep {held} headphone EQ files, the most this server keeps per owner is "
            f"{MAX_FILES}; delete some (DELETE /v1/headphone-eq/ID) first",
        )


def _keep(storage: Storage, folder: Path, owner: str, eq_id: str) -> None:
    """Move a checked upload into place, under the folder's lock so that two uploads at
    once cannot both take the owner's last place."""
    with open(storage.root / HEADPHONE_EQ_KIND / ".lock", "a+") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            _check_room(storage, owner)
            storage.commit(folder, HEADPHONE_EQ_KIND, eq_id)
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


@router.post(
    "",
    status_code=201,
    openapi_extra=_BODY,
    response_model=HeadphoneEqView,
    responses=problem_responses(BAD_REQUEST, CONFLICT, TOO_LARGE, UNSUPPORTED, NO_SPACE),
    summary="Upload a headphone EQ (JSON band list or WAV/FLAC impulse response)",
)
@streams_body
async def upload_headphone_eq(
    request: Request, response: Response, owner: str = Depends(current_owner)
) -> dict:
    settings = request.app.state.settings
    storage: Storage = request.app.state.storage
    _check_room(storage, owner)  # before the upload is read; again when it is kept
    async with staged_upload(
        request, storage, limit=MAX_EQ_IR_BYTES, min_free_bytes=settings.min_free_bytes
    ) as (folder, files):
        if len(files) != 1:
            raise Problem(BAD_REQUEST, f"send one file as field 'file', not {len(files)}")
        up = files[0]
        checked = await to_thread.run_sync(_check_and_store, folder, up.path, up.filename, up.size)
        now = time.time()
        meta = {
            **checked,
            "owner": owner,
            "name": up.filename,
            "size": up.size,
            "sha256": up.sha256,
            "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(now)),
            "created_ts": now,
        }
        write_json_atomic(folder / META, meta)
        await to_thread.run_sync(_keep, storage, folder, owner, meta["id"])
    response.headers["Location"] = f"/v1/headphone-eq/{meta['id']}"
    return eq_view(meta)


@router.get("", summary="Your headphone EQ files", response_model=list[HeadphoneEqView])
def list_headphone_eq(request: Request, owner: str = Depends(current_owner)) -> list[dict]:
    storage: Storage = request.app.state.storage
    metas = sorted(storage.list_meta(HEADPHONE_EQ_KIND, owner), key=lambda m: m["created_ts"])
    return [eq_view(m) for m in metas]


@router.get(
    "/{eq_id}",
    summary="One headphone EQ file",
    response_model=HeadphoneEqView,
    responses=problem_responses(NOT_FOUND),
)
def get_headphone_eq(eq_id: str, request: Request, owner: str = Depends(current_owner)) -> dict:
    return eq_view(request.app.state.storage.read_meta(HEADPHONE_EQ_KIND, eq_id, owner))


@router.delete(
    "/{eq_id}",
    status_code=204,
    summary="Delete a headphone EQ file",
    responses=problem_responses(NOT_FOUND),
)
def delete_headphone_eq(
    eq_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    storage: Storage = request.app.state.storage
    storage.read_meta(HEADPHONE_EQ_KIND, eq_id, owner)
    storage.delete(HEADPHONE_EQ_KIND, eq_id)
    return Response(status_code=204)
