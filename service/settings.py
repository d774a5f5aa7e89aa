"""Settings of the HTTP service and its workers.

One frozen :class:`ServiceSettings` is built once (by ``earfold serve`` or a test) and
passed down; nothing reads global mutable state. Each default is a documented constant
so that its reasoning sits beside its value. Settings cross process boundaries as JSON
(:meth:`ServiceSettings.to_json`), never pickled.
"""

from __future__ import annotations

import dataclasses
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

#: Largest request body accepted by ``POST /v1/stems`` (bytes). 8 GiB holds about 2 hours
#: of 7.1.4 at 48 kHz / 24 bit; beyond that a studio would render on the command line.
DEFAULT_MAX_UPLOAD_BYTES = 8 * 1024**3

#: Largest SOFA upload (bytes). Measured sets of thousands of directions are tens of MB.
DEFAULT_MAX_HRTF_BYTES = 256 * 1024**2

#: Largest JSON request body (bytes), checked before it is read and while it streams.
#: The largest real one, a comparison of 8 variants each with a custom layout and 64 EQ
#: bands, is under 100 kB; 2 MiB leaves room without letting a body grow the server.
DEFAULT_MAX_JSON_BYTES = 2 * 1024**2

#: Most channels a stem may have (the renderer's own limit is higher; a service keeps
#: memory per render bounded).
DEFAULT_MAX_CHANNELS = 64

#: Longest stem accepted, in seconds (3 hours: a feature-length reel with margin).
DEFAULT_MAX_DURATION_S = 3 * 3600.0

#: Jobs that may wait in the queue before ``POST /v1/renders`` answers 429.
DEFAULT_MAX_QUEUED = 100

#: Lease a worker holds on a running job (s). A worker that stops heartbeating loses the
#: job this long after its last beat; short enough to recover quickly from a crash, long
#: enough that a busy machine does not steal jobs from a live worker.
DEFAULT_LEASE_S = 30.0

#: How often a worker heartbeats, reports progress and checks for cancellation (s). The
#: issue asks that a cancelled render stop within a second or two.
DEFAULT_TICK_S = 0.25

#: How often an idle worker looks for a job (s); bounds submit-to-running latency.
DEFAULT_POLL_S = 0.05

#: Attempts after which a job whose worker keeps dying is failed instead of retried.
DEFAULT_MAX_ATTEMPTS = 3

#: Broker heartbeat timeout of the Redis backend (s): Dramatiq redelivers the messages of
#: a worker silent this long (its default, 60 s, with its default maintenance chance took
#: minutes to redeliver). See service/jobs/redis_delivery.py.
DEFAULT_BROKER_HEARTBEAT_S = 30.0

#: Share of Redis broker commands that run its dead-worker maintenance.
DEFAULT_BROKER_MAINTENANCE_CHANCE = 0.1

#: Stems and renders older than this are deleted by the retention sweep (s): 7 days.
DEFAULT_RETENTION_S = 7 * 24 * 3600.0

#: How often the retention sweep runs (s).
DEFAULT_SWEEP_S = 600.0

#: Free space that must remain on the data volume after an upload (bytes), or 507.
DEFAULT_MIN_FREE_BYTES = 1024**3

#: Time (s) and address-space (bytes) limits of the process that validates a SOFA upload.
DEFAULT_HRTF_CHECK_TIMEOUT_S = 30.0
DEFAULT_HRTF_CHECK_MEMORY_BYTES = 2 * 1024**3

#: Environment variable holding API tokens (comma-separated), as an alternative to a file.
TOKENS_ENV = "EARFOLD_TOKENS"


@dataclass(frozen=True)
class ServiceSettings:
    """Everything the API and the workers are configured with.

    Attributes
    ----------
    data_dir : Path
        Root of ``stems/``, ``renders/``, ``hrtf/``, ``tmp/`` and the job store.
    queue_url : str
        ``sqlite:`` (the embedded store in ``data_dir``) or another backend's URL.
    tokens : tuple of str
        API tokens; empty means no authentication (loopback use).
    """

    data_dir: Path
    queue_url: str = "sqlite:"
    tokens: tuple[str, ...] = ()
    max_upload_bytes: int = DEFAULT_MAX_UPLOAD_BYTES
    max_hrtf_bytes: int = DEFAULT_MAX_HRTF_BYTES
    max_json_bytes: int = DEFAULT_MAX_JSON_BYTES
    max_channels: int = DEFAULT_MAX_CHANNELS
    max_duration_s: float = DEFAULT_MAX_DURATION_S
    max_queued: int = DEFAULT_MAX_QUEUED
    lease_s: float = DEFAULT_LEASE_S
    tick_s: float = DEFAULT_TICK_S
    poll_s: float = DEFAULT_POLL_S
    max_attempts: int = DEFAULT_MAX_ATTEMPTS
    broker_heartbeat_s: float = DEFAULT_BROKER_HEARTBEAT_S
    broker_maintenance_chance: float = DEFAULT_BROKER_MAINTENANCE_CHANCE
    retention_s: float = DEFAULT_RETENTION_S
    sweep_s: float = DEFAULT_SWEEP_S
    min_free_bytes: int = DEFAULT_MIN_FREE_BYTES
    hrtf_check_timeout_s: float = DEFAULT_HRTF_CHECK_TIMEOUT_S
    hrtf_check_memory_bytes: int = DEFAULT_HRTF_CHECK_MEMORY_BYTES
    extra: dict = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "data_dir", Path(self.data_dir))
        object.__setattr__(self, "tokens", tuple(t for t in self.tokens if t))

    @property
    def auth_enabled(self) -> bool:
        return bool(self.tokens)

    def broker_options(self) -> dict[str, float]:
        """Options of a network queue backend (:func:`earfold.service.jobs.open_queue`)."""
        if not self.queue_url.startswith(("redis://", "rediss://")):
            return {}
        return {
            "heartbeat_timeout_s": self.broker_heartbeat_s,
            "maintenance_chance": self.broker_maintenance_chance,
        }

    def replace(self, **changes: Any) -> ServiceSettings:
        return dataclasses.replace(self, **changes)

    def to_json(self, *, include_tokens: bool = False) -> str:
        """JSON for a worker process; tokens are left out unless asked for."""
        data = dataclasses.asdict(self)
        data["data_dir"] = str(self.data_dir)
        data["tokens"] = list(self.tokens) if include_tokens else []
        return json.dumps(data)

    @classmethod
    def from_json(cls, text: str) -> ServiceSettings:
        data = json.loads(text)
        data["tokens"] = tuple(data.get("tokens") or ())
        known = {f.name for f in dataclasses.fields(cls)}
        return cls(**{k: v for k, v in data.items() if k in known})


def read_tokens(
    path: str | os.PathLike[str] | None = None, env: Mapping[str, str] | None = None
) -> tuple[str, ...]:
    """API tokens from a file (one per line, ``#`` comments) and/or ``EARFOLD_TOKENS``.

    Raises
    ------
    ValueError
        If the file cannot be read or a token is shorter than 16 characters (a short
        token can be guessed).
    """
    environ: Mapping[str, str] = os.environ if env is None else env
    tokens: list[str] = []
    if path:
        try:
            text = Path(path).read_text()
        except OSError as exc:
            raise ValueError(
                f"cannot read the tokens file {str(path)!r}: {exc.strerror or exc}"
            ) from None
        for line in text.splitlines():
            line = line.split("#", 1)[0].strip()
            if line:
                tokens.append(line)
    tokens += [t.strip() for t in environ.get(TOKENS_ENV, "").split(",") if t.strip()]
    short = [t[:4] + "..." for t in tokens if len(t) < 16]
    if short:
        raise ValueError(
            f"API tokens must be at least 16 characters; too short: {', '.join(short)}"
        )
    return tuple(dict.fromkeys(tokens))
