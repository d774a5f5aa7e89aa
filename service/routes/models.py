"""Documented shapes of the API's JSON answers (the OpenAPI schema at ``/openapi.json``).

The models describe what the routes send; the routes that are polled often (a render's
state) build their JSON directly and name the model only in the schema, so a poll does
not pay for validating its own answer. ``tests/service/test_openapi_fuzz.py`` checks
that the answers match these shapes.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

State = Literal["queued", "running", "done", "failed", "cancelled"]


class RenderLinks(BaseModel):
    """Where to go next; ``audio`` and ``report`` only once the render is done."""

    self_: str = Field(alias="self")
    stem: str
    audio: str | None = None
    report: str | None = None


class RenderView(BaseModel):
    """A render job as the API shows it."""

    model_config = ConfigDict(extra="forbid")

    id: str = Field(pattern=r"^[0-9a-f]{32}$")
    state: State
    progress: float = Field(ge=0, le=1, description="0 to 1; updated while rendering")
    queue_position: int | None = Field(
        None, ge=1, description="while queued: 1 = next to start, n = n - 1 renders ahead"
    )
    message: str | None = Field(description="why it failed or was cancelled, for a person")
    attempts: int = Field(ge=0, description="times a worker took it (a crash counts)")
    created: str | None = Field(description="ISO 8601 UTC")
    started: str | None
    finished: str | None
    request: dict[str, Any] = Field(description="the request as it was accepted")
    result: dict[str, Any] | None = Field(description="summary of the output once done")
    links: RenderLinks


class Health(BaseModel):
    """Liveness and the number of jobs in each state."""

    status: Literal["ok"]
    version: str
    queue: dict[str, int]
    auth: bool
