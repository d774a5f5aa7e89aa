"""``/v1/comparisons``: blind, level-matched A/B and ABX sessions of render variants.

``POST`` checks every variant as a render of the stem would be checked, draws the blind
assignment (:mod:`earfold.service.comparisons.assignment`), stores the session and queues one
build job (payload kind ``"comparison"``) that a worker runs: excerpt renders, level
matching, trial files (:mod:`earfold.service.comparisons.builder`). The routes here only read
and write the session's JSON; they never touch audio samples.

Blindness: before the reveal no answer says which variant plays under which label.
Trial audio is served under random per-label tokens, with the same headers for every
variant (no ETag, no Last-Modified, ``Cache-Control: no-store``) and, by construction,
the same length.
"""

from __future__ import annotations

import json
import shutil
import time
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Query, Request, Response
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from earfold.renderer.layouts import LAYOUTS, SCENES, layout_from_dict

from ..auth import current_owner
from ..comparisons import session as sessions
from ..comparisons.assignment import draw_trials
from ..comparisons.sameness import identical_pair, sound_key
from ..comparisons.trial_audio import trial_bytes
from ..jobs import JobNotFound, QueueFull, WrongState
from ..jobs.worker import COMPARISON_KIND
from ..problems import (
    BAD_REQUEST,
    CONFLICT,
    NO_SPACE,
    NOT_FOUND,
    QUEUE_FULL,
    UNAUTHORIZED,
    UNAVAILABLE,
    UNPROCESSABLE,
    Problem,
    problem_responses,
)
from ..storage import META, Storage, new_id, valid_id, write_json_atomic
from .option_models import http_options, options_model
from .renders import RenderRequest, render_options

router = APIRouter(
    prefix="/v1/comparisons", tags=["comparisons"], responses=problem_responses(UNAUTHORIZED)
)

#: Longest excerpt (s). Every variant's excerpt is decoded in the listener's browser at
#: once (4 variants x 60 s of 48 kHz stereo float is about 90 MB of buffers).
MAX_EXCERPT_S = 60.0

#: Excerpt length when the request gives none (s).
DEFAULT_EXCERPT_S = 15.0

Label = Annotated[str, Field(min_length=1, max_length=16)]

#: Headers of every trial audio answer: the same for every variant.
AUDIO_HEADERS = {"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"}


VariantRequest = options_model(
    "VariantRequest",
    "One variant: every render option that shapes the sound (the options of "
    "``POST /v1/renders`` but loudness, the limiter and the output format: the comparison "
    "renders every variant without a loudness gain or limiter and level-matches them "
    "itself, and its excerpt and trial files are its own).",
    http_options(sound_only=True),
    name=(
        Annotated[str, Field(min_length=1, max_length=64)] | None,
        Field(None, description="shown in the results only; default 'variant N'"),
    ),
)


class ExcerptRequest(BaseModel):
    """The window every variant plays: ``start`` and ``length`` in seconds; without
    ``start``, the loudest window of that length by short-term loudness."""

    model_config = ConfigDict(extra="forbid")

    start: float | None = Field(None, ge=0, allow_inf_nan=False)
    length: float = Field(DEFAULT_EXCERPT_S, ge=1.0, le=MAX_EXCERPT_S, allow_inf_nan=False)


#: What the route enforces of mode ``abx`` (exactly two variants), said in the schema:
#: JSON Schema 2020-12 ``if``/``then`` (OpenAPI 3.1 schemas are JSON Schema 2020-12).
_ABX_TWO_VARIANTS: dict[str, Any] = {
    "if": {"properties": {"mode": {"const": "abx"}}, "required": ["mode"]},
    "then": {"properties": {"variants": {"minItems": 2, "maxItems": 2}}},
}


class ComparisonRequest(BaseModel):
    """The JSON body of ``POST /v1/comparisons``. Mode ``abx`` takes exactly 2 variants."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"allOf": [_ABX_TWO_VARIANTS]})

    stem_id: str = Field(pattern=r"^[0-9a-f]{32}$", description="id from POST /v1/stems")
    variants: list[VariantRequest] = Field(min_length=2, max_length=8)  # type: ignore[valid-type]
    mode: Literal["ab", "abx"] = Field(
        "ab", description="ab: which do you prefer; abx: is X A or B (exactly 2 variants)"
    )
    trials: int = Field(10, ge=1, le=100)
    excerpt: ExcerptRequest = Field(default_factory=lambda: ExcerptRequest.model_validate({}))


class AnswerRequest(BaseModel):
    """An answer to one trial: the label preferred (ab) or the one X matches (abx).

    ``"none"`` (no preference) is an answer of the A/B preference design only; ABX is a
    forced choice (a listener who hears no difference guesses, which the binomial test
    expects)."""

    model_config = ConfigDict(extra="forbid")

    choice: Literal["A", "B", "none"] = Field(
        description="A or B; in mode 'ab' also 'none' (no preference)"
    )


class TrialView(BaseModel):
    index: int = Field(ge=0, description="0-based trial number")
    labels: list[Literal["A", "B", "X"]]
    audio: dict[str, str] | None = Field(description="label -> opaque audio URL, once ready")
    answer: Literal["A", "B", "none"] | None


class ComparisonLinks(BaseModel):
    self_: str = Field(alias="self")
    page: str
    results: str | None


class ComparisonView(BaseModel):
    """A comparison as the listener sees it before the reveal."""

    model_config = ConfigDict(extra="forbid")

    id: str = Field(pattern=r"^[0-9a-f]{32}$")
    state: Literal["preparing", "ready", "finished", "failed"]
    progress: float = Field(ge=0, le=1)
    message: str | None
    mode: Literal["ab", "abx"]
    question: str
    stem_id: str
    stem_name: str | None = Field(description="the stem's uploaded file name(s), for lists")
    variants: list[dict[str, Any]] = Field(
        description="the variants as requested, in order: name, request, summary (its "
        "non-default options in words) and settings (those options)"
    )
    excerpt: dict[str, Any]
    level_lufs: float | None = Field(description="the common level of every trial file")
    trial_count: int
    answered: int
    next_trial: int | None
    trials: list[TrialView]
    created: str | None
    finished: str | None
    links: ComparisonLinks


def _variant_error(index: int, exc: ValidationError) -> Problem:
    errors = [
        {"field": ".".join(["variants", str(index), *map(str, e["loc"])]), "message": e["msg"]}
        for e in exc.errors()
    ]
    detail = "; ".join(f"{e['field']}: {e['message']}" for e in errors)
    return Problem(UNPROCESSABLE, detail, title="Invalid request", errors=errors)


def _session(request: Request, comparison_id: str, owner: str) -> dict:
    if not valid_id(comparison_id):
        raise Problem(NOT_FOUND, f"no comparison with id {comparison_id!r}")
    return request.app.state.storage.read_meta("comparisons", comparison_id, owner)


def _job(request: Request, comparison_id: str):
    try:
        return request.app.state.queue.get(comparison_id)
    except JobNotFound:
        return None


def _view(request: Request, meta: dict) -> dict:
    storage: Storage = request.app.state.storage
    built = sessions.prepared(storage, meta["id"])
    job = None if built is not None else _job(request, meta["id"])
    return sessions.public_view(meta, built, job)


def _json(data: object, status: int = 200, headers: dict | None = None) -> Response:
    return Response(
        json.dumps(data, separators=(",", ":")),
        status_code=status,
        media_type="application/json",
        headers=headers,
    )


@router.post(
    "",
    status_code=202,
    summary="Start a blind comparison",
    response_model=None,
    responses={
        202: {"model": ComparisonView},
        **problem_responses(BAD_REQUEST, NOT_FOUND, QUEUE_FULL, UNAVAILABLE, NO_SPACE),
    },
)
def create_comparison(
    req: ComparisonRequest, request: Request, owner: str = Depends(current_owner)
) -> Response:
    storage: Storage = request.app.state.storage
    stem = storage.read_meta("stems", req.stem_id, owner)
    if req.mode == "abx" and len(req.variants) != 2:
        raise Problem(
            UNPROCESSABLE,
            f"abx compares exactly 2 variants; {len(req.variants)} "
            "were given (use mode 'ab' for more)",
        )
    duration = float(stem.get("duration_s") or stem["frames"] / stem["samplerate"])
    ex = req.excerpt
    if ex.start is not None:
        if ex.start >= duration:
            raise Problem(
                UNPROCESSABLE,
                f"excerpt.start is {ex.start:g} s but the stem is only {duration:.3f} s long",
            )
        if ex.start + ex.length > duration + 1e-6:
            raise Problem(
                UNPROCESSABLE,
                f"the excerpt ({ex.start:g} s + {ex.length:g} s) runs "
                f"past the end of the stem ({duration:.3f} s); shorten it or start "
                "earlier",
            )
    variants = []
    requested: list[Any] = list(req.variants)
    for i, v in enumerate(requested):
        fields = v.model_dump(exclude={"name"})
        try:
            render_req = RenderRequest(
                stem_id=req.stem_id,
                loudness="none",
                true_peak="off",
                subtype="FLOAT",
                format="wav",
                **fields,
            )
        except ValidationError as exc:
            raise _variant_error(i, exc) from None
        try:
            options, hrtf_id = render_options(render_req, stem, storage, owner)
        except Problem as exc:
            raise Problem(exc.status, f"variant {i + 1}: {exc.detail}") from None
        variants.append(
            {
                "name": v.name or f"variant {i + 1}",
                "request": fields,
                "options": options,
                "hrtf_id": hrtf_id,
                "uploads": _upload_names(storage, options, hrtf_id),
            }
        )
    _refuse_identical(variants)
    trials = draw_trials(len(variants), req.mode, req.trials)
    session_id = new_id()
    now = time.time()
    excerpt = {"start": ex.start, "length": min(ex.length, duration), "automatic": ex.start is None}
    meta = {
        "id": session_id,
        "owner": owner,
        "created_ts": now,
        "stem_id": req.stem_id,
        "stem_name": _stem_name(stem),
        "mode": req.mode,
        "excerpt": excerpt,
        "variants": variants,
        "trials": [t.to_dict() for t in trials],
        "finished": False,
        "finished_ts": None,
    }
    payload = {
        "kind": COMPARISON_KIND,
        "comparison_id": session_id,
        "stem_id": req.stem_id,
        "excerpt": {"start": ex.start, "length": excerpt["length"]},
        "variants": [{"options": v["options"], "hrtf_id": v["hrtf_id"]} for v in variants],
    }
    job = _store_and_queue(request, meta, payload)
    view = sessions.public_view(meta, None, job)
    return _json(view, 202, {"Location": f"/v1/comparisons/{session_id}"})


def _upload_names(storage: Storage, options: dict, hrtf_id: str | None) -> dict[str, str]:
    """The user's file names of the uploads a variant uses, by option (for its summary)."""
    out = {}
    if hrtf_id:
        out["hrtf"] = storage.read_meta("hrtf", hrtf_id)["name"]
    eq = options.get("headphone_eq")
    if isinstance(eq, str):
        out["headphone_eq"] = storage.read_meta("headphone-eq", eq)["name"]
    return out


def _stem_name(stem: dict) -> str | None:
    """The stem as its owner knows it: its (first) uploaded file's name."""
    files = stem.get("files") or []
    if not files:
        return None
    more = f" (+{len(files) - 1} files)" if len(files) > 1 else ""
    return f"{files[0]['name']}{more}"


def _has_lfe(layout: str | dict) -> bool:
    """True if the render job's layout (a catalogue name or a layout object) has an LFE."""
    if isinstance(layout, dict):
        return bool(layout_from_dict(layout, name="custom").lfe_indices)
    if layout in SCENES:
        return False  # a scene has no LFE channel
    return bool(LAYOUTS[layout].lfe_indices) if layout in LAYOUTS else True


def _refuse_identical(variants: list[dict]) -> None:
    """422 naming the first two variants whose sound-shaping options resolve alike."""
    keys = [
        sound_key(v["options"], v["hrtf_id"], _has_lfe(v["options"]["layout"])) for v in variants
    ]
    pair = identical_pair(keys)
    if pair is None:
        return
    i, j = pair
    raise Problem(
        UNPROCESSABLE,
        f"variant {i + 1} ({variants[i]['name']!r}) and variant {j + 1} "
        f"({variants[j]['name']!r}) would render identically: every option that shapes the "
        "sound resolves to the same value (block_size does not change the sound); change one "
        "of them, a blind test of the same sound measures nothing",
        errors=[
            {"field": f"variants.{i}", "message": "renders identically to " + f"variants.{j}"},
            {"field": f"variants.{j}", "message": "renders identically to " + f"variants.{i}"},
        ],
    )


def _store_and_queue(request: Request, meta: dict, payload: dict) -> Any:
    """Store a new session and queue its build; all or nothing.

    The record is written first (a worker that takes the job at once finds it) and
    removed again if the job cannot be queued: queue full (429), job store down (503),
    disk full (507). A failure writing the record leaves nothing either.
    """
    storage: Storage = request.app.state.storage
    session_id = meta["id"]
    tmp = storage.new_tmp()
    try:
        write_json_atomic(tmp / META, meta)
        storage.commit(tmp, "comparisons", session_id)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    try:
        return request.app.state.queue.submit(
            session_id, meta["owner"], payload, max_queued=request.app.state.settings.max_queued
        )
    except QueueFull as exc:
        storage.delete("comparisons", session_id)
        raise Problem(
            QUEUE_FULL,
            f"the queue is full ({exc}); try again in a minute",
            headers={"Retry-After": "30"},
        ) from None
    except BaseException:
        storage.delete("comparisons", session_id)
        raise


@router.get("", summary="List your comparisons, newest first", response_model=list[ComparisonView])
def list_comparisons(request: Request, owner: str = Depends(current_owner)) -> list[dict]:
    storage: Storage = request.app.state.storage
    metas = sorted(storage.list_meta("comparisons", owner), key=lambda m: -m["created_ts"])
    return [_view(request, m) for m in metas]


@router.get(
    "/{comparison_id}",
    summary="State, progress and trials of a comparison",
    response_model=None,
    responses={200: {"model": ComparisonView}, **problem_responses(NOT_FOUND)},
)
def get_comparison(
    comparison_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    return _json(_view(request, _session(request, comparison_id, owner)))


@router.delete(
    "/{comparison_id}",
    status_code=204,
    summary="Delete a comparison (its build is cancelled if still running)",
    responses=problem_responses(NOT_FOUND),
)
def delete_comparison(
    comparison_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    _session(request, comparison_id, owner)
    queue = request.app.state.queue
    try:
        job = queue.get(comparison_id)
        if not job.state.finished:
            queue.cancel(comparison_id)
        else:
            queue.delete(comparison_id)
    except (JobNotFound, WrongState):
        pass
    request.app.state.storage.delete("comparisons", comparison_id)
    return Response(status_code=204)


@router.get(
    "/{comparison_id}/audio/{token}",
    summary="The audio of one label of one trial",
    response_class=Response,
    responses={200: {"content": {"audio/wav": {}}}, **problem_responses(NOT_FOUND, CONFLICT)},
)
def get_trial_audio(
    comparison_id: str,
    request: Request,
    token: str = Path(pattern=r"^[0-9a-f]{32}$"),
    owner: str = Depends(current_owner),
) -> Response:
    meta = _session(request, comparison_id, owner)
    storage: Storage = request.app.state.storage
    built = sessions.prepared(storage, comparison_id)
    if built is None:
        raise Problem(
            CONFLICT, "the comparison is still being prepared; poll it until its state is 'ready'"
        )
    variant = None
    for trial in meta["trials"]:
        for label, t in trial["tokens"].items():
            if t == token:
                variant = trial["labels"][label]
    if variant is None:
        raise Problem(NOT_FOUND, "no such trial audio in this comparison")
    path = storage.path("comparisons", comparison_id) / built["variants"][variant]["file"]
    try:
        # dithered per token: no two trials' files are the same bytes (comparisons.trial_audio)
        data = trial_bytes(path, token)
    except OSError:
        raise Problem(NOT_FOUND, "the comparison's audio is gone (expired or deleted)") from None
    return Response(data, media_type="audio/wav", headers=AUDIO_HEADERS)


@router.post(
    "/{comparison_id}/trials/{index}/answer",
    summary="Answer one trial",
    response_model=None,
    responses={
        200: {"model": ComparisonView},
        **problem_responses(BAD_REQUEST, NOT_FOUND, CONFLICT, NO_SPACE),
    },
)
def answer_trial(
    comparison_id: str,
    body: AnswerRequest,
    request: Request,
    index: int = Path(ge=0, le=99),
    owner: str = Depends(current_owner),
) -> Response:
    mode = _session(request, comparison_id, owner)["mode"]
    allowed = sessions.ANSWER_CHOICES[mode]
    if body.choice not in allowed:
        raise Problem(
            UNPROCESSABLE,
            f"choice {body.choice!r} is not an answer of mode {mode!r}: give one of "
            f"{', '.join(allowed)}"
            + (" (ABX is a forced choice: if unsure, guess)" if mode == "abx" else ""),
            errors=[{"field": "choice", "message": f"one of {', '.join(allowed)}"}],
        )

    def step(meta: dict, built: dict) -> None:
        try:
            sessions.answer(meta, index, body.choice, built)
        except IndexError:
            raise Problem(
                NOT_FOUND,
                f"no trial {index}; this comparison has trials 0 to {len(meta['trials']) - 1}",
            ) from None

    return _change(request, comparison_id, owner, step)


@router.post(
    "/{comparison_id}/finish",
    summary="Finish now and open the reveal",
    response_model=None,
    responses={200: {"model": ComparisonView}, **problem_responses(NOT_FOUND, CONFLICT, NO_SPACE)},
)
def finish_comparison(
    comparison_id: str, request: Request, owner: str = Depends(current_owner)
) -> Response:
    return _change(request, comparison_id, owner, sessions.finish)


def _change(request: Request, comparison_id: str, owner: str, step) -> Response:
    """Apply ``step(meta, prepared)`` to a session under its lock; 409 on a SessionError."""
    _session(request, comparison_id, owner)
    storage: Storage = request.app.state.storage
    built = sessions.prepared(storage, comparison_id)

    def change(meta: dict) -> None:
        try:
            step(meta, built)
        except sessions.SessionError as exc:
            raise Problem(CONFLICT, str(exc)) from None

    meta = sessions.update(storage, comparison_id, owner, change)
    return _json(_view(request, meta))


@router.get(
    "/{comparison_id}/results",
    summary="The reveal: mapping, counts, statistics (JSON or CSV)",
    response_model=None,
    responses={
        200: {"content": {"application/json": {}, "text/csv": {}}},
        **problem_responses(NOT_FOUND, CONFLICT),
    },
)
def get_results(
    comparison_id: str,
    request: Request,
    format: Literal["json", "csv"] = Query("json"),
    owner: str = Depends(current_owner),
) -> Response:
    meta = _session(request, comparison_id, owner)
    built = sessions.prepared(request.app.state.storage, comparison_id)
    if built is None or not meta.get("finished"):
        raise Problem(
            CONFLICT,
            "the results open once every trial is answered or the "
            "comparison is finished (POST .../finish)",
        )
    if format == "csv":
        return Response(
            sessions.reveal_csv(meta, built),
            media_type="text/csv",
            headers={
                "Content-Disposition": f'attachment; filename="comparison-{comparison_id}.csv"'
            },
        )
    return _json(sessions.reveal(meta, built))
