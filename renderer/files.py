"""Reading the small JSON description files users write (layouts, rooms)."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any


def read_json_file(
    path: str | os.PathLike, *, kind: str, max_bytes: int, error: type[Exception]
) -> Any:
    """Parse a JSON file, raising ``error`` with a message a person can act on.

    Parameters
    ----------
    path : path-like
        The file.
    kind : str
        What the file describes ("layout", "room"), for the messages.
    max_bytes : int
        Largest file accepted (such files are small; a huge one is a mistake).
    error : exception type
        The error to raise (a RendererError subclass).
    """
    p = Path(path)
    origin = str(path)
    try:
        size = p.stat().st_size
        if size > max_bytes:
            raise error(
                f"{origin!r} is {size} bytes; a {kind} file may be at most {max_bytes} bytes"
            )
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise error(f"{kind} file {origin!r} does not exist") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"cannot read {kind} file {origin!r}: {exc}") from exc
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise error(
            f"{origin!r} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
        ) from None
