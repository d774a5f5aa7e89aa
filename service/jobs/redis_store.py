"""The Redis job store: job records every API replica and worker sees, for scale-out.

``redis://HOST:PORT/DB`` (optionally ``?prefix=NAME``, default ``earfold``). Each job is
a hash ``{prefix}:job:{id}``; sorted sets index the jobs by state, by owner and by lease
expiry. Every change is one Lua script, so it is atomic on the server: two workers never
claim the same job, and a late report of a worker that lost its lease changes nothing.
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

import json
import time
from collections.abc import Callable, Mapping
from urllib.parse import parse_qs, urlencode, urlsplit, urlunsplit

import redis

from .queue import Job, JobNotFound, QueueFull, QueueUnavailable, WrongState
from .states import JobState

#: Key prefix when the URL names none.
DEFAULT_PREFIX = "earfold"

#: Connect and command timeouts (s): an outage shows as an error within seconds.
CONNECT_TIMEOUT_S = 2.0
COMMAND_TIMEOUT_S = 5.0

#: A queued job whose message is not confirmed sent after this long is sent again (s).
RESEND_AFTER_S = 2.0

_STATES = [s.value for s in JobState]

# Common Lua: P = key prefix ("name:"), move(id, old, new, seq) re-indexes by state.
_LIB = """
local P = ARGV[1]
local function jk(id) return P .. 'job:' .. id end
local function move(id, old, new)
  local seq = redis.call('HGET', jk(id), 'seq')
  redis.call('ZREM', P .. 'state:' .. old, id)
  redis.call('ZADD', P .. 'state:' .. new, seq, id)
  redis.call('HSET', jk(id), 'state', new)
  if new == 'running' then
    redis.call('ZADD', P .. 'leases', redis.call('HGET', jk(id), 'lease_expires'), id)
  else
    redis.call('ZREM', P .. 'leases', id)
  end
  if new == 'queued' then
    redis.call('ZADD', P .. 'unsent', ARGV[2], id)
  end
end
"""

# ARGV: prefix, now, id, owner, payload, max_queued
_SUBMIT = (
    _LIB
    + """
if redis.call('EXISTS', jk(ARGV[3])) == 1 then return {-2, 0} end
local waiting = redis.call('ZCARD', P .. 'state:queued')
if waiting >= tonumber(ARGV[6]) then return {-1, waiting} end
local seq = redis.call('INCR', P .. 'seq')
redis.call('HSET', jk(ARGV[3]), 'id', ARGV[3], 'owner', ARGV[4], 'state', 'queued',
  'payload', ARGV[5], 'progress', 0, 'attempts', 0, 'message', '', 'result', '',
  'worker', '', 'lease_expires', '', 'created', ARGV[2], 'started', '', 'finished', '',
  'updated', ARGV[2], 'seq', seq)
redis.call('ZADD', P .. 'state:queued', seq, ARGV[3])
redis.call('ZADD', P .. 'unsent', ARGV[2], ARGV[3])
redis.call('ZADD', P .. 'all', seq, ARGV[3])
redis.call('ZADD', P .. 'owner:' .. ARGV[4], seq, ARGV[3])
return {seq, 0}
"""
)

# ARGV: prefix, now, worker, lease_s, [id]: the named job if queued, else the oldest.
_CLAIM = (
    _LIB
    + """
local id = ARGV[5]
if id == nil or id == '' then
  local first = redis.call('ZRANGE', P .. 'state:queued', 0, 0)
  if #first == 0 then return false end
  id = first[1]
elseif redis.call('HGET', jk(id), 'state') ~= 'queued' then
  return false
end
local now = tonumber(ARGV[2])
redis.call('HSET', jk(id), 'worker', ARGV[3], 'lease_expires', now + tonumber(ARGV[4]),
  'started', ARGV[2], 'progress', 0, 'updated', ARGV[2])
redis.call('HINCRBY', jk(id), 'attempts', 1)
redis.call('ZREM', P .. 'unsent', id)
move(id, 'queued', 'running')
return id
"""
)

# ARGV: prefix, now, id, worker, op, value. Changes a job only while running under worker.
_OWNED = (
    _LIB
    + """
local id, op, value = ARGV[3], ARGV[5], ARGV[6]
local k = jk(id)
if redis.call('HGET', k, 'state') ~= 'running' or redis.call('HGET', k, 'worker') ~= ARGV[4]
then return 0 end
redis.call('HSET', k, 'updated', ARGV[2])
if op == 'heartbeat' then
  redis.call('HSET', k, 'lease_expires', value)
  redis.call('ZADD', P .. 'leases', value, id)
elseif op == 'progress' then
  redis.call('HSET', k, 'progress', value)
elseif op == 'complete' then
  redis.call('HSET', k, 'progress', 1, 'result', value, 'finished', ARGV[2], 'lease_expires', '')
  move(id, 'running', 'done')
elseif op == 'fail' then
  redis.call('HSET', k, 'message', value, 'finished', ARGV[2], 'lease_expires', '')
  move(id, 'running', 'failed')
elseif op == 'release' then
  if value ~= 'count' then
    local a = tonumber(redis.call('HGET', k, 'attempts'))
    if a > 0 then redis.call('HSET', k, 'attempts', a - 1) end
  end
  redis.call('HSET', k, 'worker', '', 'lease_expires', '', 'progress', 0)
  move(id, 'running', 'queued')
end
return 1
"""
)

# ARGV: prefix, now, id. Returns the old state, or false if absent.
_CANCEL = (
    _LIB
    + """
local k = jk(ARGV[3])
local state = redis.call('HGET', k, 'state')
if not state then return false end
if state == 'done' or state == 'failed' or state == 'cancelled' then return state end
redis.call('HSET', k, 'finished', ARGV[2], 'updated', ARGV[2], 'lease_expires', '',
  'message', 'cancelled on request')
redis.call('ZREM', P .. 'unsent', ARGV[3])
move(ARGV[3], state, 'cancelled')
return 'ok'
"""
)

# ARGV: prefix, now, id.
_DELETE = (
    _LIB
    + """
local k = jk(ARGV[3])
local state = redis.call('HGET', k, 'state')
if not state then return false end
if state == 'queued' or state == 'running' then return state end
local owner = redis.call('HGET', k, 'owner')
redis.call('ZREM', P .. 'state:' .. state, ARGV[3])
redis.call('ZREM', P .. 'all', ARGV[3])
redis.call('ZREM', P .. 'owner:' .. owner, ARGV[3])
redis.call('DEL', k)
return 'ok'
"""
)

# ARGV: prefix, now, max_attempts, message head, message tail. Expired leases: requeue,
# or fail once out of attempts. Returns {requeued ids..., '|', failed ids...}.
_RECOVER = (
    _LIB
    + """
local now = tonumber(ARGV[2])
local expired = redis.call('ZRANGEBYSCORE', P .. 'leases', '-inf', '(' .. now)
local out, failed = {}, {}
for _, id in ipairs(expired) do
  local k = jk(id)
  local attempts = tonumber(redis.call('HGET', k, 'attempts'))
  if attempts >= tonumber(ARGV[3]) then
    redis.call('HSET', k, 'finished', ARGV[2], 'updated', ARGV[2], 'lease_expires', '',
      'message', ARGV[4] .. attempts .. ARGV[5])
    move(id, 'running', 'failed')
    table.insert(failed, id)
  else
    redis.call('HSET', k, 'worker', '', 'lease_expires', '', 'progress', 0, 'updated', ARGV[2])
    move(id, 'running', 'queued')
    table.insert(out, id)
  end
end
table.insert(out, '|')
for _, id in ipairs(failed) do table.insert(out, id) end
return out
"""
)


def parse_url(url: str) -> tuple[str, str]:
    """``(redis URL without our parameters, key prefix)`` of a queue URL.

    Raises
    ------
    ValueError
        If the URL is not ``redis://`` or names an empty prefix.
    """
    parts = urlsplit(url)
    if parts.scheme not in ("redis", "rediss"):
        raise ValueError(f"not a Redis URL: {url!r} (expected redis://HOST:PORT/DB)")
    query = parse_qs(parts.query, keep_blank_values=True)
    prefix = query.pop("prefix", [DEFAULT_PREFIX])[-1]
    if not prefix or not prefix.replace("-", "").replace("_", "").replace(".", "").isalnum():
        raise ValueError(
            f"the Redis key prefix must be letters, digits, '-', '_' or '.'; got {prefix!r}"
        )
    rest = urlencode({k: v[-1] for k, v in query.items()})
    return urlunsplit((parts.scheme, parts.netloc, parts.path, rest, "")), prefix


def display_url(url: str) -> str:
    """The URL without a password, for messages."""
    parts = urlsplit(url)
    netloc = parts.hostname or ""
    if parts.port:
        netloc += f":{parts.port}"
    return urlunsplit((parts.scheme, netloc, parts.path, "", ""))


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
        self.where = display_url(self.redis_url)
        self.clock = clock
        self.client = redis.Redis.from_url(
            self.redis_url,
            socket_connect_timeout=CONNECT_TIMEOUT_S,
            socket_timeout=COMMAND_TIMEOUT_S,
            health_check_interval=10,
        )
        self._scripts = {
            name: self.client.register_script(src)
            for name, src in (
                ("submit", _SUBMIT),
                ("claim", _CLAIM),
                ("owned", _OWNED),
                ("cancel", _CANCEL),
                ("delete", _DELETE),
                ("recover", _RECOVER),
            )
        }
        self._broker_options = broker_options
        self._deliver = deliver
        self._delivery = None

    # -- plumbing ----------------------------------------------------------------------

    @property
    def delivery(self):
        """The Dramatiq side (made on first use, so the API starts while Redis is down)."""
        if self._delivery is None:
            from .redis_delivery import Delivery

            self._delivery = Delivery(self.client, self.prefix + "dramatiq", **self._broker_options)
        return self._delivery

    def _run(self, script: str, *args: object):
        try:
            return self._scripts[script](args=[self.prefix, repr(float(self.clock())), *args])
        except redis.exceptions.ResponseError as exc:
            raise RuntimeError(f"job store script {script!r} failed: {exc}") from exc
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
                self.client.zrem(self.prefix + "unsent", job_id)
            except redis.exceptions.RedisError:
                return

    def _key(self, job_id: str) -> str:
        return f"{self.prefix}job:{job_id}"

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
        seq, waiting = self._run(
            "submit", job_id, owner, json.dumps(dict(payload)), int(max_queued)
        )
        if seq == -1:
            raise QueueFull(f"{waiting} renders are waiting, the most this server queues")
        if seq == -2:
            raise WrongState(f"a render with id {job_id!r} exists already")
        self._send([job_id])
        return self.get(job_id)

    def claim(self, worker: str, lease_s: float) -> Job | None:
        job_id = self._run("claim", worker, float(lease_s), "")
        return None if not job_id else self.get(job_id.decode())

    def claim_id(self, job_id: str, worker: str, lease_s: float) -> Job | None:
        """Take ``job_id`` for ``worker`` if it is queued (a message arrived); else None."""
        taken = self._run("claim", worker, float(lease_s), job_id)
        return None if not taken else self.get(job_id)

    def _owned(self, job_id: str, worker: str, op: str, value: object = "") -> bool:
        return self._run("owned", job_id, worker, op, value) == 1

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
        old = self._run("cancel", job_id)
        if old is None:
            raise JobNotFound(job_id)
        if old != b"ok":
            raise WrongState(f"the render is already {old.decode()}")
        return self.get(job_id)

    def get(self, job_id: str) -> Job:
        try:
            h = self.client.hgetall(self._key(job_id))
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None
        if not h:
            raise JobNotFound(job_id)
        return self._job(h)

    def list(
        self, owner: str | None = None, *, active: bool | None = None, limit: int = 1000
    ) -> list[Job]:
        index = self.prefix + ("all" if owner is None else f"owner:{owner}")
        out: list[Job] = []
        start, page = 0, max(min(int(limit), 500), 50)
        while len(out) < limit:
            try:
                ids = self.client.zrevrange(index, start, start + page - 1)
            except redis.exceptions.RedisError as exc:
                raise self._unavailable(exc) from None
            if not ids:
                break
            for job in self._get_many(ids):
                if active is None or active != job.state.finished:
                    out.append(job)
            start += page
        return out[:limit]

    def delete(self, job_id: str) -> None:
        old = self._run("delete", job_id)
        if old is None:
            raise JobNotFound(job_id)
        if old != b"ok":
            raise WrongState(f"the render is {old.decode()}; cancel it first")

    def recover(self, max_attempts: int) -> list[str]:
        from .sqlite_store import _poison_message

        head, tail = _poison_message(10**9).split(str(10**9))
        out = [x.decode() for x in self._run("recover", int(max_attempts), head, tail)]
        bar = out.index("|")
        requeued, failed = out[:bar], out[bar + 1 :]
        self._send(requeued)
        self.resend()
        return requeued + failed

    def resend(self) -> list[str]:
        """Send again the messages of queued jobs that are not confirmed sent."""
        if not self._deliver:
            return []
        try:
            stale = self.client.zrangebyscore(
                self.prefix + "unsent", "-inf", self.clock() - RESEND_AFTER_S
            )
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None
        ids = [i.decode() for i in stale]
        self._send(ids)
        return ids

    def counts(self) -> dict[str, int]:
        try:
            pipe = self.client.pipeline(transaction=False)
            for state in _STATES:
                pipe.zcard(f"{self.prefix}state:{state}")
            found = pipe.execute()
        except redis.exceptions.RedisError as exc:
            raise self._unavailable(exc) from None
        return dict(zip(_STATES, (int(n) for n in found)))

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
