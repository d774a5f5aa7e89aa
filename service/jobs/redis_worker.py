"""A worker process of the Redis backend: ``python -m earfold.service.jobs.redis_worker``.

Started by ``earfold worker`` (or ``earfold serve --queue redis://...``), which
supervises it, with its settings as JSON in ``EARFOLD_WORKER_SETTINGS``. It consumes
job-id messages one at a time (one Dramatiq worker thread, prefetch 1), claims the job
in its Redis record, and renders it through :class:`earfold.service.jobs.worker.Worker`: in a
child process, so that this process keeps heartbeating the job's lease, notices a
cancellation within a tick, and kills the child. Its main thread sweeps the store for
expired leases (a dead worker's job) and unsent messages every
:data:`~earfold.service.jobs.worker.RECOVER_INTERVAL_S`.
"""

from __future__ import annotations

import logging
import os
import signal
import sys
import time
from typing import TYPE_CHECKING, cast

from ..settings import ServiceSettings
from .parent_watch import die_with_parent, expected_parent, parent_gone
from .queue import QueueUnavailable
from .stop_flag import StopFlag
from .worker import (
    RECOVER_INTERVAL_S,
    SETTINGS_ENV,
    WORKER_NICENESS,
    Worker,
    lower_priority,
    use_warm_process,
)

if TYPE_CHECKING:
    from .redis_store import RedisJobQueue

log = logging.getLogger("earfold.worker")

#: How long a consumer waits for a running render to hand its job back on shutdown (ms).
STOP_TIMEOUT_MS = 10_000


class RedisWorker:
    """Consumes render messages and runs each job; :meth:`stop` ends :meth:`run`."""

    def __init__(self, settings: ServiceSettings) -> None:
        self.settings = settings
        self.worker = Worker(settings)
        # this worker's store is the Redis one: it has claim_id() and the delivery
        self.queue = cast("RedisJobQueue", self.worker.queue)
        self.name = self.worker.name
        self._stop = StopFlag()

    def stop(self) -> None:
        """Ask to stop; safe in a signal handler (:class:`.stop_flag.StopFlag`)."""
        self._stop.ask()
        self.worker.stop()

    def handle(self, job_id: str) -> None:
        """A message arrived: render ``job_id`` if it is still queued. Never raises (an
        actor that raises would dead-letter the message)."""
        while not self._stop.is_set():
            try:
                job = self.queue.claim_id(job_id, self.name, self.settings.lease_s)
                break
            except QueueUnavailable as exc:
                log.warning("%s; retrying", exc)
                self._stop.wait(1.0)
            except Exception:  # a bug: the job's record stays queued for a later message
                log.exception("cannot claim render %s", job_id)
                return
        else:
            return
        if job is None:
            return  # taken by another worker, cancelled, finished or deleted: stale
        try:
            self.worker.run_job(job)
        except Exception:
            # The lease runs out and the job is taken again, counting the attempt.
            log.exception("render %s stopped with an error in its worker", job_id)

    def run(self) -> None:
        """Consume until stopped (SIGTERM, SIGINT) or orphaned; then hand back and stop."""
        consumer = self.queue.delivery.consume(self.handle)
        down = False
        try:
            while not self._stop.is_set() and not self.worker._orphaned():
                try:
                    self.queue.recover(self.settings.max_attempts)
                    if down:
                        log.warning("the job store answers again")
                    down = False
                except QueueUnavailable as exc:
                    if not down:
                        log.warning("%s; waiting for it", exc)
                    down = True
                self._stop.wait(RECOVER_INTERVAL_S)
        finally:
            self.stop()
            consumer.stop(timeout=STOP_TIMEOUT_MS)


def main() -> int:
    die_with_parent(signal.SIGTERM)  # started by a server: never outlive it
    if parent_gone(expected_parent()):
        return 0
    lower_priority(WORKER_NICENESS)
    logging.basicConfig(level=logging.WARNING, format="%(asctime)s %(name)s: %(message)s")
    logging.getLogger("dramatiq").setLevel(logging.ERROR)
    settings = ServiceSettings.from_json(os.environ[SETTINGS_ENV])
    worker = RedisWorker(settings)
    warm = use_warm_process(worker.worker, fork_builds=False)
    signal.signal(signal.SIGTERM, lambda *_: worker.stop())
    signal.signal(signal.SIGINT, lambda *_: worker.stop())
    started = time.monotonic()
    try:
        worker.run()
    finally:
        if warm is not None:
            warm.close()
    worker.queue.close()
    log.debug("worker %s stopped after %.0f s", worker.name, time.monotonic() - started)
    return 0


if __name__ == "__main__":
    sys.exit(main())
