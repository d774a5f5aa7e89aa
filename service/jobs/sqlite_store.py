"""The embedded job store: one SQLite database in the data directory, in WAL mode.

WAL lets the API read while a worker writes; every change is one short ``BEGIN
IMMEDIATE`` transaction, so concurrent workers in separate processes serialise on the
database lock rather than on a server. A claim is an ``UPDATE ... WHERE state =
'queued'`` inside that transaction, so two workers never take the same job.
"""

from __future__ import annotations

import builtins
import json
import sqlite3
import threading
import time
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path

from .queue import Job, JobNotFound, QueueFull, WrongState, poison_message
from .states import FINISHED, JobState

_SCHEMA = """
CREATE TABLE IF NOT EXISTS jobs (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    id TEXT NOT NULL UNIQUE,
    owner TEXT NOT NULL,
    state TEXT NOT NULL,
    payload TEXT NOT NULL,
    progress REAL NOT NULL DEFAULT 0,
    attempts INTEGER NOT NULL DEFAULT 0,
    message TEXT NOT NULL DEFAULT '',
    result TEXT,
    worker TEXT,
    lease_expires REAL,
    created REAL NOT NULL,
    started REAL,
    finished REAL,
    updated REAL NOT NULL
);
CREATE INDEX IF NOT EXISTS jobs_state ON jobs (state, seq);
CREATE INDEX IF NOT EXISTS jobs_owner ON jobs (owner, seq);
"""

#: How long a connection waits for another process's write lock before giving up (s).
BUSY_TIMEOUT_S = 30.0

_FINISHED = tuple(s.value for s in FINISHED)


class SqliteJobQueue:
    """:class:`~earfold.service.jobs.queue.JobQueue` on a SQLite file.

    Parameters
    ----------
    path : path
        The database file (created if missing).
    clock : callable, optional
        Source of the time (Unix seconds); tests pass a fake one to expire leases.
    """

    def __init__(self, path: str | Path, *, clock: Callable[[], float] = time.time) -> None:
        self.path = Path(path)
        self.clock = clock
        self._lock = threading.RLock()
        self._db = sqlite3.connect(
            self.path, timeout=BUSY_TIMEOUT_S, isolation_level=None, check_same_thread=False
        )
        self._db.row_factory = sqlite3.Row
        self._db.execute("PRAGMA journal_mode=WAL")
        # NORMAL is durable across application crashes in WAL mode; only a power cut can
        # lose the last transactions (SQLite documentation, "synchronous").
        self._db.execute("PRAGMA synchronous=NORMAL")
        with self._write() as db:
            for statement in _SCHEMA.strip().split(";"):
                if statement.strip():
                    db.execute(statement)
        # Reads (a poll of a job's state, lists, counts) go through read-only connections,
        # one per thread, that take no Python lock: in WAL mode a reader sees the last
        # committed state and never waits for a writer (SQLite documentation, "WAL"), so
        # a poll is never queued behind a submit, a claim or a heartbeat.
        self._local = threading.local()
        self._readers: list[sqlite3.Connection] = []
        self._closed = False

    # -- plumbing ----------------------------------------------------------------------

    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        with self._lock:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                yield self._db
            except BaseException:
                self._db.execute("ROLLBACK")
                raise
            self._db.execute("COMMIT")

    def _reader(self) -> sqlite3.Connection:
        db = getattr(self._local, "db", None)
        if db is None:
            if self._closed:
                raise sqlite3.ProgrammingError("the job store is closed")
            uri = self.path.resolve().as_uri() + "?mode=ro"
            db = sqlite3.connect(
                uri, uri=True, timeout=BUSY_TIMEOUT_S, isolation_level=None, check_same_thread=False
            )
            db.row_factory = sqlite3.Row
            self._local.db = db
            with self._lock:
                self._readers.append(db)
        return db

    def _row(self, job_id: str, db: sqlite3.Connection | None = None) -> sqlite3.Row:
        db = self._db if db is None else db
        row = db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone()
        if row is None:
            raise JobNotFound(job_id)
        return row

    @staticmethod
    def _job(row: sqlite3.Row) -> Job:
        return Job(
            id=row["id"],
            owner=row["owner"],
            state=JobState(row["state"]),
            payload=json.loads(row["payload"]),
            progress=row["progress"],
            attempts=row["attempts"],
            message=row["message"],
            result=None if row["result"] is None else json.loads(row["result"]),
            worker=row["worker"],
            lease_expires=row["lease_expires"],
            created=row["created"],
            started=row["started"],
            finished=row["finished"],
            updated=row["updated"],
        )

    def _owned_update(self, job_id: str, worker: str, sets: str, params: tuple) -> bool:
        with self._write() as db:
            cur = db.execute(
                f"UPDATE jobs SET {sets}, updated = ? WHERE id = ? AND state = 'running' "
                "AND worker = ?",
                (*params, self.clock(), job_id, worker),
            )
            return cur.rowcount == 1

    # -- the interface -----------------------------------------------------------------

    def submit(self, job_id: str, owner: str, payload: Mapping, *, max_queued: int) -> Job:
        now = self.clock()
        with self._write() as db:
            (queued,) = db.execute("SELECT COUNT(*) FROM jobs WHERE state = 'queued'").fetchone()
            if queued >= max_queued:
                raise QueueFull(f"{queued} renders are waiting, the most this server queues")
            db.execute(
                "INSERT INTO jobs (id, owner, state, payload, created, updated) "
                "VALUES (?, ?, 'queued', ?, ?, ?)",
                (job_id, owner, json.dumps(dict(payload)), now, now),
            )
            return self._job(self._row(job_id))

    def claim(self, worker: str, lease_s: float) -> Job | None:
        now = self.clock()
        with self._write() as db:
            row = db.execute(
                "SELECT id FROM jobs WHERE state = 'queued' ORDER BY seq LIMIT 1"
            ).fetchone()
            if row is None:
                return None
            db.execute(
                "UPDATE jobs SET state = 'running', worker = ?, lease_expires = ?, "
                "attempts = attempts + 1, started = ?, progress = 0, updated = ? WHERE id = ?",
                (worker, now + lease_s, now, now, row["id"]),
            )
            return self._job(self._row(row["id"]))

    def heartbeat(self, job_id: str, worker: str, lease_s: float) -> bool:
        return self._owned_update(job_id, worker, "lease_expires = ?", (self.clock() + lease_s,))

    def progress(self, job_id: str, worker: str, fraction: float) -> bool:
        fraction = min(max(float(fraction), 0.0), 1.0)
        return self._owned_update(job_id, worker, "progress = ?", (fraction,))

    def complete(self, job_id: str, worker: str, result: Mapping) -> bool:
        return self._owned_update(
            job_id,
            worker,
            "state = 'done', progress = 1, result = ?, finished = ?, lease_expires = NULL",
            (json.dumps(dict(result)), self.clock()),
        )

    def fail(self, job_id: str, worker: str, message: str) -> bool:
        return self._owned_update(
            job_id,
            worker,
            "state = 'failed', message = ?, finished = ?, lease_expires = NULL",
            (message, self.clock()),
        )

    def release(self, job_id: str, worker: str, *, count_attempt: bool = False) -> bool:
        keep = "attempts" if count_attempt else "MAX(attempts - 1, 0)"
        return self._owned_update(
            job_id,
            worker,
            "state = 'queued', worker = NULL, lease_expires = NULL, progress = 0, "
            f"attempts = {keep}",
            (),
        )

    def cancel(self, job_id: str) -> Job:
        now = self.clock()
        with self._write() as db:
            job = self._job(self._row(job_id))
            if job.state.finished:
                raise WrongState(f"the render is already {job.state.value}")
            db.execute(
                "UPDATE jobs SET state = 'cancelled', finished = ?, updated = ?, "
                "lease_expires = NULL, message = 'cancelled on request' WHERE id = ?",
                (now, now, job_id),
            )
            return self._job(self._row(job_id))

    def get(self, job_id: str) -> Job:
        return self._job(self._row(job_id, self._reader()))

    def list(
        self, owner: str | None = None, *, active: bool | None = None, limit: int = 1000
    ) -> list[Job]:
        where, params = [], []
        if owner is not None:
            where.append("owner = ?")
            params.append(owner)
        if active is not None:
            marks = ", ".join("?" for _ in _FINISHED)
            where.append(f"state {'NOT ' if active else ''}IN ({marks})")
            params.extend(_FINISHED)
        sql = "SELECT * FROM jobs" + (" WHERE " + " AND ".join(where) if where else "")
        sql += " ORDER BY seq DESC LIMIT ?"
        return [self._job(r) for r in self._reader().execute(sql, (*params, int(limit)))]

    def delete(self, job_id: str) -> None:
        with self._write() as db:
            job = self._job(self._row(job_id))
            if not job.state.finished:
                raise WrongState(f"the render is {job.state.value}; cancel it first")
            db.execute("DELETE FROM jobs WHERE id = ?", (job_id,))

    def recover(self, max_attempts: int) -> builtins.list[str]:
        now = self.clock()
        with self._write() as db:
            rows = db.execute(
                "SELECT id, attempts FROM jobs WHERE state = 'running' AND lease_expires < ?",
                (now,),
            ).fetchall()
            for row in rows:
                if row["attempts"] >= max_attempts:
                    db.execute(
                        "UPDATE jobs SET state = 'failed', finished = ?, updated = ?, "
                        "lease_expires = NULL, message = ? WHERE id = ?",
                        (now, now, poison_message(row["attempts"]), row["id"]),
                    )
                else:
                    db.execute(
                        "UPDATE jobs SET state = 'queued', worker = NULL, lease_expires = NULL, "
                        "progress = 0, updated = ? WHERE id = ?",
                        (now, row["id"]),
                    )
            return [r["id"] for r in rows]

    def counts(self) -> dict[str, int]:
        rows = self._reader().execute("SELECT state, COUNT(*) AS n FROM jobs GROUP BY state")
        found = {r["state"]: r["n"] for r in rows}
        return {s.value: found.get(s.value, 0) for s in JobState}

    def queue_position(self, job_id: str) -> int | None:
        # Claims take the lowest seq first, so the jobs ahead are the queued ones with a
        # lower seq; one read on the (state, seq) index.
        row = (
            self._reader()
            .execute(
                "SELECT (SELECT COUNT(*) FROM jobs AS o WHERE o.state = 'queued' "
                "AND o.seq <= j.seq) AS n FROM jobs AS j WHERE j.id = ? AND j.state = 'queued'",
                (job_id,),
            )
            .fetchone()
        )
        return None if row is None else int(row["n"])

    def queue_positions(self) -> dict[str, int]:
        rows = self._reader().execute("SELECT id FROM jobs WHERE state = 'queued' ORDER BY seq")
        return {r["id"]: i for i, r in enumerate(rows, start=1)}

    def close(self) -> None:
        with self._lock:
            self._closed = True
            for db in self._readers:
                db.close()
            self._readers.clear()
            self._db.close()
