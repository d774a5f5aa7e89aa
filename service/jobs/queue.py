"""The job store interface every queue backend implements.

A backend keeps jobs durably and hands each to one worker at a time under a lease:
the worker heartbeats to keep it; if it stops (SIGKILL, OOM, power cut), the lease
expires and :meth:`JobQueue.recover` puts the job back, counting the attempt, or fails
it once it has killed its worker ``max_attempts`` times. Delivery is at least once, so
a job's effects must be idempotent: outputs are written under a temporary name and
renamed when complete. ``tests/service/test_jobs_contract.py`` is the contract that
every backend must pass. :func:`earfold.service.jobs.factory.open_queue` picks the
backend for a URL.
"""

from __future__ import annotations

import builtins
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

from .states import JobState

#: What a job says when it has stopped its worker ``max_attempts`` times (a crash, the
#: kernel's out-of-memory killer) and is given up; every backend words it this way.
POISON_MESSAGE = (
    "the render stopped its worker {attempts} times (a crash or running out of "
    "memory) and was given up; the stem may be damaged or too large for this server; "
    "check it with 'earfold render' on the command line"
)


def poison_message(attempts: int) -> str:
    """The message of a job given up after ``attempts`` attempts that killed its worker."""
    return POISON_MESSAGE.format(attempts=attempts)


class QueueError(Exception):
    """Base class of job store errors."""


class QueueFull(QueueError):
    """More jobs are queued than the store accepts."""


class QueueUnavailable(QueueError):
    """The job store does not answer (a network store is down or unreachable); the API
    answers 503 and retries on the next request."""


class BackendMissing(QueueError, ValueError):
    """The queue URL names a backend whose libraries are not installed (the scale-out
    queue needs the ``[redis]`` extra); the message says what to install."""


class JobNotFound(QueueError, KeyError):
    """No job with that id."""


class WrongState(QueueError):
    """The job is not in a state that allows the operation."""


@dataclass(frozen=True)
class Job:
    """One render job as stored.

    Times are Unix seconds (float); ``None`` until the event happened.
    """

    id: str
    owner: str
    state: JobState
    payload: Mapping = field(default_factory=dict)
    progress: float = 0.0
    attempts: int = 0
    message: str = ""
    result: Mapping | None = None
    worker: str | None = None
    lease_expires: float | None = None
    created: float = 0.0
    started: float | None = None
    finished: float | None = None
    updated: float = 0.0


@runtime_checkable
class JobQueue(Protocol):
    """What the API and the workers need from a job store."""

    def submit(self, job_id: str, owner: str, payload: Mapping, *, max_queued: int) -> Job:
        """Store a new queued job; :class:`QueueFull` if ``max_queued`` are waiting."""

    def claim(self, worker: str, lease_s: float) -> Job | None:
        """Take the oldest queued job for ``worker`` (state running, attempts + 1)."""

    def heartbeat(self, job_id: str, worker: str, lease_s: float) -> bool:
        """Extend the lease; False if the job is no longer running under ``worker``
        (cancelled, or its lease was lost), in which case the worker must stop it."""

    def progress(self, job_id: str, worker: str, fraction: float) -> bool:
        """Record progress (0-1); False as for :meth:`heartbeat`."""

    def complete(self, job_id: str, worker: str, result: Mapping) -> bool:
        """Mark done with a result; False (nothing changed) if no longer ``worker``'s."""

    def fail(self, job_id: str, worker: str, message: str) -> bool:
        """Mark failed with a message a person can act on; False as for complete."""

    def release(self, job_id: str, worker: str, *, count_attempt: bool = False) -> bool:
        """Put a running job back in the queue: after a crash of its render
        (``count_attempt=True``), or handed back on shutdown (the attempt not counted)."""

    def cancel(self, job_id: str) -> Job:
        """Cancel a queued or running job; :class:`WrongState` if finished."""

    def get(self, job_id: str) -> Job:
        """The job; :class:`JobNotFound` if absent."""

    def list(
        self, owner: str | None = None, *, active: bool | None = None, limit: int = 1000
    ) -> list[Job]:
        """Jobs newest first, optionally one owner's, optionally only (un)finished ones."""

    def delete(self, job_id: str) -> None:
        """Forget a finished job; :class:`WrongState` if queued or running."""

    def recover(self, max_attempts: int) -> builtins.list[str]:
        """Requeue running jobs whose lease expired, or fail those out of attempts;
        returns their ids."""

    def counts(self) -> dict[str, int]:
        """Number of jobs per state."""

    def queue_position(self, job_id: str) -> int | None:
        """Place of a queued job in the line: 1 = the next to be claimed, n = n - 1 jobs
        ahead of it (every owner's); None if the job is not queued or absent."""

    def queue_positions(self) -> dict[str, int]:
        """:meth:`queue_position` of every queued job, in one read (for lists)."""

    def close(self) -> None:
        """Release the store's resources."""
