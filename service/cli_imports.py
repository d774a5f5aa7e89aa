"""What a command-line render imports: only what it uses.

``scipy.signal`` (the render filters with it: resampling, the loudness meter's K-weighting,
the LFE's low-pass) imports, at its own import, one function of ``scipy.stats``
(``scoreatpercentile``, which only its wavelet peak finder calls), and with it all of
``scipy.stats``: a tenth to a quarter of a second before the first sample, for a module no
render uses. :func:`import_signal_deferring_stats` imports ``scipy.signal`` with
``scipy.stats`` loaded only if something asks for it.
"""

from __future__ import annotations

import importlib
import sys
import types
from collections.abc import Callable
from typing import Any

__all__ = ["import_signal_deferring_stats"]

#: Names of ``scipy.stats`` that ``scipy.signal`` takes at its import but calls only
#: inside functions: these get a stand-in that loads ``scipy.stats`` when called.
_CALLED_LATER = ("scoreatpercentile",)


def _real_stats(stand_in: types.ModuleType) -> types.ModuleType:
    if sys.modules.get("scipy.stats") is stand_in:
        del sys.modules["scipy.stats"]
    return importlib.import_module("scipy.stats")


def _deferred(stand_in: types.ModuleType, name: str) -> Callable[..., Any]:
    def call(*args: Any, **kwargs: Any) -> Any:
        return getattr(_real_stats(stand_in), name)(*args, **kwargs)

    call.__name__ = name
    return call


def import_signal_deferring_stats() -> None:
    """Import ``scipy.signal`` without importing ``scipy.stats`` before it is used.

    While ``scipy.signal`` imports, ``sys.modules["scipy.stats"]`` is a stand-in: the
    names of :data:`_CALLED_LATER` are functions that load the real module when called;
    any other name loads it at once (so a change in what ``scipy.signal`` takes costs time,
    never correctness). The stand-in is gone once ``scipy.signal`` is imported; a later
    ``import scipy.stats`` is the real one. Nothing happens when either module is already
    loaded.
    """
    if "scipy.signal" in sys.modules or "scipy.stats" in sys.modules:
        return
    import scipy

    stand_in = types.ModuleType("scipy.stats")

    def lookup(name: str) -> Any:
        if name in _CALLED_LATER:
            return _deferred(stand_in, name)
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(_real_stats(stand_in), name)

    stand_in.__getattr__ = lookup  # type: ignore[method-assign]
    sys.modules["scipy.stats"] = stand_in
    try:
        importlib.import_module("scipy.signal")
    finally:
        if sys.modules.get("scipy.stats") is stand_in:
            del sys.modules["scipy.stats"]
        # (read from the package's dict: its attribute lookup would import the real module)
        if vars(scipy).get("stats") is stand_in:  # pragma: no cover - not set by the import
            delattr(scipy, "stats")
