"""The Redis job store's URL and key names, without importing the Redis client.

``redis://HOST:PORT/DB`` (optionally ``?prefix=NAME``, default ``earfold``). Every key
of one store starts with ``NAME:``; :class:`RedisKeys` names them all, so the scripts
in :mod:`earfold.service.jobs.redis_scripts` receive each key they touch in ``KEYS``
and never build a key name themselves. This module needs no Redis client, so the CLI
can check a queue URL where the ``[redis]`` extra is not installed.
"""

from __future__ import annotations

from dataclasses import dataclass
from urllib.parse import parse_qs, urlencode, urlsplit, urlunsplit

from .states import JobState

#: Key prefix when the URL names none.
DEFAULT_PREFIX = "earfold"

#: Job states in the order their index keys open every script's KEYS.
STATES = [s.value for s in JobState]


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


@dataclass(frozen=True)
class RedisKeys:
    """The names of one store's keys.

    Each job is a hash ``{prefix}job:{id}``; sorted sets index the jobs by state
    (``state:NAME``), by owner (``owner:NAME``), by lease expiry (``leases``) and by
    submission (``all``); ``unsent`` holds queued jobs whose message is not confirmed
    sent; ``seq`` counts submissions (the FIFO order).

    Parameters
    ----------
    prefix : str
        The prefix including its separator, e.g. ``"earfold:"``.
    """

    prefix: str

    def job(self, job_id: str) -> str:
        return f"{self.prefix}job:{job_id}"

    def state(self, state: str) -> str:
        return f"{self.prefix}state:{state}"

    def owner(self, owner: str) -> str:
        return f"{self.prefix}owner:{owner}"

    @property
    def leases(self) -> str:
        return self.prefix + "leases"

    @property
    def unsent(self) -> str:
        return self.prefix + "unsent"

    @property
    def all(self) -> str:
        return self.prefix + "all"

    @property
    def seq(self) -> str:
        return self.prefix + "seq"

    @property
    def delivery(self) -> str:
        """Prefix of the message broker's own keys."""
        return self.prefix + "dramatiq"

    def common(self) -> list[str]:
        """The keys every script receives first: the state indexes, leases, unsent."""
        return [*(self.state(s) for s in STATES), self.leases, self.unsent]
