"""The job store for a queue URL: :func:`open_queue`.

Apart from the interface (:mod:`earfold.service.jobs.queue`) so that the backends import
the interface and this module imports the backends, never the reverse. The Redis backend
is imported only for a ``redis://`` URL, and only where the ``[redis]`` extra is installed.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .queue import BackendMissing, JobQueue

#: How to install what the scale-out queue needs.
REDIS_EXTRA = "pip install 'earfold[redis]'"


def is_redis_url(url: str) -> bool:
    """True for a URL of the scale-out (Redis) backend."""
    return url.startswith(("redis://", "rediss://"))


def require_redis(what: str = "the Redis queue") -> None:
    """Raise :class:`BackendMissing` unless the Redis client and Dramatiq import.

    Parameters
    ----------
    what : str
        What needs them, for the message (e.g. ``"earfold worker"``).
    """
    missing = []
    for name in ("redis", "dramatiq"):
        try:
            __import__(name)
        except ImportError:
            missing.append(name)
    if missing:
        raise BackendMissing(
            f"{what} needs the [redis] extra ({' and '.join(missing)} not installed); "
            f"install it with: {REDIS_EXTRA}"
        )


def open_queue(url: str, data_dir: str, **options: float) -> JobQueue:
    """The backend for ``url``: ``sqlite:`` (embedded, in ``data_dir``), ``sqlite:PATH``,
    or ``redis://HOST:PORT/DB[?prefix=NAME]`` (scale-out; ``options`` go to its broker,
    see :class:`~earfold.service.jobs.redis_store.RedisJobQueue`).

    Raises
    ------
    BackendMissing
        For a Redis URL where the ``[redis]`` extra is not installed.
    ValueError
        For a scheme no backend implements yet; the message lists those that exist.
    """
    if url == "sqlite:" or url == "sqlite" or not url:
        from .sqlite_store import SqliteJobQueue

        return SqliteJobQueue(Path(data_dir) / "jobs.sqlite3")
    if url.startswith("sqlite:"):
        from .sqlite_store import SqliteJobQueue

        return SqliteJobQueue(Path(url[len("sqlite:") :]))
    if is_redis_url(url):
        require_redis()
        from .redis_store import RedisJobQueue

        broker: dict[str, Any] = dict(options)
        return RedisJobQueue(url, **broker)
    raise ValueError(
        f"no queue backend for {url!r}; available: 'sqlite:' (embedded, the "
        "default) and 'redis://HOST:PORT/DB' (scale-out)"
    )
