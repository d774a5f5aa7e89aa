"""``earfold serve``: the HTTP API on uvicorn plus its worker processes.

:func:`add_serve_parser` adds the subcommand to the ``earfold`` parser; ``python -m
earfold.service.serve_cli`` runs it alone. It binds 127.0.0.1 by default and refuses a
non-loopback address without API tokens unless ``--insecure`` is given.

The port is bound before anything else starts, and success is announced only once the
server listens and the app has started; a port that cannot be bound (in use, privileged)
is one line on stderr and exit status 2. The web stack (FastAPI, uvicorn) and the queue
backends are imported inside :func:`cmd_serve`, so adding the subcommand to the parser
costs the other commands nothing.
"""

from __future__ import annotations

import argparse
import errno
import ipaddress
import os
import signal
import socket
import sys
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from types import FrameType

from .cli_output import EXIT_BAD_INPUT, positive
from .settings import ServiceSettings, read_tokens

__all__ = [
    "DEFAULT_DATA_DIR",
    "EXIT_BAD_INPUT",
    "PortUnavailable",
    "add_serve_parser",
    "announcement",
    "bind_socket",
    "cmd_serve",
    "default_workers",
    "is_loopback",
    "settings_from_args",
]

#: Data directory when none is given: ``earfold-data`` in the current directory.
DEFAULT_DATA_DIR = "earfold-data"

#: Backlog of the listening socket (uvicorn's default).
BACKLOG = 2048

#: The old private name of :func:`earfold.service.cli_output.positive`.
_positive = positive


def default_workers() -> int:
    """Cores minus one (one is left for the API), at least one."""
    return max((os.cpu_count() or 2) - 1, 1)


def is_loopback(host: str) -> bool:
    """True for ``localhost`` and loopback addresses (127.0.0.0/8, ::1)."""
    if host.strip().lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


class PortUnavailable(Exception):
    """The address cannot be listened on; the message is one line that says what to do."""


def _url_host(host: str) -> str:
    bare = host.strip("[]")
    return f"[{bare}]" if ":" in bare else bare


def bind_socket(host: str, port: int) -> socket.socket:
    """A socket bound to ``host:port`` and listening, for the server to accept on.

    Raises
    ------
    PortUnavailable
        If the port is in use, needs privileges, or the address is not this machine's.
    """
    bare = host.strip("[]")
    family = socket.AF_INET6 if ":" in bare else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    # as uvicorn does: a port left in TIME_WAIT by a server that just stopped is free
    # (on Linux this never lets two servers listen on one port)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((bare, port))
        sock.listen(BACKLOG)
    except OSError as exc:
        sock.close()
        where = f"{_url_host(host)}:{port}"
        if exc.errno == errno.EADDRINUSE:
            message = (
                f"port {port} on {bare} is already in use (another server listens there); "
                f"choose a free one with --port, e.g. --port {port + 1 if port < 65535 else 8000}"
            )
        elif exc.errno == errno.EACCES:
            message = (
                f"no permission to listen on {where} (ports below 1024 need privileges); "
                "choose a port from 1024 up with --port"
            )
        else:
            reason = exc.strerror or str(exc)
            message = f"cannot listen on {where}: {reason}; check --host and --port"
        raise PortUnavailable(message) from None
    except BaseException:
        sock.close()
        raise
    return sock


def announcement(host: str, port: int, workers: int, settings: ServiceSettings) -> str:
    """The line ``earfold serve`` prints once it listens: the web page and the API docs."""
    base = f"http://{_url_host(host)}:{port}"
    return (
        f"earfold serving: web page {base}/  API docs {base}/docs  "
        f"({workers} worker(s); data in {settings.data_dir}"
        f"{'; tokens on' if settings.tokens else ''}; Ctrl-C stops)"
    )


def add_serve_parser(subparsers: argparse._SubParsersAction) -> None:
    """Add ``serve`` to the ``earfold`` subcommands."""
    p = subparsers.add_parser(
        "serve",
        help="run the HTTP API and its render workers",
        description="Serve the web page and the HTTP API (v1; its documentation at /docs) "
        "with a job queue (embedded SQLite by default, or Redis for several machines) and "
        "render worker processes. Binds 127.0.0.1 unless told otherwise.",
    )
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1)")
    p.add_argument(
        "--port", type=int, default=8000, help="TCP port to listen on (default 8000; 0: any free)"
    )
    p.add_argument(
        "--data-dir",
        default=DEFAULT_DATA_DIR,
        help=f"stems, renders and the job store (default ./{DEFAULT_DATA_DIR})",
    )
    p.add_argument(
        "--workers",
        type=int,
        default=default_workers(),
        help=f"render worker processes (default cores - 1 = {default_workers()}; 0 = API only)",
    )
    p.add_argument(
        "--queue",
        default="sqlite:",
        metavar="URL",
        help="job store: 'sqlite:' (embedded, default) or redis://HOST:PORT/DB "
        "(scale-out: jobs shared by several API processes and 'earfold worker' "
        "machines; needs the [redis] extra)",
    )
    p.add_argument(
        "--tokens-file",
        metavar="FILE",
        help="API tokens, one per line (also read from $EARFOLD_TOKENS)",
    )
    p.add_argument(
        "--insecure", action="store_true", help="allow a non-loopback address without API tokens"
    )
    p.add_argument("--max-upload-gb", type=positive(float), help="largest upload (default 8)")
    p.add_argument(
        "--max-queued", type=positive(int), help="queued renders before 429 (default 100)"
    )
    p.add_argument(
        "--max-channels", type=positive(int), help="most channels in a stem, else 422 (default 64)"
    )
    p.add_argument(
        "--max-duration-hours", type=positive(float), help="longest stem, else 422 (default 3)"
    )
    p.add_argument(
        "--max-hrtf-mb", type=positive(float), help="largest SOFA upload, else 413 (default 256)"
    )
    p.add_argument(
        "--max-json-mb",
        type=positive(float),
        help="largest JSON request body, else 413 (default 2)",
    )
    p.add_argument(
        "--retention-hours",
        type=positive(float),
        help="delete stems and renders after this long (default 168)",
    )
    p.add_argument("--lease-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument("--tick-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument("--max-attempts", type=positive(int), help=argparse.SUPPRESS)
    p.add_argument("--sweep-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument("--broker-heartbeat-seconds", type=positive(float), help=argparse.SUPPRESS)
    p.add_argument(
        "--min-free-mb",
        type=float,
        help="disk space that must stay free after an upload, else 507 (default 1024)",
    )
    p.add_argument(
        "--log-level",
        default="warning",
        choices=["critical", "error", "warning", "info", "debug"],
        help="how much the server logs on stderr (default warning; info adds a line per request)",
    )
    p.set_defaults(func=cmd_serve)


def settings_from_args(args: argparse.Namespace) -> ServiceSettings:
    """ServiceSettings from parsed ``serve`` arguments; ValueError on bad tokens."""
    overrides = {
        "max_upload_bytes": args.max_upload_gb and int(args.max_upload_gb * 1e9),
        "max_queued": args.max_queued,
        "max_channels": args.max_channels,
        "max_duration_s": args.max_duration_hours and args.max_duration_hours * 3600,
        "max_hrtf_bytes": args.max_hrtf_mb and int(args.max_hrtf_mb * 2**20),
        "max_json_bytes": args.max_json_mb and int(args.max_json_mb * 2**20),
        "retention_s": args.retention_hours and args.retention_hours * 3600,
        "lease_s": args.lease_seconds,
        "tick_s": args.tick_seconds,
        "max_attempts": args.max_attempts,
        "sweep_s": args.sweep_seconds,
        "broker_heartbeat_s": args.broker_heartbeat_seconds,
        "min_free_bytes": None if args.min_free_mb is None else int(args.min_free_mb * 2**20),
    }
    return ServiceSettings(
        data_dir=Path(args.data_dir).resolve(),
        queue_url=args.queue,
        tokens=read_tokens(args.tokens_file),
        **{k: v for k, v in overrides.items() if v is not None},
    )


def _error(message: str) -> int:
    print(f"earfold: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def cmd_serve(args: argparse.Namespace) -> int:
    """Run the API until interrupted; workers are stopped on the way out."""
    try:
        settings = settings_from_args(args)
    except ValueError as exc:
        return _error(str(exc))
    if not is_loopback(args.host) and not settings.tokens and not args.insecure:
        return _error(
            f"refusing to serve on {args.host!r} without API tokens; give "
            "--tokens-file FILE (or $EARFOLD_TOKENS), bind 127.0.0.1, or pass --insecure"
        )
    if args.workers < 0:
        return _error(f"--workers must be >= 0, got {args.workers}")
    if not 0 <= args.port <= 65535:
        return _error(f"--port must be 0 to 65535, got {args.port}")
    from .jobs.factory import is_redis_url, require_redis

    if is_redis_url(settings.queue_url):
        try:
            require_redis("--queue redis://...")
        except ValueError as exc:
            return _error(str(exc))
    # Bound first: a port in use fails here, before the app, the job store or any worker.
    try:
        sock = bind_socket(args.host, args.port)
    except PortUnavailable as exc:
        return _error(str(exc))
    try:
        return _serve(args, settings, sock)
    finally:
        sock.close()


def _serve(args: argparse.Namespace, settings: ServiceSettings, sock: socket.socket) -> int:
    import uvicorn

    from .app import create_app
    from .jobs.pool import WorkerPool

    class AnnouncingServer(uvicorn.Server):
        """uvicorn's server that calls ``announce`` once it listens and the app started,
        ``stopping`` as soon as a signal asks it to stop, and ``stopped`` once it has
        shut down."""

        def __init__(
            self,
            config: uvicorn.Config,
            announce: Callable[[], None],
            stopped: Callable[[], None],
            stopping: Callable[[], None],
        ) -> None:
            super().__init__(config)
            self.announce = announce
            self.stopped = stopped
            self.stopping = stopping

        def handle_exit(self, sig: int, frame: FrameType | None) -> None:
            self.stopping()  # first: no worker is restarted from here on
            super().handle_exit(sig, frame)

        async def startup(self, sockets: list[socket.socket] | None = None) -> None:
            await super().startup(sockets=sockets)
            if self.started and not self.should_exit:
                self.announce()

        async def shutdown(self, sockets: list[socket.socket] | None = None) -> None:
            await super().shutdown(sockets=sockets)
            # here, not after run(): uvicorn re-raises SIGTERM once run() ends, and the
            # workers must hand their jobs back first
            self.stopped()

    try:
        app = create_app(settings)
    except (OSError, ValueError) as exc:
        return _error(str(exc))
    line = announcement(args.host, sock.getsockname()[1], args.workers, settings)
    config = uvicorn.Config(
        app, log_level=args.log_level, access_log=args.log_level in ("info", "debug")
    )
    pool = WorkerPool(settings, args.workers)
    server = AnnouncingServer(
        config,
        lambda: print(line, file=sys.stderr, flush=True),
        pool.stop,
        pool.begin_shutdown,
    )
    # A stop signal before uvicorn listens for signals (or after it has put back the
    # handlers it found, when it raises the signal again) must neither kill this process
    # before its workers are stopped nor let the pool restart workers: until the pool is
    # stopped, a signal only begins the shutdown; it is raised again once the pool is down.
    caught: list[int] = []

    def early_exit(sig: int, frame: FrameType | None) -> None:
        caught.append(sig)
        pool.begin_shutdown()
        server.should_exit = True

    main_thread = threading.current_thread() is threading.main_thread()
    previous = {sig: signal.signal(sig, early_exit) for sig in _STOP_SIGNALS if main_thread}
    try:
        pool.start()
        server.run(sockets=[sock])
    finally:
        pool.stop()
        for stop_signal, handler in previous.items():
            signal.signal(stop_signal, handler)
    for number in dict.fromkeys(reversed(caught)):
        signal.raise_signal(number)  # as uvicorn does: end as the signal asked
    return 0


#: Signals that stop ``earfold serve`` (those uvicorn handles).
_STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="earfold")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    add_serve_parser(sub)
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] != "serve":
        argv = ["serve", *argv]
    args = parser.parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    os.environ.setdefault("PYTHONUNBUFFERED", "1")
    sys.exit(main())
