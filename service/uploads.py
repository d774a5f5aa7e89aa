"""Streaming multipart uploads to disk.

FastAPI's ``UploadFile`` spools each part through python-multipart with a size limit
that only truncates; a multi-GB stem needs the body streamed to disk in chunks, hashed
on the way, and refused with 413 as soon as it exceeds the limit. This module feeds
``request.stream()`` to python-multipart's push parser and writes each file part to its
own file in a folder the caller owns (and removes on failure).
"""

from __future__ import annotations

import contextlib
import hashlib
import re
import shutil
from collections.abc import AsyncIterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, BinaryIO

from python_multipart.exceptions import MultipartParseError
from python_multipart.multipart import MultipartParser, parse_options_header
from starlette.requests import ClientDisconnect, Request

from earfold.renderer.errors import shown

from .problems import BAD_REQUEST, TOO_LARGE, UNSUPPORTED, Problem

if TYPE_CHECKING:
    from .storage import Storage

#: Longest file name kept as metadata (characters); longer names are cut.
MAX_NAME_CHARS = 255

#: Most file parts in one request (a 22.2 stem as mono files is 24; 22.2 plus spares).
MAX_PARTS = 128

#: Bytes of form fields other than files kept per request.
MAX_FIELD_BYTES = 64 * 1024

_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


@dataclass(frozen=True)
class UploadedFile:
    """One file part written to disk."""

    field: str
    filename: str  # the client's name, metadata only: base name, no control characters
    path: Path
    size: int
    sha256: str


def clean_filename(raw: str) -> str:
    """The client's file name reduced to harmless metadata (base name, printable)."""
    name = raw.replace("\\", "/").split("/")[-1]
    name = _CONTROL.sub("", name).strip()
    if name in ("", ".", ".."):
        name = "upload"
    return name[:MAX_NAME_CHARS]


def _shown_name(raw: bytes) -> str:
    """A client's field or file name for a message: printable, quoted and cut as
    :func:`~earfold.renderer.errors.shown` cuts a value (the empty name in words)."""
    name = _CONTROL.sub("", raw.decode("utf-8", "replace"))
    return shown(name) if name else "with an empty name"


def declared_length(request: Request, limit: int) -> int | None:
    """The Content-Length, or 413 before reading if it exceeds ``limit``."""
    value = request.headers.get("content-length")
    if value is None:
        return None
    try:
        length = int(value)
    except ValueError:
        raise Problem(BAD_REQUEST, f"Content-Length {value!r} is not a number") from None
    if length > limit:
        raise Problem(
            TOO_LARGE,
            f"the upload is {length} bytes; at most {limit} are accepted ({limit / 1e9:.2f} GB)",
        )
    return length


async def receive_files(
    request: Request, folder: Path, *, limit: int, field: str = "file"
) -> list[UploadedFile]:
    """Stream the multipart body's ``field`` parts into ``folder`` (``part-N``).

    Raises
    ------
    Problem
        415 if the body is not multipart/form-data, 400 if it is malformed or has no
        ``field`` part, 413 once more than ``limit`` bytes have arrived.
    """
    ctype, options = parse_options_header(request.headers.get("content-type", ""))
    if ctype != b"multipart/form-data" or b"boundary" not in options:
        raise Problem(
            UNSUPPORTED,
            f"expected a multipart/form-data body with {field!r} file "
            f"parts, got Content-Type {request.headers.get('content-type', '')!r}",
        )

    files: list[UploadedFile] = []
    state: dict = {"headers": {}, "name": b"", "value": b"", "fh": None}
    current: dict = {}

    def on_header_field(data: bytes, start: int, end: int) -> None:
        state["name"] += data[start:end]

    def on_header_value(data: bytes, start: int, end: int) -> None:
        state["value"] += data[start:end]
        if len(state["value"]) > 8192:
            raise Problem(BAD_REQUEST, "a multipart header is longer than 8192 bytes")

    def on_header_end() -> None:
        state["headers"][state["name"].lower()] = state["value"]
        state["name"], state["value"] = b"", b""

    def on_headers_finished() -> None:
        _, opts = parse_options_header(state["headers"].get(b"content-disposition", b""))
        name = opts.get(b"name", b"").decode("utf-8", "replace")
        filename = opts.get(b"filename")
        current.clear()
        # Every part of ``field`` is a file, with a file name or without one (a client
        # leaves it out for an empty name); a file under another name is a mistake.
        current.update(field=name, is_file=name == field)
        if not current["is_file"] and filename is not None:
            raise Problem(
                BAD_REQUEST,
                f"no file in field {field!r}: the upload has a file "
                f"({_shown_name(filename)}) in form field {_shown_name(name.encode())}; "
                f"send it as field {field!r} (repeat the field for several files)",
            )
        if current["is_file"]:
            if len(files) >= MAX_PARTS:
                raise Problem(BAD_REQUEST, f"at most {MAX_PARTS} files per upload")
            path = folder / f"part-{len(files)}"
            current.update(
                filename=clean_filename((filename or b"").decode("utf-8", "replace")),
                path=path,
                size=0,
                digest=hashlib.sha256(),
                fh=open(path, "wb"),
            )  # noqa: SIM115 - closed in on_part_end
        else:
            current.update(size=0)

    def on_part_data(data: bytes, start: int, end: int) -> None:
        chunk = data[start:end]
        current["size"] += len(chunk)
        if current.get("is_file"):
            fh: BinaryIO = current["fh"]
            fh.write(chunk)
            current["digest"].update(chunk)
        elif current["size"] > MAX_FIELD_BYTES:
            raise Problem(
                BAD_REQUEST,
                f"form field {_shown_name(current['field'].encode())} is longer than "
                f"{MAX_FIELD_BYTES} bytes; only field {field!r} may carry files (send "
                "each as a part with a file name), other fields are short text",
            )

    def on_part_end() -> None:
        if current.get("is_file"):
            current["fh"].close()
            files.append(
                UploadedFile(
                    current["field"],
                    current["filename"],
                    current["path"],
                    current["size"],
                    current["digest"].hexdigest(),
                )
            )
        state["headers"] = {}
        current.clear()

    parser = MultipartParser(
        options[b"boundary"],
        {
            "on_header_field": on_header_field,
            "on_header_value": on_header_value,
            "on_header_end": on_header_end,
            "on_headers_finished": on_headers_finished,
            "on_part_data": on_part_data,
            "on_part_end": on_part_end,
        },
    )
    received = 0
    try:
        async for chunk in request.stream():
            received += len(chunk)
            if received > limit:
                raise Problem(
                    TOO_LARGE,
                    f"the upload exceeded {limit} bytes ({limit / 1e9:.2f} GB), the most accepted",
                )
            parser.write(chunk)
        parser.finalize()
        if current.get("is_file"):
            raise Problem(BAD_REQUEST, "the upload ended in the middle of a file; send it again")
    except MultipartParseError as exc:
        raise Problem(BAD_REQUEST, f"the multipart body is malformed: {exc}") from None
    except ClientDisconnect:
        raise Problem(BAD_REQUEST, "the client disconnected before the upload finished") from None
    finally:
        fh = current.get("fh")
        if fh is not None and not fh.closed:
            fh.close()
    if not files:
        raise Problem(
            BAD_REQUEST,
            f"no file in the upload: send the audio as multipart "
            f"field {field!r} (repeat it for several mono files)",
        )
    return files


@contextlib.asynccontextmanager
async def staged_upload(
    request: Request, storage: Storage, *, limit: int, min_free_bytes: int
) -> AsyncIterator[tuple[Path, list[UploadedFile]]]:
    """Receive an upload into a new temporary folder; remove the folder if anything fails.

    Checks the declared length against ``limit`` (413) and the free disk space (507)
    before reading a byte. The body of the ``async with`` moves what it keeps into the
    store (:meth:`Storage.commit`); on any exception, there or here, nothing is left.
    """
    length = declared_length(request, limit)
    storage.check_space(length or 0, min_free_bytes)
    folder = storage.new_tmp()
    try:
        files = await receive_files(request, folder, limit=limit)
        yield folder, files
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        raise
