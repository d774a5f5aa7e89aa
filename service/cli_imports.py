"""What a command-line render imports: only what it uses.

A render from cached filters imports neither ``scipy.signal`` nor ``scipy.ndimage``,
``scipy.spatial`` or netCDF4; where a render must filter with ``scipy.signal`` (preparing
filters the cache does not hold yet), the renderer imports it without ``scipy.stats``
(:func:`earfold.renderer.signals.scipy_signal`). :func:`import_signal_deferring_stats`
is that import, for callers outside the renderer.
"""

from __future__ import annotations

from earfold.renderer.signals import scipy_signal

__all__ = ["import_signal_deferring_stats"]


def import_signal_deferring_stats() -> None:
    """Import ``scipy.signal`` without importing ``scipy.stats`` before it is used
    (:func:`earfold.renderer.signals.scipy_signal`)."""
    scipy_signal()
