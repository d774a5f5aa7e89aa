"""Delivery of render jobs to workers on many machines, through Dramatiq's Redis broker.

The only module that imports Dramatiq. A message carries nothing but a job id: the job
record in Redis (:mod:`earfold.service.jobs.redis_store`) is the truth about a job, and a
message only tells some worker "look at this job". Duplicate or stale messages are
therefore harmless: a worker that receives one for a job that is not queued (already
taken, cancelled, finished, deleted) acknowledges it and does nothing.

Dramatiq's Redis broker redelivers the unacknowledged messages of a worker whose broker
heartbeat stopped, but only when some command happens to run its maintenance. Both are
set here explicitly (see :data:`HEARTBEAT_TIMEOUT_S` and :data:`MAINTENANCE_CHANCE`);
the lease of the job record is the second, faster path (a worker's sweep requeues a job
whose lease expired and sends a fresh message).
"""

from __future__ import annotations

from collections.abc import Callable

import dramatiq
from dramatiq.brokers.redis import RedisBroker

#: Name of the Dramatiq queue and actor of render jobs.
QUEUE_NAME = "renders"
ACTOR_NAME = "render_job"

#: A broker process is considered dead after this long without a broker heartbeat (s).
#: Dramatiq's default is 60 s. A busy consumer with prefetch 1 does not fetch, and so
#: does not heartbeat, while its one message runs; a message redelivered while its job
#: still runs finds the job leased and is dropped, so a short value costs nothing.
HEARTBEAT_TIMEOUT_S = 30.0

#: Share of broker commands that run the requeueing of dead workers' messages. Dramatiq's
#: default is 1/1000 of commands, which took minutes to notice a dead worker on a quiet
#: queue; idle workers poll every :data:`IDLE_POLL_MS`, so 1/10 runs maintenance a few
#: times a second per idle worker (a few small Redis scripts).
MAINTENANCE_CHANCE = 0.1

#: Longest sleep of an idle consumer between two fetches (ms); bounds enqueue-to-start.
IDLE_POLL_MS = 50

#: Dead-lettered messages (an actor that raised; a bug) are kept this long (ms): 1 day.
DEAD_MESSAGE_TTL_MS = 86_400_000


def make_broker(
    client,
    namespace: str,
    *,
    heartbeat_timeout_s: float = HEARTBEAT_TIMEOUT_S,
    maintenance_chance: float = MAINTENANCE_CHANCE,
) -> RedisBroker:
    """A Redis broker on ``client`` (a redis-py client of the job store, which owns the
    connection settings) whose keys start with ``namespace``.

    No middleware: Dramatiq's time limit (10 min by default) would kill long renders,
    and its retries are replaced by the attempts count in the job record.
    """
    chance = int(round(min(max(maintenance_chance, 0.0), 1.0) * 1_000_000))
    broker = RedisBroker(
        client=client,
        namespace=namespace,
        middleware=[],
        heartbeat_timeout=int(heartbeat_timeout_s * 1000),
        maintenance_chance=chance,
        dead_message_ttl=DEAD_MESSAGE_TTL_MS,
    )
    broker.declare_queue(QUEUE_NAME)
    return broker


class Delivery:
    """Sends job ids to workers and, in a worker, receives them one at a time."""

    def __init__(self, client, namespace: str, **broker_options: float) -> None:
        self.broker = make_broker(client, namespace, **broker_options)

    def send(self, job_id: str) -> None:
        """Enqueue a message for ``job_id``; redis errors propagate."""
        self.broker.enqueue(
            dramatiq.Message(
                queue_name=QUEUE_NAME, actor_name=ACTOR_NAME, args=(job_id,), kwargs={}, options={}
            )
        )

    def consume(self, handle: Callable[[str], None]) -> dramatiq.Worker:
        """Start a consumer calling ``handle(job_id)`` for one message at a time.

        One worker thread and a prefetch of 1: a worker process renders one job, and
        does not hold messages another idle worker could take. Returns the started
        Dramatiq worker; call ``stop()`` on it.
        """
        if ACTOR_NAME not in self.broker.actors:
            dramatiq.Actor(
                handle,
                broker=self.broker,
                actor_name=ACTOR_NAME,
                queue_name=QUEUE_NAME,
                priority=0,
                options={},
            )
        worker = dramatiq.Worker(
            self.broker, queues={QUEUE_NAME}, worker_threads=1, worker_timeout=IDLE_POLL_MS
        )
        worker.queue_prefetch = 1
        worker.start()
        return worker

    def pending(self) -> int:
        """Messages waiting in the broker queue (for the measurement script)."""
        return int(self.broker.client.llen(f"{self.broker.namespace}:{QUEUE_NAME}"))

    def close(self) -> None:
        """Close the broker (the client belongs to the job store, which closes it)."""
        self.broker.close()
