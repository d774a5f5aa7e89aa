"""``earfold worker``: render worker processes for a shared queue, without the API.

Run it on every machine that reaches the queue (Redis) and the shared data directory.
It starts ``--processes`` worker processes, one render at a time each, and restarts any
that dies (a worker killed mid-render leaves its job to another after the lease). With
``--check`` it only tests that the queue answers and the data directory is writable,
for container health checks.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
from pathlib import Path

from .cli_output import EXIT_BAD_INPUT, positive
from .serve_cli import DEFAULT_DATA_DIR

#: Exit status of a failed ``--check``.
EXIT_UNHEALTHY = 1


def default_processes() -> int:
    """One render process per core: a worker machine runs no API."""
    return max(os.cpu_count() or 1, 1)


def add_worker_parser(subparsers: argparse._SubParsersAction) -> None:
    """Add ``worker`` to the ``earfold`` subcommands."""
    p = subparsers.add_parser(
        "worker",
        help="run render workers for a shared queue (scale-out)",
        description="Take render jobs from a shared queue and render them, one per process. "
        "Every machine running workers needs the queue (redis://HOST:PORT/DB) and the "
        "API's data directory (a network filesystem). Stops on Ctrl-C or SIGTERM, handing "
        "running jobs back.",
    )
    p.add_argument(
        "--queue",
        required=True,
        metavar="URL",
        help="job store: redis://HOST:PORT/DB (optionally ?prefix=NAME)",
    )
    p.add_argument(
        "--data-dir",
        default=DEFAULT_DATA_DIR,
        help=f"the data directory the API uses (default ./{DEFAULT_DATA_DIR})",
    )
    p.add_argument(
        "--processes",
        type=positive(int),
        default=default_processes(),
        help=f"render worker processes (default: one per core = {default_processes()})",
    )
    p.add_argument(
        "--check",
        action="store_true",
        help="only check that the queue answers and the data directory is "
        "writable; exit 0 if so, 1 if not",
    )
    p.add_argument("--lease-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument("--tick-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument("--max-attempts", type=positive(int), help=argparse.SUPPRESS)
    p.add_argument("--broker-heartbeat-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.set_defaults(func=cmd_worker)


def worker_settings(args: argparse.Namespace):
    """ServiceSettings of ``earfold worker``; ValueError for a queue it cannot use."""
    from .jobs.factory import is_redis_url, require_redis
    from .jobs.redis_keys import parse_url
    from .settings import ServiceSettings

    if not args.queue.startswith(("redis://", "rediss://", "sqlite:")):
        raise ValueError(f"--queue must be redis://HOST:PORT/DB, got {args.queue!r}")
    if is_redis_url(args.queue):
        parse_url(args.queue)
        require_redis("earfold worker")
    overrides = {
        "lease_s": args.lease_seconds,
        "tick_s": args.tick_seconds,
        "max_attempts": args.max_attempts,
        "broker_heartbeat_s": args.broker_heartbeat_seconds,
    }
    return ServiceSettings(
        data_dir=Path(args.data_dir).resolve(),
        queue_url=args.queue,
        **{k: v for k, v in overrides.items() if v is not None},
    )


def check(settings) -> str | None:
    """None if the queue answers and the data directory is writable; else the problem."""
    from .jobs import QueueError, open_queue

    if not settings.data_dir.is_dir():
        return f"the data directory {str(settings.data_dir)!r} does not exist"
    if not os.access(settings.data_dir, os.W_OK):
        return f"the data directory {str(settings.data_dir)!r} is not writable"
    try:
        queue = open_queue(settings.queue_url, str(settings.data_dir), **settings.broker_options())
    except ValueError as exc:
        return str(exc)
    try:
        ping = getattr(queue, "ping", None) or queue.counts
        ping()
    except QueueError as exc:
        return str(exc)
    finally:
        queue.close()
    return None


def cmd_worker(args: argparse.Namespace) -> int:
    """Run worker processes until SIGTERM or Ctrl-C; restart any that dies."""
    try:
        settings = worker_settings(args)
    except ValueError as exc:
        print(f"earfold: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    if args.check:
        problem = check(settings)
        if problem:
            print(f"earfold: unhealthy: {problem}", file=sys.stderr)
            return EXIT_UNHEALTHY
        print("earfold: worker check ok", file=sys.stderr)
        return 0
    if not settings.data_dir.is_dir():
        print(
            f"earfold: error: the data directory {str(settings.data_dir)!r} does not exist; "
            "give the folder the API serves from (--data-dir)",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    from .jobs.pool import WorkerPool
    from .jobs.redis_keys import display_url
    from .jobs.stop_flag import StopFlag

    stop = StopFlag()
    signal.signal(signal.SIGTERM, lambda *_: stop.ask())
    signal.signal(signal.SIGINT, lambda *_: stop.ask())
    pool = WorkerPool(settings, args.processes)
    pool.start()
    where = display_url(settings.queue_url) if "://" in settings.queue_url else settings.queue_url
    print(
        f"earfold worker: {args.processes} process(es) taking renders from {where}; data in "
        f"{settings.data_dir}",
        file=sys.stderr,
        flush=True,
    )
    try:
        while not stop.wait(1.0):
            pass
    finally:
        print(
            "earfold worker: stopping; running renders are handed back", file=sys.stderr, flush=True
        )
        pool.stop()
    return 0
