"""The contract every job store backend must pass (DESIGN.md, "Queue").

Parametrised over backends: the embedded SQLite store and the Redis store (against a
real Redis, skipped where none runs and required when CI=true; see tests/conftest.py).
Lease expiry is tested with a fake clock, so nothing here sleeps.
"""

from __future__ import annotations

import multiprocessing
import threading

import pytest

from earfold.service.jobs import JobNotFound, JobQueue, JobState, QueueFull, WrongState, can_move
from earfold.service.jobs.sqlite_store import SqliteJobQueue


class FakeClock:
    def __init__(self) -> None:
        self.now = 1_000_000.0

    def __call__(self) -> float:
        return self.now


def _sqlite(request, tmp_path, clock):
    return SqliteJobQueue(tmp_path / "jobs.sqlite3", clock=clock)


def _redis(request, tmp_path, clock):
    from earfold.service.jobs.redis_store import RedisJobQueue

    # One prefix per test (the fixture deletes its keys), shared by every queue the test
    # opens, as several API and worker processes share one Redis.
    return RedisJobQueue(request.getfixturevalue("redis_queue_url"), clock=clock)


BACKENDS = {"sqlite": _sqlite, "redis": _redis}


@pytest.fixture(params=sorted(BACKENDS))
def make_queue(request, tmp_path):
    made: list = []

    def make(clock=None):
        q = BACKENDS[request.param](request, tmp_path, clock or FakeClock())
        made.append(q)
        return q

    yield make
    for q in made:
        q.close()


@pytest.fixture
def clock():
    return FakeClock()


@pytest.fixture
def q(make_queue, clock):
    return make_queue(clock)


def test_backend_implements_the_protocol(q):
    assert isinstance(q, JobQueue)


def test_submit_then_claim_in_fifo_order(q):
    for i in range(3):
        job = q.submit(f"job{i}", "alice", {"n": i}, max_queued=10)
        assert job.state is JobState.QUEUED and job.attempts == 0
    claimed = [q.claim("w1", 10).id for _ in range(3)]
    assert claimed == ["job0", "job1", "job2"]
    assert q.claim("w1", 10) is None
    job = q.get("job0")
    assert job.state is JobState.RUNNING and job.worker == "w1" and job.attempts == 1
    assert job.payload == {"n": 0}


def test_queue_is_bounded(q):
    q.submit("a", "", {}, max_queued=2)
    q.submit("b", "", {}, max_queued=2)
    with pytest.raises(QueueFull, match="2 renders are waiting"):
        q.submit("c", "", {}, max_queued=2)
    q.claim("w", 10)  # a running job no longer counts as waiting
    q.submit("c", "", {}, max_queued=2)


def test_heartbeat_progress_complete(q):
    q.submit("a", "", {}, max_queued=10)
    q.claim("w1", 10)
    assert q.heartbeat("a", "w1", 10)
    assert q.progress("a", "w1", 0.5)
    assert q.get("a").progress == 0.5
    assert not q.progress("a", "intruder", 0.9)
    assert q.complete("a", "w1", {"peak": -3.0})
    job = q.get("a")
    assert job.state is JobState.DONE and job.progress == 1.0 and job.result == {"peak": -3.0}
    assert job.finished is not None
    # A finished job takes no more updates from anyone.
    assert not q.heartbeat("a", "w1", 10)
    assert not q.fail("a", "w1", "late")


def test_fail_keeps_the_message(q):
    q.submit("a", "", {}, max_queued=10)
    q.claim("w1", 10)
    assert q.fail("a", "w1", "layout '5.1' has 6 channels")
    job = q.get("a")
    assert job.state is JobState.FAILED and "6 channels" in job.message


def test_cancel_queued_and_running_but_not_finished(q):
    q.submit("a", "", {}, max_queued=10)
    q.submit("b", "", {}, max_queued=10)
    assert q.cancel("a").state is JobState.CANCELLED
    q.claim("w1", 10)  # takes b, since a is cancelled
    assert q.get("b").state is JobState.RUNNING
    q.cancel("b")
    # The worker learns of the cancellation from its next heartbeat.
    assert not q.heartbeat("b", "w1", 10)
    assert not q.complete("b", "w1", {})
    assert q.get("b").state is JobState.CANCELLED
    with pytest.raises(WrongState, match="already cancelled"):
        q.cancel("b")


def test_expired_lease_is_recovered_and_counted(q, clock):
    q.submit("a", "", {}, max_queued=10)
    q.claim("w1", lease_s=5)
    clock.now += 4
    assert q.recover(max_attempts=3) == []
    assert q.heartbeat("a", "w1", 5)  # lease now runs to +9
    clock.now += 4  # +8, inside the renewed lease
    assert q.recover(max_attempts=3) == []
    clock.now += 2
    assert q.recover(max_attempts=3) == ["a"]
    job = q.get("a")
    assert job.state is JobState.QUEUED and job.attempts == 1 and job.worker is None
    # The dead worker's late reports are refused; the next claim counts attempt 2.
    assert not q.complete("a", "w1", {})
    assert q.claim("w2", 5).attempts == 2


def test_poison_job_fails_after_max_attempts(q, clock):
    q.submit("a", "", {}, max_queued=10)
    for attempt in range(1, 4):
        job = q.claim(f"w{attempt}", lease_s=1)
        assert job is not None and job.attempts == attempt
        clock.now += 2
        q.recover(max_attempts=3)
    job = q.get("a")
    assert job.state is JobState.FAILED
    assert "3 times" in job.message
    assert q.claim("w9", 1) is None


def test_release_does_not_count_an_attempt(q):
    q.submit("a", "", {}, max_queued=10)
    q.claim("w1", 10)
    assert q.release("a", "w1")
    job = q.get("a")
    assert job.state is JobState.QUEUED and job.attempts == 0
    q.claim("w1", 10)
    assert q.release("a", "w1", count_attempt=True)
    assert q.get("a").attempts == 1
    assert not q.release("a", "w1")  # no longer running


def test_get_list_delete_counts(q):
    q.submit("a", "alice", {}, max_queued=10)
    q.submit("b", "bob", {}, max_queued=10)
    q.submit("c", "alice", {}, max_queued=10)
    assert [j.id for j in q.list()] == ["c", "b", "a"]
    assert [j.id for j in q.list(owner="alice")] == ["c", "a"]
    q.cancel("c")
    assert [j.id for j in q.list(owner="alice", active=True)] == ["a"]
    assert [j.id for j in q.list(active=False)] == ["c"]
    assert q.counts() == {"queued": 2, "running": 0, "done": 0, "failed": 0, "cancelled": 1}
    with pytest.raises(WrongState, match="cancel it first"):
        q.delete("a")
    q.delete("c")
    with pytest.raises(JobNotFound):
        q.get("c")


def test_queue_position_counts_the_jobs_ahead(q):
    q.submit("a", "alice", {}, max_queued=10)
    q.submit("b", "bob", {}, max_queued=10)
    assert (q.queue_position("a"), q.queue_position("b")) == (1, 2)
    assert q.queue_positions() == {"a": 1, "b": 2}
    q.submit("c", "alice", {}, max_queued=10)
    q.claim("w1", 10)  # takes a: running jobs have no place in the line
    assert q.queue_position("a") is None
    assert q.queue_positions() == {"b": 1, "c": 2}
    # Handed back, a job goes to the head again (claims take the oldest submission first).
    assert q.release("a", "w1")
    assert q.queue_positions() == {"a": 1, "b": 2, "c": 3}
    q.cancel("b")
    assert (q.queue_position("a"), q.queue_position("b"), q.queue_position("c")) == (1, None, 2)
    assert q.queue_position("nonexistent") is None
    assert q.claim("w2", 10).id == "a"  # the order shown is the order of claims
    assert q.claim("w2", 10).id == "c"
    assert q.queue_positions() == {}


def test_state_survives_reopening(make_queue, clock):
    first = make_queue(clock)
    first.submit("a", "", {"x": [1, 2]}, max_queued=10)
    first.submit("b", "", {}, max_queued=10)
    first.claim("w1", 10)
    first.close()
    second = make_queue(clock)
    assert second.get("a").state is JobState.RUNNING
    assert second.get("b").payload == {}
    assert second.claim("w2", 10).id == "b"


def test_concurrent_claims_never_share_a_job(make_queue, clock):
    setup = make_queue(clock)
    for i in range(40):
        setup.submit(f"j{i:02d}", "", {}, max_queued=100)
    taken: list[str] = []
    lock = threading.Lock()

    def work(name: str) -> None:
        mine = make_queue(clock)
        while (job := mine.claim(name, 10)) is not None:
            with lock:
                taken.append(job.id)

    threads = [threading.Thread(target=work, args=(f"w{i}",)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(taken) == [f"j{i:02d}" for i in range(40)]


def _claim_all(path: str, out) -> None:
    q = SqliteJobQueue(path)
    ids = []
    while (job := q.claim(f"proc-{multiprocessing.current_process().pid}", 10)) is not None:
        ids.append(job.id)
    out.put(ids)


def test_sqlite_claims_across_processes(tmp_path):
    # The embedded backend's own point: workers are separate processes.
    path = tmp_path / "jobs.sqlite3"
    q = SqliteJobQueue(path)
    for i in range(30):
        q.submit(f"j{i:02d}", "", {}, max_queued=100)
    ctx = multiprocessing.get_context("spawn")
    out = ctx.Queue()
    procs = [ctx.Process(target=_claim_all, args=(str(path), out)) for _ in range(2)]
    for p in procs:
        p.start()
    got = [out.get(timeout=30) for _ in procs]
    for p in procs:
        p.join(timeout=30)
    assert sorted(got[0] + got[1]) == [f"j{i:02d}" for i in range(30)]
    q.close()


def test_transitions_table():
    assert can_move(JobState.QUEUED, JobState.RUNNING)
    assert can_move(JobState.RUNNING, JobState.QUEUED)
    assert not can_move(JobState.DONE, JobState.RUNNING)
    assert all(s.finished for s in (JobState.DONE, JobState.FAILED, JobState.CANCELLED))
