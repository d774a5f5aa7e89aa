"""Error types of the renderer.

Every error the renderer raises on bad input derives from :class:`RendererError`, and
also from the matching built-in type, so callers may catch either. Messages name the
file or value that was wrong (with ``!r``) and, where there is a fixed set, the valid
choices.
"""

from __future__ import annotations


class RendererError(Exception):
    """Base class of every error the renderer raises on bad input."""


class SofaError(RendererError, ValueError):
    """A SOFA (AES69) file cannot be read or cannot be used for rendering."""


class LayoutError(RendererError, ValueError):
    """A loudspeaker layout, a channel label or a channel order is invalid."""


class AudioError(RendererError, ValueError):
    """An audio file cannot be read, or a set of stems does not fit together."""


class HrirError(RendererError, ValueError):
    """An HRIR set cannot serve a request (e.g. a direction or rate it cannot give)."""
