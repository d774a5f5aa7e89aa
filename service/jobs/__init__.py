"""Render jobs: their states, the job store interface and its backends, the workers."""

from __future__ import annotations

from .factory import open_queue, require_redis
from .queue import (
    POISON_MESSAGE,
    BackendMissing,
    Job,
    JobNotFound,
    JobQueue,
    QueueError,
    QueueFull,
    QueueUnavailable,
    WrongState,
    poison_message,
)
from .states import FINISHED, JobState, can_move

__all__ = [
    "FINISHED",
    "POISON_MESSAGE",
    "BackendMissing",
    "Job",
    "JobNotFound",
    "JobQueue",
    "JobState",
    "QueueError",
    "QueueFull",
    "QueueUnavailable",
    "WrongState",
    "can_move",
    "open_queue",
    "poison_message",
    "require_redis",
]
