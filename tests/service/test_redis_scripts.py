"""The Redis store's scripts receive every key they touch in KEYS (values in ARGV).

Redis' scripting rule, which Redis Cluster relies on to route a script: a script must
not build key names itself. Checked twice: in the Lua text (every key argument of a
``redis.call`` is a name bound from KEYS, never a concatenation or an ARGV), and against a
real Redis, whose MONITOR shows each command a script ran right after the EVALSHA that
ran it: each command's key must be one the EVALSHA declared.
"""

from __future__ import annotations

import re
import threading
import time

import pytest

from earfold.service.jobs.redis_scripts import SCRIPTS

_CALL = re.compile(r"redis\.call\('(\w+)',\s*([^,)]+)")
_LOCAL = re.compile(r"local\s+([\w\s,]+?)\s*=\s*(.+)")


def _key_names(src: str) -> set[str]:
    """Names the script binds to KEYS: ``local A, B = KEYS[8], KEYS[9]`` and tables."""
    names = {"k"}  # move()'s parameter; its callers are checked to pass such a name
    for match in _LOCAL.finditer(src):
        targets = [t.strip() for t in match.group(1).split(",")]
        values = [v.strip() for v in match.group(2).split(",")]
        for target, value in zip(targets, values):
            if value.startswith("KEYS[") or value.startswith("{"):
                names.add(target)
    return names


@pytest.mark.parametrize("name", sorted(SCRIPTS))
def test_every_key_argument_comes_from_keys(name):
    src = SCRIPTS[name]
    names = _key_names(src)
    calls = _CALL.findall(src)
    assert calls
    for command, key in calls:
        key = key.strip()
        base = re.split(r"[\[.]", key)[0]
        assert ".." not in key and "ARGV" not in key, f"{name}: {command} builds its key {key!r}"
        assert key.startswith("KEYS[") or base in names, (
            f"{name}: {command} on {key!r}, which is not bound from KEYS"
        )
    for first in re.findall(r"move\((\w+),", src):
        assert first in names or first == "k", f"{name}: move() on {first!r}"
    # the STATE table is made of KEYS only
    table = re.search(r"local STATE = \{(.*?)\}", src, re.S)
    assert table is not None
    for value in re.findall(r"=\s*([^,}]+)", table.group(1)):
        assert value.strip().startswith("KEYS["), value


def test_scripts_touch_only_declared_keys_on_a_real_redis(redis_queue_url):
    import redis

    from earfold.service.jobs.redis_store import RedisJobQueue

    clock = [1000.0]
    q = RedisJobQueue(redis_queue_url, clock=lambda: clock[0], deliver=False)
    ours = {s.sha for s in q._scripts.values()}
    # load the scripts first, so every EVALSHA below runs (none answers NOSCRIPT)
    for script in q._scripts.values():
        q.client.script_load(script.script)
    lines: list[tuple[str, list[str]]] = []
    ready, stop = threading.Event(), threading.Event()
    monitor_client = redis.Redis.from_url(q.redis_url)

    def watch() -> None:
        with monitor_client.monitor() as m:
            ready.set()
            for event in m.listen():
                parts = event["command"].split(" ")
                lines.append((event.get("client_type", ""), parts))
                if stop.is_set() and parts[:1] == ["ECHO"]:
                    return

    thread = threading.Thread(target=watch, daemon=True)
    thread.start()
    assert ready.wait(5)
    time.sleep(0.2)
    try:
        for i in range(3):
            q.submit(f"j{i}", "alice" if i else "bob", {"n": i}, max_queued=10)
        job = q.claim("w1", 10)
        assert job is not None
        q.heartbeat(job.id, "w1", 10)
        q.progress(job.id, "w1", 0.5)
        q.complete(job.id, "w1", {"ok": True})
        job = q.claim_id("j1", "w2", 10)
        assert job is not None
        q.release("j1", "w2", count_attempt=True)
        q.cancel("j2")
        q.delete("j0")
        job = q.claim("w3", 5)
        assert job is not None
        clock[0] += 60
        assert q.recover(max_attempts=3) == [job.id]
        assert q.claim("w3", 5) is not None
        clock[0] += 60
        assert q.recover(max_attempts=3) == [job.id]
        assert q.get(job.id).state.value == "failed"
        q.submit("j3", "alice", {}, max_queued=10)
        assert q.claim("w4", 5) is not None
        assert q.fail("j3", "w4", "broken")
    finally:
        stop.set()
        q.client.echo("end of the script test")
        thread.join(10)
        monitor_client.close()
        q.close()

    declared: list[str] | None = None
    checked: set[str] = set()
    for client_type, parts in lines:
        if client_type != "lua":
            declared = None
            if parts[0] == "EVALSHA" and parts[1] in ours:
                n = int(parts[2])
                declared = parts[3 : 3 + n]
            continue
        if declared is None:
            continue  # a script that is not ours (another client of the shared Redis)
        # every command our scripts run names exactly one key, its first argument
        assert parts[1] in declared, f"{parts[0]} on undeclared key {parts[1]!r}"
        checked.add(parts[0])
    assert {"HSET", "ZADD", "ZREM", "HGET", "ZSCORE", "DEL", "INCR"} <= checked
