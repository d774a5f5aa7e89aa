"""Render jobs: their states, the job store interface and its backends, the workers."""

from __future__ import annotations

from .queue import (
    Job,
    JobNotFound,
    JobQueue,
    QueueError,
    QueueFull,
    QueueUnavailable,
    WrongState,
    open_queue,
)
from .states import FINISHED, JobState, can_move

__all__ = [
    "FINISHED",
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
]
