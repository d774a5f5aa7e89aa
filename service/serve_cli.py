"""``earfold serve``: the HTTP API on uvicorn plus its worker processes.

:func:`add_serve_parser` adds the subcommand to the ``earfold`` parser; ``python -m
earfold.service.serve_cli`` runs it alone. It binds 127.0.0.1 by default and refuses a
non-loopback address without API tokens unless ``--insecure`` is given.
"""

from __future__ import annotations

import argparse
import ipaddress
import os
import sys
from collections.abc import Sequence
from pathlib import Path

EXIT_BAD_INPUT = 2

#: Data directory when none is given: ``earfold-data`` in the current directory.
DEFAULT_DATA_DIR = "earfold-data"


def is_loopback(host: str) -> bool:
    """True for ``localhost`` and loopback addresses (127.0.0.0/8, ::1)."""
    if host.strip().lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _positive(kind: type):
    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
        if value <= 0:
            raise argparse.ArgumentTypeError(f"must be > 0, got {text!r}")
        return value

    return parse


def add_serve_parser(subparsers: argparse._SubParsersAction) -> None:
    """Add ``serve`` to the ``earfold`` subcommands."""
    from .jobs.pool import default_workers

    p = subparsers.add_parser(
        "serve",
        help="run the HTTP API and its render workers",
        description="Serve the HTTP API (v1; OpenAPI page at /docs) with a job queue (embedded "
        "SQLite by default, or Redis for several machines) and render worker processes. "
        "Binds 127.0.0.1 unless told otherwise.",
    )
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8000, help="port (default 8000)")
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
        "machines)",
    )
    p.add_argument(
        "--tokens-file",
        metavar="FILE",
        help="API tokens, one per line (also read from $EARFOLD_TOKENS)",
    )
    p.add_argument(
        "--insecure", action="store_true", help="allow a non-loopback address without API tokens"
    )
    p.add_argument("--max-upload-gb", type=_positive(float), help="largest upload (default 8)")
    p.add_argument(
        "--max-queued", type=_positive(int), help="queued renders before 429 (default 100)"
    )
    p.add_argument(
        "--max-channels", type=_positive(int), help="most channels in a stem, else 422 (default 64)"
    )
    p.add_argument(
        "--max-duration-hours", type=_positive(float), help="longest stem, else 422 (default 3)"
    )
    p.add_argument(
        "--max-hrtf-mb", type=_positive(float), help="largest SOFA upload, else 413 (default 256)"
    )
    p.add_argument(
        "--retention-hours",
        type=_positive(float),
        help="delete stems and renders after this long (default 168)",
    )
    p.add_argument("--lease-seconds", type=_positive(float), help=argparse.SUPPRESS)
    p.add_argument("--tick-seconds", type=_positive(float), help=argparse.SUPPRESS)
    p.add_argument("--max-attempts", type=_positive(int), help=argparse.SUPPRESS)
    p.add_argument("--sweep-seconds", type=_positive(float), help=argparse.SUPPRESS)
    p.add_argument("--broker-heartbeat-seconds", type=_positive(float), help=argparse.SUPPRESS)
    p.add_argument(
        "--min-free-mb",
        type=float,
        help="disk space that must stay free after an upload, else 507 (default 1024)",
    )
    p.add_argument(
        "--log-level", default="warning", choices=["critical", "error", "warning", "info", "debug"]
    )
    p.set_defaults(func=cmd_serve)


def settings_from_args(args: argparse.Namespace):
    """ServiceSettings from parsed ``serve`` arguments; ValueError on bad tokens."""
    from .settings import ServiceSettings, read_tokens

    overrides = {
        "max_upload_bytes": args.max_upload_gb and int(args.max_upload_gb * 1e9),
        "max_queued": args.max_queued,
        "max_channels": args.max_channels,
        "max_duration_s": args.max_duration_hours and args.max_duration_hours * 3600,
        "max_hrtf_bytes": args.max_hrtf_mb and int(args.max_hrtf_mb * 2**20),
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


def cmd_serve(args: argparse.Namespace) -> int:
    """Run the API until interrupted; workers are stopped on the way out."""
    try:
        settings = settings_from_args(args)
    except ValueError as exc:
        print(f"earfold: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    if not is_loopback(args.host) and not settings.tokens and not args.insecure:
        print(
            f"earfold: error: refusing to serve on {args.host!r} without API tokens; give "
            "--tokens-file FILE (or $EARFOLD_TOKENS), bind 127.0.0.1, or pass --insecure",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    if args.workers < 0:
        print(f"earfold: error: --workers must be >= 0, got {args.workers}", file=sys.stderr)
        return EXIT_BAD_INPUT
    import uvicorn

    from .app import create_app
    from .jobs.pool import WorkerPool

    try:
        app = create_app(settings)
    except (OSError, ValueError) as exc:
        print(f"earfold: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    pool = WorkerPool(settings, args.workers)
    pool.start()
    host = f"[{args.host}]" if ":" in args.host else args.host
    print(
        f"earfold serving on http://{host}:{args.port}  (API docs: http://{host}:{args.port}"
        f"/docs; {args.workers} worker(s); data in {settings.data_dir}"
        f"{'; tokens on' if settings.tokens else ''})",
        file=sys.stderr,
        flush=True,
    )
    try:
        uvicorn.run(
            app,
            host=args.host,
            port=args.port,
            log_level=args.log_level,
            access_log=args.log_level in ("info", "debug"),
        )
    finally:
        pool.stop()
    return 0


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
