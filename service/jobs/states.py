"""The states of a render job and the moves between them (DESIGN.md, "HTTP contract")."""

from __future__ import annotations

from enum import Enum


class JobState(str, Enum):  # noqa: UP042 (StrEnum would change str() of a state)
    """Where a job is in its life."""

    QUEUED = "queued"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"
    CANCELLED = "cancelled"

    @property
    def finished(self) -> bool:
        return self in FINISHED


FINISHED = frozenset({JobState.DONE, JobState.FAILED, JobState.CANCELLED})

#: Allowed transitions. RUNNING -> QUEUED is a lost lease (the worker died) or a worker
#: handing a job back on shutdown.
TRANSITIONS: dict[JobState, frozenset[JobState]] = {
    JobState.QUEUED: frozenset({JobState.RUNNING, JobState.CANCELLED, JobState.FAILED}),
    JobState.RUNNING: frozenset(
        {JobState.DONE, JobState.FAILED, JobState.CANCELLED, JobState.QUEUED}
    ),
    JobState.DONE: frozenset(),
    JobState.FAILED: frozenset(),
    JobState.CANCELLED: frozenset(),
}


def can_move(old: JobState, new: JobState) -> bool:
    """True if a job may go from ``old`` to ``new``."""
    return new in TRANSITIONS[old]
