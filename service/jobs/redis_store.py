"""The Redis job store: job records every API replica and worker sees, for scale-out.

``redis://HOST:PORT/DB`` (optionally ``?prefix=NAME``, default ``earfold``). Each job is
a hash ``{prefix}:job:{id}``; sorted sets index the jobs by state, by owner and by lease
expiry (:class:`~earfold.service.jobs.redis_keys.RedisKeys` names them). Every change is
one Lua script (:mod:`earfold.service.jobs.redis_scripts`), so it is atomic on the server:
two workers never claim the same job, and a late report of a worker that lost its lease
changes nothing. A script receives every key it touches in ``KEYS``: where the key depends
on the record (the oldest queued job, a job's owner, the expired leases) the store reads
it first and the script checks that it still holds, so a race changes nothing.
Times come from the caller's clock (tests pass a fake one), as in the embedded store.

Whenever a job becomes queued (submitted, handed back, its lease expired) a message
with its id is sent through :mod:`earfold.service.jobs.redis_delivery`. A job whose message
could not be sent (Redis failed in between) stays in an "unsent" set that
:meth:`RedisJobQueue.recover` sends again, so no job waits forever for a message.

Redis errors become :class:`~earfold.service.jobs.queue.QueueUnavailable`, which the API
answers with 503. Redis must persist its data (``appendonly yes``) for jobs to survive
a restart of Redis itself.
"""

from __future__ import annotations

import builtins
import errno
import json
import time
from collections.abc import Callable, Mapping
from typing import Any

import redis

from .queue import POISON_MESSAGE, Job, JobNotFound, QueueFull, QueueUnavailable, WrongState
from .redis_keys import DEFAULT_PREFIX, STATES, RedisKeys, display_url, parse_url
from .redis_scripts import SCRIPTS
from .states import JobState

__all__ = ["DEFAULT_PREFIX", "RedisJobQueue", "display_url", "parse_url"]

#: Connect and command timeouts (s): an outage shows as an error within seconds.
CONNECT_TIMEOUT_S = 2.0
COMMAND_TIMEOUT_S = 5.0

#: A queued job whose message is not confirmed sent after this long is sent again (s).
RESEND_AFTER_S = 2.0

#: Most expired jobs one recover script handles (its KEYS grow with them).
RECOVER_BATCH = 500


class RedisJobQueue:
    """:class:`~earfold.service.jobs.queue.JobQueue` on Redis, with delivery through Dramatiq.

    Parameters
    ----------
    url : str
        ``redis://HOST:PORT/DB[?prefix=NAME]``.
    clock : callable, optional
        Source of the time (Unix seconds); tests pass a fake one to expire leases.
    deliver : bool
        Send a message per queued job (the default). The contract tests of the store
        alone may turn it off.
    broker_options : float
        ``heartbeat_timeout_s`` and ``maintenance_chance`` of the broker
        (:func:`earfold.service.jobs.redis_delivery.make_broker`).
    """

    def __init__(
        self,
        url: str,
        *,
        clock: Callable[[], float] = time.time,
        deliver: bool = True,
        **broker_options: float,
    ) -> None:
        self.redis_url, name = parse_url(url)
        self.prefix = name + ":"
        self.keys = RedisKeys(self.prefix)
        self.where = display_url(self.redis_url)
        self.clock = clock
        self.client = redis.Redis.from_url(
            self.redis_url,
            socket_connect_timeout=CONNECT_TIMEOUT_S,
            socket_timeout=COMMAND_TIMEOUT_S,
            health_check_interval=10,
        )
        self._scripts = {name: self.client.register_script(src) for name, src in SCRIPTS.items()}
        self._broker_options = broker_options
        self._deliver = deliver
        self._delivery = None

    # -- plumbing ----------------------------------------------------------------------

    @property
    def delivery(self):
        """The Dramatiq side (made on first use, so the API starts while Redis is down)."""
        if self._delivery is None:
            from .redis_delivery import Delivery

            self._delivery = Delivery(self.client, self.keys.delivery, **self._broker_options)
        return self._delivery

    def _now(self) -> str:
        """The caller's clock as the scripts receive it (ARGV[1])."""
        return repr(float(self.clock()))

    def _run(self, script: str, keys: list[str], *args: Any, now: str | None = None) -> Any:
        """Run ``script`` on the common keys plus ``keys``, with ARGV ``now, *args``."""
        try:
            return self._scripts[script](
                keys=[*self.keys.common(), *keys],
                args=[self._now() if now is None else now, *args],
            )
        except redis.exceptions.ResponseError as exc:
            raise RuntimeError(f"job store script {script!r} failed: {exc}") from (
                _disk_full(exc) or exc
            )
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None

    def _call(self, method: Callable[..., Any], *args: Any) -> Any:
        """One plain Redis command; a Redis error becomes QueueUnavailable."""
        try:
            return method(*args)
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None

    def _unavailable(self, exc: Exception) -> QueueUnavailable:
        return QueueUnavailable(
            f"the job store at {self.where} does not answer ({type(exc).__name__}: {exc})"
        )

    def _send(self, ids: list[str]) -> None:
        """Send messages for queued ``ids``; on failure they stay unsent for recover()."""
        if not self._deliver:
            return
        for job_id in ids:
            try:
                self.delivery.send(job_id)
                self.client.zrem(self.keys.unsent, job_id)
            except redis.exceptions.RedisError:
                return

    def _key(self, job_id: str) -> str:
        return self.keys.job(job_id)

    @staticmethod
    def _job(h: Mapping[bytes, bytes]) -> Job:
        d = {k.decode(): v.decode() for k, v in h.items()}

        def num(name: str) -> float | None:
            return float(d[name]) if d.get(name) else None

        return Job(
            id=d["id"],
            owner=d["owner"],
            state=JobState(d["state"]),
            payload=json.loads(d["payload"]),
            progress=float(d["progress"]),
            attempts=int(d["attempts"]),
            message=d["message"],
            result=json.loads(d["result"]) if d["result"] else None,
            worker=d["worker"] or None,
            lease_expires=num("lease_expires"),
            created=float(d["created"]),
            started=num("started"),
            finished=num("finished"),
            updated=float(d["updated"]),
        )

    def _get_many(self, ids: list[bytes]) -> list[Job]:
        try:
            pipe = self.client.pipeline(transaction=False)
            for job_id in ids:
                pipe.hgetall(self._key(job_id.decode()))
            rows = pipe.execute()
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None
        return [self._job(h) for h in rows if h]

    # -- the interface -----------------------------------------------------------------

    def submit(self, job_id: str, owner: str, payload: Mapping, *, max_queued: int) -> Job:
        keys = [self._key(job_id), self.keys.all, self.keys.owner(owner), self.keys.seq]
        seq, waiting = self._run(
            "submit", keys, job_id, owner, json.dumps(dict(payload)), int(max_queued)
        )
        if seq == -1:
            raise QueueFull(f"{waiting} renders are waiting, the most this server queues")
        if seq == -2:
            raise WrongState(f"a render with id {job_id!r} exists already")
        self._send([job_id])
        return self.get(job_id)

    def claim(self, worker: str, lease_s: float) -> Job | None:
        # The oldest queued job, read first so the script receives its key; if another
        # worker took it in between, the script refuses and the next oldest is tried.
        tried = None
        while True:
            first = self._call(self.client.zrange, self.keys.state("queued"), 0, 0)
            if not first or first[0] == tried:
                return None  # empty, or an index entry without a queued record
            tried = first[0]
            job = self.claim_id(tried.decode(), worker, lease_s)
            if job is not None:
                return job

    def claim_id(self, job_id: str, worker: str, lease_s: float) -> Job | None:
        """Take ``job_id`` for ``worker`` if it is queued (a message arrived); else None."""
        taken = self._run("claim", [self._key(job_id)], worker, float(lease_s), job_id)
        return None if not taken else self.get(job_id)

    def _owned(self, job_id: str, worker: str, op: str, value: object = "") -> bool:
        return self._run("owned", [self._key(job_id)], job_id, worker, op, value) == 1

    def heartbeat(self, job_id: str, worker: str, lease_s: float) -> bool:
        return self._owned(job_id, worker, "heartbeat", repr(self.clock() + float(lease_s)))

    def progress(self, job_id: str, worker: str, fraction: float) -> bool:
        return self._owned(job_id, worker, "progress", min(max(float(fraction), 0.0), 1.0))

    def complete(self, job_id: str, worker: str, result: Mapping) -> bool:
        return self._owned(job_id, worker, "complete", json.dumps(dict(result)))

    def fail(self, job_id: str, worker: str, message: str) -> bool:
        return self._owned(job_id, worker, "fail", message)

    def release(self, job_id: str, worker: str, *, count_attempt: bool = False) -> bool:
        done = self._owned(job_id, worker, "release", "count" if count_attempt else "")
        if done:
            self._send([job_id])
        return done

    def cancel(self, job_id: str) -> Job:
        old = self._run("cancel", [self._key(job_id)], job_id)
        if old is None:
            raise JobNotFound(job_id)
        if old != b"ok":
            raise WrongState(f"the render is already {old.decode()}")
        return self.get(job_id)

    def get(self, job_id: str) -> Job:
        h = self._call(self.client.hgetall, self._key(job_id))
        if not h:
            raise JobNotFound(job_id)
        return self._job(h)

    def list(
        self, owner: str | None = None, *, active: bool | None = None, limit: int = 1000
    ) -> list[Job]:
        index = self.keys.all if owner is None else self.keys.owner(owner)
        out: list[Job] = []
        start, page = 0, max(min(int(limit), 500), 50)
        while len(out) < limit:
            ids = self._call(self.client.zrevrange, index, start, start + page - 1)
            if not ids:
                break
            for job in self._get_many(ids):
                if active is None or active != job.state.finished:
                    out.append(job)
            start += page
        return out[:limit]

    def delete(self, job_id: str) -> None:
        while True:
            # The owner names an index key the script receives; an owner never changes,
            # and the script checks it is still the one read here.
            owner = self._call(self.client.hget, self._key(job_id), "owner")
            if owner is None:
                raise JobNotFound(job_id)
            keys = [self._key(job_id), self.keys.all, self.keys.owner(owner.decode())]
            old = self._run("delete", keys, job_id, owner.decode())
            if old != b"retry":
                break
        if old is None:
            raise JobNotFound(job_id)
        if old != b"ok":
            raise WrongState(f"the render is {old.decode()}; cancel it first")

    def recover(self, max_attempts: int) -> builtins.list[str]:
        head, _, tail = POISON_MESSAGE.partition("{attempts}")
        now = self._now()
        expired = [
            i.decode()
            for i in self._call(self.client.zrangebyscore, self.keys.leases, "-inf", f"({now}")
        ]
        requeued: builtins.list[str] = []
        failed: builtins.list[str] = []
        for start in range(0, len(expired), RECOVER_BATCH):
            ids = expired[start : start + RECOVER_BATCH]
            keys = [self._key(i) for i in ids]
            args = (int(max_attempts), head, tail, *ids)
            out = [x.decode() for x in self._run("recover", keys, *args, now=now)]
            bar = out.index("|")
            requeued += out[:bar]
            failed += out[bar + 1 :]
        self._send(requeued)
        self.resend()
        return requeued + failed

    def resend(self) -> builtins.list[str]:
        """Send again the messages of queued jobs that are not confirmed sent."""
        if not self._deliver:
            return []
        stale = self._call(
            self.client.zrangebyscore, self.keys.unsent, "-inf", self.clock() - RESEND_AFTER_S
        )
        ids = [i.decode() for i in stale]
        self._send(ids)
        return ids

    def counts(self) -> dict[str, int]:
        try:
            pipe = self.client.pipeline(transaction=False)
            for state in STATES:
                pipe.zcard(self.keys.state(state))
            found = pipe.execute()
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None
        return dict(zip(STATES, (int(n) for n in found)))

    def queue_position(self, job_id: str) -> int | None:
        # The queued index is scored by submission seq and claim() takes its lowest entry
        # first, so the rank in it is the number of jobs ahead.
        rank = self._call(self.client.zrank, self.keys.state("queued"), job_id)
        return None if rank is None else int(rank) + 1

    def queue_positions(self) -> dict[str, int]:
        ids = self._call(self.client.zrange, self.keys.state("queued"), 0, -1)
        return {i.decode(): n for n, i in enumerate(ids, start=1)}

    def ping(self) -> None:
        """QueueUnavailable unless Redis answers."""
        try:
            self.client.ping()
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None

    def purge(self) -> int:
        """Delete every key of this prefix (tests and the measurement script only)."""
        n = 0
        for key in self.client.scan_iter(match=self.prefix + "*", count=500):
            n += self.client.delete(key)
        return n

    def close(self) -> None:
        if self._delivery is not None:
            self._delivery.close()
            self._delivery = None
        self.client.close()


#: How Redis words a write it refused because its own disk is full (it then answers
#: every write "MISCONF Errors writing to the AOF file: No space left on device").
_DISK_FULL_WORDS = {"No space left on device": errno.ENOSPC, "Disk quota exceeded": errno.EDQUOT}


def _disk_full(exc: Exception) -> OSError | None:
    """An OSError (ENOSPC, EDQUOT) for a Redis error that says its disk is full, raised
    from ``exc``, so that the API answers 507; None for any other error."""
    for words, code in _DISK_FULL_WORDS.items():
        if words in str(exc):
            full = OSError(code, f"the job store's disk is full ({exc})")
            full.__cause__ = exc
            return full
    return None
