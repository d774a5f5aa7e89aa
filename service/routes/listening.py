"""What a listener needs beyond ``/v1/renders``: progress pushed as server-sent events,
signed links for ``<audio src>``, and sample-exact windows of a render's audio.

Events (the ``text/event-stream`` format of the WHATWG HTML standard, "Server-sent
events"): every change is ``event: render`` with ``data:`` the render view, exactly as
``GET /v1/renders/{id}`` answers it. The server polls its job store every
:data:`POLL_S` (one read per stream; the store is the one truth every API process and
worker shares, so no cross-process notification is needed) and sends a ``: keep-alive``
comment after :data:`KEEP_ALIVE_S` of silence, so proxies keep the connection open.
A stream stops as soon as its client goes away.

Streams and audio links take the ``Authorization`` header or a signed ``?key=``
(:mod:`earfold.service.signed_links`), since ``EventSource`` and ``<audio>`` send no
headers.
"""

from __future__ import annotations

import asyncio
import json
import math
import struct
import time
from collections.abc import AsyncIterator, Iterator
from typing import Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import StreamingResponse
from pydantic import BaseModel, Field

from earfold.renderer.errors import AudioError
from earfold.renderer.io import StemReader, probe_stem

from ..auth import ANONYMOUS, owner_for, owner_of
from ..jobs import Job, JobNotFound, JobState, QueueUnavailable
from ..jobs.worker import COMPARISON_KIND, output_paths
from ..problems import CONFLICT, NOT_FOUND, UNAUTHORIZED, UNPROCESSABLE, Problem, problem_responses
from ..signed_links import ALL_RENDERS, render_owner, signer
from .renders import _done, _job, queue_position, render_view

router = APIRouter(prefix="/v1/renders", tags=["listening"])

#: How often a stream reads the job store (s): progress moves smoothly at four updates a
#: second, and a stream costs one indexed read per poll.
POLL_S = 0.25

#: Longest silence on a stream before a comment is sent (s). Proxies commonly drop an
#: idle connection after 30-60 s (common practice); 15 s stays well inside that.
KEEP_ALIVE_S = 15.0

#: Renders an all-renders stream reads on each poll, newest first: new renders show up
#: among them (one that was queued and finished between two polls included), so the
#: owner's whole list is read only on the first poll or after a larger burst.
RECENT = 20

#: Longest window of audio one request returns (s).
WINDOW_MAX_S = 120.0

#: Frames per read when a window is streamed out: 512 KiB per block of float32 stereo,
#: so memory depends on this, not on the window's length.
WINDOW_BLOCK = 1 << 16


class ListenLink(BaseModel):
    """A signed address that works without the ``Authorization`` header."""

    url: str = Field(description="the address with its ?key=, relative to the server")
    expires: str = Field(description="when the key stops working (ISO 8601 UTC)")


_STREAM: dict[int | str, dict[str, Any]] = {
    200: {"content": {"text/event-stream": {}}, "description": "an event stream"}
}
_NO_BUFFERING = {"Cache-Control": "no-cache", "X-Accel-Buffering": "no"}


# -- who is asking --------------------------------------------------------------------


def _token_owners(request: Request) -> list[str]:
    tokens = request.app.state.settings.tokens
    return [owner_of(t) for t in tokens] if tokens else [ANONYMOUS]


def _all_owner(request: Request, key: str | None) -> str:
    if key is None:
        return owner_for(request.app.state.settings.tokens, request.headers.get("authorization"))
    return signer(request).check(key, ALL_RENDERS, _token_owners(request))


def _link(request: Request, scope: str, owner: str, url: str) -> dict:
    key, expiry = signer(request).sign(scope, owner)
    return {"url": f"{url}?key={key}", "expires": _iso(expiry)}


def _iso(ts: float) -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(ts))


_KEY = Query(
    None,
    max_length=80,
    description="a signed key from POST /v1/renders/{id}/listen (instead of the header)",
)


# -- events ---------------------------------------------------------------------------


def _event(view: dict) -> bytes:
    return b"event: render\ndata: " + json.dumps(view, separators=(",", ":")).encode() + b"\n\n"


def _mark(view: dict) -> tuple:
    """What counts as a change of a render for a stream."""
    return view["state"], view["progress"], view["queue_position"]


class _Streams:
    """Count of open event streams (tests read it to see that a client going away ends
    its stream)."""

    def __init__(self) -> None:
        self.open = 0


def streams(request: Request) -> _Streams:
    found = getattr(request.app.state, "event_streams", None)
    if found is None:
        found = request.app.state.event_streams = _Streams()
    return found


async def _paced(request: Request, changes: AsyncIterator[bytes | None]) -> AsyncIterator[bytes]:
    """Send what ``changes`` yields (None = nothing new on this poll), and a keep-alive
    comment after :data:`KEEP_ALIVE_S` of silence.

    The stream stops when the client goes away: Starlette's ``StreamingResponse`` waits
    for the disconnect beside the stream and cancels it (ASGI spec 2.3 servers, such as
    uvicorn), or the next send fails (spec 2.4), at the latest with the keep-alive. No
    ``request.is_disconnected()`` here: it would compete for the same ``receive``."""
    count = streams(request)
    count.open += 1
    sent = time.monotonic()
    try:
        async for chunk in changes:
            if chunk is None:
                if time.monotonic() - sent < KEEP_ALIVE_S:
                    continue
                chunk = b": keep-alive\n\n"
            sent = time.monotonic()
            yield chunk
    finally:
        count.open -= 1


async def _one_render(request: Request, job: Job) -> AsyncIterator[bytes | None]:
    queue = request.app.state.queue

    def read(job_id: str) -> dict | None:
        try:
            found = queue.get(job_id)
        except JobNotFound:
            return None  # deleted meanwhile: the stream ends
        return render_view(found, queue_position(queue, found))

    try:
        view: dict | None = await asyncio.to_thread(read, job.id)
    except QueueUnavailable:
        view = render_view(job)  # as the route read it a moment ago
    last = None
    while view is not None:
        if _mark(view) != last:
            last = _mark(view)
            yield _event(view)
        else:
            yield None
        if view["state"] in ("done", "failed", "cancelled"):
            return
        await asyncio.sleep(POLL_S)
        try:
            view = await asyncio.to_thread(read, job.id)
        except QueueUnavailable:
            continue  # a network store's outage: try again on the next poll


async def _all_renders(request: Request, owner: str) -> AsyncIterator[bytes | None]:
    queue = request.app.state.queue

    def read(known: set[str], watched: set[str], full: bool) -> tuple[list[dict], bool]:
        """Views of the owner's newest renders, of the renders watched unfinished on the
        last poll (to catch their final state) and, on a full read, of every unfinished
        one; and whether the read was full."""
        recent = queue.list(owner=owner, limit=RECENT)
        # The newest RECENT hold every render newer than one already known; only when
        # none of them is known (the first poll, a burst of submissions) can unfinished
        # renders lie beyond them, and only then is the owner's whole list read.
        full = full or not any(j.id in known for j in recent) and len(recent) == RECENT
        jobs = {j.id: j for j in queue.list(owner=owner, active=True)} if full else {}
        for j in recent:
            jobs.setdefault(j.id, j)
        for job_id in watched - jobs.keys():
            try:
                jobs[job_id] = queue.get(job_id)
            except JobNotFound:
                pass  # deleted
        queued = any(j.state is JobState.QUEUED for j in jobs.values())
        places = queue.queue_positions() if queued else {}
        views = [
            render_view(j, places.get(j.id))
            for j in sorted(jobs.values(), key=lambda j: j.created)
            if j.payload.get("kind") != COMPARISON_KIND
        ]
        return views, full

    seen: dict[str, tuple] = {}
    first = True
    while True:
        watched = {i for i, mark in seen.items() if mark[0] in ("queued", "running")}
        try:
            views, _ = await asyncio.to_thread(read, set(seen), watched, first)
        except QueueUnavailable:
            yield None  # a network store's outage: keep the stream, try again
            await asyncio.sleep(POLL_S)
            continue
        out = []
        for view in views:
            mark = _mark(view)
            unfinished = view["state"] in ("queued", "running")
            if seen.get(view["id"]) != mark and (not first or unfinished):
                out.append(_event(view))
            seen[view["id"]] = mark
        # Forget finished renders no longer among the newest: memory stays bounded.
        current = {v["id"] for v in views}
        for job_id in [i for i in seen if i not in current]:
            del seen[job_id]
        first = False
        yield b"".join(out) if out else None
        await asyncio.sleep(POLL_S)


@router.get(
    "/events",
    summary="Events of all your renders (server-sent events; never ends by itself)",
    response_class=StreamingResponse,
    responses={**_STREAM, **problem_responses(UNAUTHORIZED)},
)
async def all_render_events(request: Request, key: str | None = _KEY) -> StreamingResponse:
    """First an event for each unfinished render, then one for every change of any of
    your renders (a new one, its state, progress or place in the queue)."""
    owner = _all_owner(request, key)
    return StreamingResponse(
        _paced(request, _all_renders(request, owner)),
        media_type="text/event-stream",
        headers=_NO_BUFFERING,
    )


@router.post(
    "/events/link",
    summary="A signed address of the all-renders event stream (for EventSource)",
    response_model=ListenLink,
    responses=problem_responses(UNAUTHORIZED),
)
async def all_render_events_link(request: Request) -> dict:
    owner = owner_for(request.app.state.settings.tokens, request.headers.get("authorization"))
    return _link(request, ALL_RENDERS, owner, "/v1/renders/events")


@router.get(
    "/{render_id}/events",
    summary="Events of one render (server-sent events; ends when it finishes)",
    response_class=StreamingResponse,
    responses={**_STREAM, **problem_responses(UNAUTHORIZED, NOT_FOUND)},
)
async def render_events(
    render_id: str, request: Request, key: str | None = _KEY
) -> StreamingResponse:
    """The render's view at once, then on every change of its state, progress or place
    in the queue; the stream ends after a final state (done, failed, cancelled)."""
    job = _job(request, render_id, render_owner(request, render_id, key))
    return StreamingResponse(
        _paced(request, _one_render(request, job)),
        media_type="text/event-stream",
        headers=_NO_BUFFERING,
    )


# -- listen links ---------------------------------------------------------------------


@router.post(
    "/{render_id}/listen",
    summary="A signed audio address for <audio src> (valid 6 hours)",
    response_model=ListenLink,
    responses=problem_responses(UNAUTHORIZED, NOT_FOUND, CONFLICT),
)
async def listen_link(render_id: str, request: Request) -> dict:
    """``{"url": "/v1/renders/{id}/audio?key=K", "expires": ISO 8601}``: the audio
    without the ``Authorization`` header, for this render only, until it expires."""
    owner = owner_for(request.app.state.settings.tokens, request.headers.get("authorization"))
    job = _done(request, render_id, owner)
    return _link(request, job.id, owner, f"/v1/renders/{job.id}/audio")


# -- windows --------------------------------------------------------------------------


def wav_float_header(frames: int, channels: int, samplerate: int) -> bytes:
    """A RIFF/WAVE header for 32-bit IEEE float samples (``WAVE_FORMAT_IEEE_FLOAT``,
    format tag 3), with the ``fact`` chunk that non-PCM formats carry (Microsoft/IBM,
    "Multimedia Programming Interface and Data Specifications 1.0", 1991)."""
    data = frames * channels * 4
    fmt = struct.pack(
        "<HHIIHHH", 3, channels, samplerate, samplerate * channels * 4, channels * 4, 32, 0
    )
    chunks = (
        b"fmt "
        + struct.pack("<I", len(fmt))
        + fmt
        + b"fact"
        + struct.pack("<II", 4, frames)
        + b"data"
        + struct.pack("<I", data)
    )
    return b"RIFF" + struct.pack("<I", 4 + len(chunks) + data) + b"WAVE" + chunks


def _window_bytes(reader: StemReader, header: bytes) -> Iterator[bytes]:
    try:
        yield header
        for block in reader.blocks(WINDOW_BLOCK, reuse=True):
            yield block.astype("<f4", copy=False).tobytes()
    finally:
        reader.close()


@router.get(
    "/{render_id}/window",
    summary="A window of a render's audio as float32 WAV (for sample-aligned A/B)",
    response_class=StreamingResponse,
    responses={
        200: {"content": {"audio/wav": {}}, "description": "float32 WAV"},
        **problem_responses(UNAUTHORIZED, NOT_FOUND, CONFLICT, UNPROCESSABLE),
    },
)
def render_window(
    render_id: str,
    request: Request,
    start: float = Query(0.0, ge=0, description="start in seconds"),
    seconds: float = Query(..., gt=0, le=WINDOW_MAX_S, description="length in seconds"),
    key: str | None = _KEY,
) -> StreamingResponse:
    """The render's channels from ``start`` for ``seconds`` (clipped at the end), read
    exactly as written (WAV, RF64 or FLAC alike) and sent as 32-bit float WAV; the
    header ``X-Earfold-Frames`` says how many frames. The same ``start`` gives the same
    first frame for every render of one stem, so windows of several renders line up
    sample for sample."""
    job = _done(request, render_id, render_owner(request, render_id, key))
    output, _ = output_paths(request.app.state.storage, job)
    if not output.is_file():
        raise Problem(NOT_FOUND, f"the audio of render {render_id!r} is gone (expired or deleted)")
    try:
        info = probe_stem([output])
    except AudioError as exc:
        raise Problem(
            NOT_FOUND, f"the audio of render {render_id!r} cannot be read: {exc}"
        ) from None
    first = int(math.floor(start * info.samplerate + 0.5))
    if first >= info.frames:
        raise Problem(
            UNPROCESSABLE,
            f"start {start:g} s is not before the end of the render ({info.duration:.3f} s)",
        )
    count = max(1, int(math.floor(seconds * info.samplerate + 0.5)))
    window = info.window(first, count)
    reader = StemReader(window, check_finite=False)
    header = wav_float_header(window.frames, window.channels, window.samplerate)
    return StreamingResponse(
        _window_bytes(reader, header),
        media_type="audio/wav",
        headers={
            "X-Earfold-Frames": str(window.frames),
            "X-Earfold-Start-Frame": str(window.start),
            "Content-Length": str(len(header) + window.frames * window.channels * 4),
            "Cache-Control": "private, max-age=3600",
        },
    )
