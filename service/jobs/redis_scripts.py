"""The Lua scripts of the Redis job store: every change to a job is one script, atomic on
the server.

Each script receives every key it touches in ``KEYS`` and its values in ``ARGV``; none
builds a key name from a prefix or a value. That is Redis' scripting rule, which Redis
Cluster relies on to route a script. The keys are named by
:class:`~earfold.service.jobs.redis_keys.RedisKeys`; every script's ``KEYS`` open with
:meth:`~earfold.service.jobs.redis_keys.RedisKeys.common` (KEYS[1..7]) and ``ARGV[1]``
is the caller's clock (Unix seconds). ``tests/service/test_jobs_contract.py`` checks the
behaviour, ``test_redis_scripts.py`` the rule.
"""

from __future__ import annotations

#: KEYS[1..5]: the state indexes (queued, running, done, failed, cancelled),
#: KEYS[6]: leases, KEYS[7]: unsent; ARGV[1]: now. move(k, id, old, new) re-indexes the
#: job with hash key k by state.
_LIB = """
local STATE = {queued = KEYS[1], running = KEYS[2], done = KEYS[3], failed = KEYS[4],
  cancelled = KEYS[5]}
local LEASES, UNSENT = KEYS[6], KEYS[7]
local function move(k, id, old, new)
  local seq = redis.call('HGET', k, 'seq')
  redis.call('ZREM', STATE[old], id)
  redis.call('ZADD', STATE[new], seq, id)
  redis.call('HSET', k, 'state', new)
  if new == 'running' then
    redis.call('ZADD', LEASES, redis.call('HGET', k, 'lease_expires'), id)
  else
    redis.call('ZREM', LEASES, id)
  end
  if new == 'queued' then
    redis.call('ZADD', UNSENT, ARGV[1], id)
  end
end
"""

#: KEYS[8]: job, [9]: all, [10]: owner index, [11]: seq.
#: ARGV: now, id, owner, payload, max_queued. Returns {seq, 0}, {-1, waiting} when
#: full, {-2, 0} when the id exists.
SUBMIT = (
    _LIB
    + """
local JOB, ALL, OWNER, SEQ = KEYS[8], KEYS[9], KEYS[10], KEYS[11]
if redis.call('EXISTS', JOB) == 1 then return {-2, 0} end
local waiting = redis.call('ZCARD', STATE.queued)
if waiting >= tonumber(ARGV[5]) then return {-1, waiting} end
local seq = redis.call('INCR', SEQ)
redis.call('HSET', JOB, 'id', ARGV[2], 'owner', ARGV[3], 'state', 'queued',
  'payload', ARGV[4], 'progress', 0, 'attempts', 0, 'message', '', 'result', '',
  'worker', '', 'lease_expires', '', 'created', ARGV[1], 'started', '', 'finished', '',
  'updated', ARGV[1], 'seq', seq)
redis.call('ZADD', STATE.queued, seq, ARGV[2])
redis.call('ZADD', UNSENT, ARGV[1], ARGV[2])
redis.call('ZADD', ALL, seq, ARGV[2])
redis.call('ZADD', OWNER, seq, ARGV[2])
return {seq, 0}
"""
)

#: KEYS[8]: job. ARGV: now, worker, lease_s, id. Takes the job if it is queued (the
#: caller names the oldest, or the one a message named); returns its id, else false.
CLAIM = (
    _LIB
    + """
local JOB, id = KEYS[8], ARGV[4]
if redis.call('HGET', JOB, 'state') ~= 'queued' then return false end
local now = tonumber(ARGV[1])
redis.call('HSET', JOB, 'worker', ARGV[2], 'lease_expires', now + tonumber(ARGV[3]),
  'started', ARGV[1], 'progress', 0, 'updated', ARGV[1])
redis.call('HINCRBY', JOB, 'attempts', 1)
redis.call('ZREM', UNSENT, id)
move(JOB, id, 'queued', 'running')
return id
"""
)

#: KEYS[8]: job. ARGV: now, id, worker, op, value. Changes a job only while running
#: under worker; returns 1 if it did, else 0.
OWNED = (
    _LIB
    + """
local JOB, id, op, value = KEYS[8], ARGV[2], ARGV[4], ARGV[5]
if redis.call('HGET', JOB, 'state') ~= 'running' or redis.call('HGET', JOB, 'worker') ~= ARGV[3]
then return 0 end
redis.call('HSET', JOB, 'updated', ARGV[1])
if op == 'heartbeat' then
  redis.call('HSET', JOB, 'lease_expires', value)
  redis.call('ZADD', LEASES, value, id)
elseif op == 'progress' then
  redis.call('HSET', JOB, 'progress', value)
elseif op == 'complete' then
  redis.call('HSET', JOB, 'progress', 1, 'result', value, 'finished', ARGV[1],
    'lease_expires', '')
  move(JOB, id, 'running', 'done')
elseif op == 'fail' then
  redis.call('HSET', JOB, 'message', value, 'finished', ARGV[1], 'lease_expires', '')
  move(JOB, id, 'running', 'failed')
elseif op == 'release' then
  if value ~= 'count' then
    local a = tonumber(redis.call('HGET', JOB, 'attempts'))
    if a > 0 then redis.call('HSET', JOB, 'attempts', a - 1) end
  end
  redis.call('HSET', JOB, 'worker', '', 'lease_expires', '', 'progress', 0)
  move(JOB, id, 'running', 'queued')
end
return 1
"""
)

#: KEYS[8]: job. ARGV: now, id. Returns 'ok', the finished state, or false if absent.
CANCEL = (
    _LIB
    + """
local JOB, id = KEYS[8], ARGV[2]
local state = redis.call('HGET', JOB, 'state')
if not state then return false end
if state == 'done' or state == 'failed' or state == 'cancelled' then return state end
redis.call('HSET', JOB, 'finished', ARGV[1], 'updated', ARGV[1], 'lease_expires', '',
  'message', 'cancelled on request')
redis.call('ZREM', UNSENT, id)
move(JOB, id, state, 'cancelled')
return 'ok'
"""
)

#: KEYS[8]: job, [9]: all, [10]: the owner index the caller read. ARGV: now, id, owner.
#: Returns 'ok', the unfinished state, 'retry' if the owner is not the one the caller
#: read (the id was deleted and submitted again in between), or false if absent.
DELETE = (
    _LIB
    + """
local JOB, ALL, OWNER, id = KEYS[8], KEYS[9], KEYS[10], ARGV[2]
local state = redis.call('HGET', JOB, 'state')
if not state then return false end
if state == 'queued' or state == 'running' then return state end
if redis.call('HGET', JOB, 'owner') ~= ARGV[3] then return 'retry' end
redis.call('ZREM', STATE[state], id)
redis.call('ZREM', ALL, id)
redis.call('ZREM', OWNER, id)
redis.call('DEL', JOB)
return 'ok'
"""
)

#: KEYS[8..]: the jobs the caller found with expired leases. ARGV: now, max_attempts,
#: message head, message tail, then the jobs' ids in KEYS order. Each job whose lease is
#: still expired is requeued, or failed once out of attempts (a job renewed or finished
#: in between is left alone). Returns {requeued ids..., '|', failed ids...}.
RECOVER = (
    _LIB
    + """
local now = tonumber(ARGV[1])
local out, failed = {}, {}
for i = 8, #KEYS do
  local JOB, id = KEYS[i], ARGV[i - 3]
  local lease = redis.call('ZSCORE', LEASES, id)
  if lease and tonumber(lease) < now then
    local attempts = tonumber(redis.call('HGET', JOB, 'attempts'))
    if attempts >= tonumber(ARGV[2]) then
      redis.call('HSET', JOB, 'finished', ARGV[1], 'updated', ARGV[1], 'lease_expires', '',
        'message', ARGV[3] .. attempts .. ARGV[4])
      move(JOB, id, 'running', 'failed')
      table.insert(failed, id)
    else
      redis.call('HSET', JOB, 'worker', '', 'lease_expires', '', 'progress', 0,
        'updated', ARGV[1])
      move(JOB, id, 'running', 'queued')
      table.insert(out, id)
    end
  end
end
table.insert(out, '|')
for _, id in ipairs(failed) do table.insert(out, id) end
return out
"""
)

#: Every script by name, as the store registers them.
SCRIPTS = {
    "submit": SUBMIT,
    "claim": CLAIM,
    "owned": OWNED,
    "cancel": CANCEL,
    "delete": DELETE,
    "recover": RECOVER,
}
