"""A worker process: claims render jobs, runs each in a child, keeps its lease.

``python -m earfold.service.jobs.worker`` (started by ``earfold serve``) reads its settings as
JSON from ``EARFOLD_WORKER_SETTINGS``. The render runs in a child process
(:mod:`earfold.service.jobs.render_child`) so that the worker stays responsive: it heartbeats,
reports progress, and kills the child when the job is cancelled or its lease is lost.
A child that dies without a word (a crash, the OOM killer) puts the job back in the
queue with the attempt counted; after ``max_attempts`` the job fails with a message
that says why.

Started by ``earfold serve``, a worker keeps that child warm between jobs
(:mod:`.warm`, :mod:`.warm_host`): started ahead with its imports done and the default
HRIR set loaded, so a claimed job starts computing at once, and replaced whenever a job
did not end well. ``EARFOLD_WARM_PROCESS=0`` turns it off: then each render starts a
fresh child and comparison builds fork from the worker.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import uuid
from pathlib import Path
from typing import IO, Protocol, cast

from ..job_inputs import resolve_job_inputs
from ..settings import ServiceSettings
from ..storage import Storage
from .factory import open_queue
from .parent_watch import PARENT_ENV, die_with_parent, expected_parent, parent_gone
from .queue import Job, JobQueue, QueueUnavailable
from .render_child import DISK_FULL_MESSAGE, EXIT_DISK_FULL, discard_outputs
from .stop_flag import StopFlag
from .warm import HostedJob, WarmSlot

SETTINGS_ENV = "EARFOLD_WORKER_SETTINGS"

__all__ = [
    "PARENT_ENV",
    "SETTINGS_ENV",
    "WARM_ENV",
    "Worker",
    "child_environment",
    "main",
    "use_warm_process",
]


class ChildProcess(Protocol):
    """What the worker needs of a job's process: a ``Popen`` child, or a forked
    comparison build (:class:`earfold.service.comparisons.forked.ForkedBuild`)."""

    @property
    def pid(self) -> int: ...

    @property
    def returncode(self) -> int | None: ...

    @property
    def stdin(self) -> IO[str] | None: ...

    @property
    def stdout(self) -> IO[str] | None: ...

    def poll(self) -> int | None: ...

    def wait(self, timeout: float | None = None) -> int: ...

    def terminate(self) -> None: ...

    def kill(self) -> None: ...


#: ``payload["kind"]`` of a job that builds a blind comparison (earfold.service.comparisons)
#: instead of rendering; jobs without a kind are renders.
COMPARISON_KIND = "comparison"

#: Time a child gets to stop after SIGTERM before it is killed (s).
TERM_GRACE_S = 1.5

#: How often a worker sweeps the store for expired leases (s).
RECOVER_INTERVAL_S = 1.0

#: Thread counts of the numeric libraries in a render child. Parallelism comes from the
#: worker processes (one render each); a render that also spread over every core would
#: compete with the others and with the API for the same cores.
SINGLE_THREADED = {
    name: "1"
    for name in (
        "OMP_NUM_THREADS",
        "OPENBLAS_NUM_THREADS",
        "MKL_NUM_THREADS",
        "NUMEXPR_NUM_THREADS",
        "VECLIB_MAXIMUM_THREADS",
    )
}


def child_environment(base: dict[str, str] | None = None) -> dict[str, str]:
    """The environment of a render child: ``base`` (default: ours) with single-threaded
    numeric libraries (the child also lowers its own priority, see render_child), and
    this process as the parent it must not outlive (:mod:`.parent_watch`)."""
    return {
        **(os.environ if base is None else base),
        **SINGLE_THREADED,
        PARENT_ENV: str(os.getpid()),
    }


def output_paths(storage: Storage, job: Job) -> tuple[Path, Path]:
    """Where a job's audio and report go."""
    folder = storage.path("renders", job.id)
    ext = job.payload.get("options", {}).get("format") or "wav"
    return folder / f"output.{ext}", folder / "report.json"


def child_spec(storage: Storage, job: Job) -> dict:
    """The JSON spec a render child gets; ValueError if the stem or HRTF set is gone."""
    payload = job.payload
    stem = storage.read_meta("stems", payload["stem_id"])
    folder = storage.path("stems", payload["stem_id"])
    inputs = [str(folder / f["stored"]) for f in stem["files"]]
    names = {}
    for f in stem["files"]:
        names[str(folder / f["stored"])] = f["name"]
        names[f["stored"]] = f["name"]
    options = dict(payload["options"])
    hrtf_id = payload.get("hrtf_id")
    if hrtf_id:
        hrtf = storage.read_meta("hrtf", hrtf_id)
        path = storage.path("hrtf", hrtf_id) / hrtf["stored"]
        options["hrtf"] = str(path)
        names[str(path)] = hrtf["name"]
        names[hrtf["stored"]] = hrtf["name"]
    output, report = output_paths(storage, job)
    output.parent.mkdir(parents=True, exist_ok=True)
    options = resolve_job_inputs(storage, options, output.parent, names)
    return {
        "inputs": inputs,
        "output": str(output),
        "report": str(report),
        "options": options,
        "names": names,
        "input_names": [f["name"] for f in stem["files"]],
        "output_name": payload.get("download_name"),
    }


class Worker:
    """Claims and runs jobs until :meth:`stop` is called (or its parent process dies)."""

    def __init__(
        self, settings: ServiceSettings, queue: JobQueue | None = None, *, name: str | None = None
    ) -> None:
        self.settings = settings
        self.storage = Storage(settings.data_dir)
        self.queue = queue or open_queue(
            settings.queue_url, str(settings.data_dir), **settings.broker_options()
        )
        self.name = name or f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:6]}"
        self._stop = StopFlag()
        #: The process this worker belongs to (its server); gone, the worker stops.
        self._parent = expected_parent()
        #: The render child's command line (tests substitute one that crashes).
        self.child_command = [sys.executable, "-m", "earfold.service.jobs.render_child"]
        #: The command line of a comparison build (a job whose payload kind is
        #: "comparison"; it speaks the render child's protocol).
        self.comparison_command = [sys.executable, "-m", "earfold.service.comparisons.build_child"]
        #: Fork comparison builds from this (warmed-up) process instead of starting
        #: ``comparison_command`` (earfold.service.comparisons.forked).
        self.fork_builds = False
        #: The warm render process that runs this worker's jobs (renders and builds) one
        #: after the other (:mod:`.warm`); ``main`` sets it up. Without it, every job
        #: starts a fresh child (``child_command``, ``comparison_command``).
        self.warm: WarmSlot | None = None
        self._warm_busy = threading.Lock()

    def stop(self) -> None:
        """Ask the worker to stop; safe in a signal handler (:class:`.stop_flag.StopFlag`)."""
        self._stop.ask()

    def _orphaned(self) -> bool:
        return parent_gone(self._parent)

    def run(self, *, once: bool = False) -> None:
        """The claim loop; with ``once``, return after one job (or none waiting)."""
        next_recover = 0.0
        while not self._stop.is_set() and not self._orphaned():
            now = time.monotonic()
            if now >= next_recover:
                self.queue.recover(self.settings.max_attempts)
                next_recover = now + RECOVER_INTERVAL_S
            job = self.queue.claim(self.name, self.settings.lease_s)
            if job is None:
                if once:
                    return
                self._stop.wait(self.settings.poll_s)
                continue
            self.run_job(job)
            if once:
                return

    def run_job(self, job: Job) -> None:
        """Render one claimed job in a child process and record how it ended."""
        q = self.queue
        comparison = job.payload.get("kind") == COMPARISON_KIND
        try:
            if comparison:
                from ..comparisons.build_child import child_spec as comparison_spec

                spec = comparison_spec(self.storage, dict(job.payload), job.id)
            else:
                spec = child_spec(self.storage, job)
        except Exception as exc:  # the stem or set was deleted or expired meanwhile
            detail = getattr(exc, "detail", None) or str(exc)
            what = "the comparison" if comparison else "the render"
            q.fail(job.id, self.name, f"cannot start {what}: {detail}")
            return
        hosted: HostedJob | None = None
        warm = self.warm
        if warm is not None and self._warm_busy.acquire(blocking=False):
            try:
                hosted = warm.start("comparison" if comparison else "render", spec)
                self._watch(job, spec, cast(ChildProcess, hosted))
            finally:
                if hosted is not None:
                    warm.finished(hosted, restart=not self._stop.is_set())
                self._warm_busy.release()
        else:
            self._watch(job, spec, self._fresh_child(spec, comparison))

    def _fresh_child(self, spec: dict, comparison: bool) -> ChildProcess:
        """A process of its own for one job: forked (a build) or started."""
        proc: ChildProcess
        if comparison and self.fork_builds:
            from ..comparisons.forked import ForkedBuild
            from .render_child import RENDER_NICENESS

            proc = ForkedBuild(spec, RENDER_NICENESS)
        else:
            proc = subprocess.Popen(
                self.comparison_command if comparison else self.child_command,
                stdin=subprocess.PIPE,
                stdout=subprocess.PIPE,
                text=True,
                cwd=os.getcwd(),
                env=child_environment(),
            )
        return proc

    def _watch(self, job: Job, spec: dict, proc: ChildProcess) -> None:
        """Keep the lease of ``job`` while ``proc`` runs it, then record how it ended."""
        q, s = self.queue, self.settings
        messages: list[dict] = []
        latest = {"progress": 0.0}
        # Wakes the lease loop early: at the first progress (so it is reported at once,
        # not a tick later) and when the child's output ends (so the job's end is
        # recorded at once).
        wake = threading.Event()

        def read() -> None:
            assert proc.stdout is not None
            try:
                for line in proc.stdout:
                    try:
                        msg = json.loads(line)
                    except ValueError:
                        continue
                    if "progress" in msg:
                        if latest["progress"] <= 0.0:
                            wake.set()
                        latest["progress"] = float(msg["progress"])
                    else:
                        messages.append(msg)
            finally:
                wake.set()

        reader = threading.Thread(target=read, daemon=True)
        reader.start()
        try:
            if proc.stdin is not None:  # a forked build has its spec already
                proc.stdin.write(json.dumps(spec))
                proc.stdin.close()
        except BrokenPipeError:
            pass

        reported = 0.0
        lost = False
        handed_back = False
        unreachable_since: float | None = None
        while proc.poll() is None:
            if reader.is_alive():
                wake.wait(s.tick_s)
                wake.clear()
            else:  # the output has ended: the child is exiting
                try:
                    proc.wait(s.tick_s)
                except subprocess.TimeoutExpired:
                    pass
            if proc.poll() is not None:
                break
            try:
                ok = q.heartbeat(job.id, self.name, s.lease_s)
                if ok and latest["progress"] > reported:
                    reported = latest["progress"]
                    ok = q.progress(job.id, self.name, reported)
                unreachable_since = None
            except QueueUnavailable:
                # A network store is down: keep rendering while the lease could still
                # be ours; past it, another worker may have the job.
                unreachable_since = unreachable_since or time.monotonic()
                ok = time.monotonic() - unreachable_since < s.lease_s
            if not ok:
                lost = True
                self._terminate(proc)
                break
            if self._stop.is_set() or self._orphaned():
                self._terminate(proc)
                handed_back = True
                break
        proc.wait()
        reader.join(timeout=5)
        if proc.stdout is not None:
            proc.stdout.close()
        final = messages[-1] if messages else {}
        try:
            self._record(job, spec, proc, final, lost, handed_back)
        except QueueUnavailable:
            # Could not record the end within a lease: the job's lease expires and it is
            # rendered again (delivery is at least once; outputs are replaced atomically).
            pass

    def _record(
        self,
        job: Job,
        spec: dict,
        proc: ChildProcess,
        final: dict,
        lost: bool,
        handed_back: bool,
    ) -> None:
        """Record how a render ended, retrying while a network store is briefly down."""
        deadline = time.monotonic() + self.settings.lease_s
        while True:
            try:
                return self._record_once(job, spec, proc, final, lost, handed_back)
            except QueueUnavailable:
                if time.monotonic() > deadline or self._stop.is_set():
                    raise
                time.sleep(min(1.0, self.settings.lease_s / 4))

    def _record_once(
        self,
        job: Job,
        spec: dict,
        proc: ChildProcess,
        final: dict,
        lost: bool,
        handed_back: bool,
    ) -> None:
        q, s = self.queue, self.settings
        if lost or handed_back:
            self._remove_partial(spec)
            if handed_back:
                q.release(job.id, self.name)
            return
        if "done" in final and proc.returncode == 0:
            q.complete(job.id, self.name, final["done"])
        elif final.get("disk_full") or proc.returncode == EXIT_DISK_FULL:
            # Out of disk space is not a crash: retrying cannot help until space is
            # freed, so the job fails at once, and nothing of it is kept.
            discard_outputs(spec)
            q.fail(job.id, self.name, final.get("error") or DISK_FULL_MESSAGE)
        elif "error" in final:
            q.fail(job.id, self.name, final["error"])
            self._remove_partial(spec)
        elif "cancelled" in final:
            self._remove_partial(spec)
        else:
            # Died without a word: a crash or the OOM killer. Count it against the job.
            self._remove_partial(spec)
            current = q.get(job.id)
            if current.attempts >= s.max_attempts:
                q.fail(
                    job.id,
                    self.name,
                    f"the render process died {current.attempts} times (exit status "
                    f"{proc.returncode}; a crash or running out of memory) and was given up; "
                    "the stem may be damaged or too large for this server",
                )
            else:
                q.release(job.id, self.name, count_attempt=True)

    @staticmethod
    def _terminate(proc: ChildProcess) -> None:
        if proc.poll() is not None:
            return
        proc.terminate()
        try:
            proc.wait(TERM_GRACE_S)
        except subprocess.TimeoutExpired:
            proc.kill()

    @staticmethod
    def _remove_partial(spec: dict) -> None:
        """Remove temporary output left by a killed child (never the finished file)."""
        folder = Path(spec["output"]).parent
        for leftover in folder.glob(".*.part"):
            leftover.unlink(missing_ok=True)


#: Niceness a worker process adds to itself: its own work (the claim loop, the warm-up
#: of comparison builds: imports and the HRIR set) is batch work too, and a worker
#: starting or restarting must not delay the API's answers. Its render children add
#: :data:`~earfold.service.jobs.render_child.RENDER_NICENESS` on top (to at most 19).
WORKER_NICENESS = 5


def lower_priority(increment: int) -> None:
    """Add ``increment`` to this process's niceness (where the system allows it)."""
    try:
        os.nice(increment)
    except (OSError, AttributeError):
        pass


def main() -> int:
    # First: a server that dies from now on takes this worker with it (SIGTERM: the
    # job in hand is given back), and one that is already gone is not waited for.
    die_with_parent(signal.SIGTERM)
    if parent_gone(expected_parent()):
        return 0
    lower_priority(WORKER_NICENESS)
    settings = ServiceSettings.from_json(os.environ[SETTINGS_ENV])
    worker = Worker(settings)
    warm = use_warm_process(worker)
    signal.signal(signal.SIGTERM, lambda *_: worker.stop())
    signal.signal(signal.SIGINT, lambda *_: worker.stop())
    try:
        worker.run()
    finally:
        if warm is not None:
            warm.close()
    worker.queue.close()
    return 0


#: Environment variable that turns the warm render process off (``0``; on by default).
#: Off, every render starts a fresh child and comparison builds fork from the worker.
WARM_ENV = "EARFOLD_WARM_PROCESS"


def use_warm_process(worker: Worker, *, fork_builds: bool = True) -> WarmSlot | None:
    """Give ``worker`` its warm render process, started now so that it loads what jobs
    need while the worker waits for the first one; with :data:`WARM_ENV` ``=0`` instead,
    and ``fork_builds``, fork comparison builds from this process (loaded here, once)."""
    if os.environ.get(WARM_ENV, "1").strip() != "0":
        worker.warm = WarmSlot(child_environment())
        worker.warm.prepare()
        return worker.warm
    if not fork_builds:
        return None
    os.environ.update(SINGLE_THREADED)
    from ..comparisons.forked import warm_up

    try:
        warm_up()
    except Exception:  # noqa: BLE001 - a build reports such a problem itself, with context
        pass
    worker.fork_builds = True
    return None


if __name__ == "__main__":
    sys.exit(main())
