"""Signed links: a key in the address stands in for the ``Authorization`` header.

An ``<audio src>`` (and ``EventSource``) cannot send headers, so ``POST
/v1/renders/{id}/listen`` hands out ``/v1/renders/{id}/audio?key=K``. The key is
``EXPIRY.MAC``: the expiry in Unix seconds and HMAC-SHA256 (RFC 2104, FIPS 198-1) of
the scope (a render id, or :data:`ALL_RENDERS`), the owner and the expiry, under a
server secret. The owner is not in the key: the server knows it (the render's owner, or
the owners of its configured tokens), so the link tells nothing about the token.

The secret is 32 random bytes in ``DATA_DIR/secret`` (mode 0600), made on first use and
read by every API process of that data directory, so a link made by one worker opens on
any other. Deleting the file (and restarting) revokes every link.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
import time
from collections.abc import Iterable
from pathlib import Path

from fastapi import Request

from .auth import owner_for
from .jobs import JobNotFound
from .jobs.worker import COMPARISON_KIND
from .problems import NOT_FOUND, UNAUTHORIZED, Problem
from .storage import valid_id

__all__ = ["ALL_RENDERS", "LINK_LIFETIME_S", "LinkSigner", "render_owner", "signer"]

#: How long a signed link stays valid (s): six hours, a long listening session.
LINK_LIFETIME_S = 6 * 3600

#: Scope of a key for the stream of all of an owner's renders (not a render id, which is
#: 32 hex digits, so the two can never be confused).
ALL_RENDERS = "all-renders"

#: File name of the secret in the data directory.
SECRET_NAME = "secret"

_SECRET_BYTES = 32


class LinkSigner:
    """Makes and checks keys with the secret of one data directory.

    Parameters
    ----------
    data_dir : path
        ``DATA_DIR``; the secret is ``DATA_DIR/secret``.
    clock : callable, optional
        Source of the time (Unix seconds); tests pass a fake one to expire keys.

    Examples
    --------
    >>> import tempfile
    >>> signer = LinkSigner(tempfile.mkdtemp(), clock=lambda: 1000.0)
    >>> key, expires = signer.sign("ab" * 16, "owner1")
    >>> expires
    22600
    >>> signer.check(key, "ab" * 16, ["owner1"])
    'owner1'
    """

    def __init__(self, data_dir: str | os.PathLike, *, clock=time.time) -> None:
        self.path = Path(data_dir) / SECRET_NAME
        self.clock = clock
        self._secret: bytes | None = None

    @property
    def secret(self) -> bytes:
        """The data directory's secret, made on first use (see the module docstring)."""
        if self._secret is None:
            self._secret = _load_or_make(self.path)
        return self._secret

    def _mac(self, scope: str, owner: str, expiry: int) -> str:
        message = f"{scope}\n{owner}\n{expiry}".encode()
        return hmac.new(self.secret, message, hashlib.sha256).hexdigest()

    def sign(self, scope: str, owner: str, lifetime_s: int = LINK_LIFETIME_S) -> tuple[str, int]:
        """A key for ``scope`` (a render id or :data:`ALL_RENDERS`) and ``owner``, and its
        expiry (Unix seconds)."""
        expiry = int(self.clock()) + int(lifetime_s)
        return f"{expiry}.{self._mac(scope, owner, expiry)}", expiry

    def check(self, key: str, scope: str, owners: Iterable[str]) -> str:
        """The owner among ``owners`` that ``key`` was made for, on ``scope``; a 401
        :class:`Problem` when it is malformed, expired, altered or made for another scope."""
        expiry_text, _, mac = key.partition(".")
        if not expiry_text.isdigit() or len(expiry_text) > 12 or len(mac) != 64:
            raise Problem(UNAUTHORIZED, "the link's key is malformed; ask for a new link")
        expiry = int(expiry_text)
        if expiry <= self.clock():
            raise Problem(UNAUTHORIZED, "the link has expired; ask for a new link")
        # Every candidate is compared, in constant time, so timing tells nothing.
        found = [o for o in owners if hmac.compare_digest(self._mac(scope, o, expiry), mac)]
        if not found:
            raise Problem(
                UNAUTHORIZED, "the link's key does not open this address; ask for a new link"
            )
        return found[0]


def signer(request: Request) -> LinkSigner:
    """The app's link signer (one per app, on the data directory's secret)."""
    found = getattr(request.app.state, "signer", None)
    if found is None:
        found = request.app.state.signer = LinkSigner(request.app.state.storage.root)
    return found


def render_owner(request: Request, render_id: str, key: str | None) -> str:
    """The caller's owner id for ``render_id``: from a signed ``key`` made for that
    render, or else from the ``Authorization`` header (401 problems otherwise)."""
    if key is None:
        return owner_for(request.app.state.settings.tokens, request.headers.get("authorization"))
    try:
        job = request.app.state.queue.get(render_id) if valid_id(render_id) else None
    except JobNotFound:
        job = None
    if job is None or job.payload.get("kind") == COMPARISON_KIND:
        raise Problem(NOT_FOUND, f"no render with id {render_id!r}")
    try:
        return signer(request).check(key, render_id, [job.owner])
    except Problem:
        # A key for all of the owner's renders (POST /v1/renders/events/link) opens each.
        return signer(request).check(key, ALL_RENDERS, [job.owner])


def _load_or_make(path: Path) -> bytes:
    """Read the secret at ``path``, or make it: written to a private temporary file and
    hard-linked into place, which fails if another process got there first, so every
    process ends up reading the same, complete secret."""
    try:
        return _read(path)
    except FileNotFoundError:
        pass
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{SECRET_NAME}.{os.getpid()}.{secrets.token_hex(4)}")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(secrets.token_bytes(_SECRET_BYTES))
            f.flush()
            os.fsync(f.fileno())
        try:
            os.link(tmp, path)
        except FileExistsError:
            pass  # another process made it first: use theirs
    finally:
        tmp.unlink(missing_ok=True)
    return _read(path)


def _read(path: Path) -> bytes:
    data = path.read_bytes()
    if len(data) < _SECRET_BYTES:
        raise RuntimeError(
            f"the link secret {path.name!r} in the data directory is damaged "
            f"({len(data)} bytes); delete it and restart to make a new one"
        )
    return data
