"""Writing a file whole or not at all, for the service: the renderer's one helper.

A reader (another API process, a worker, a person's download) never sees half a file:
the content goes to a hidden temporary name beside the target (same folder, so the same
volume) and is renamed over the target when complete
(:mod:`earfold.renderer.files`). An interrupted write leaves only a
``.NAME.XXXXXXXX.part`` file, which the job sweep removes. Importing it loads no audio,
SOFA or web library, so the command line can use it.
"""

from __future__ import annotations

from earfold.renderer.files import write_bytes_atomic, write_json_atomic, write_text_atomic

__all__ = ["atomic_write_bytes", "atomic_write_text", "write_json_atomic"]

#: The service's names for the renderer's helpers.
atomic_write_bytes = write_bytes_atomic
atomic_write_text = write_text_atomic
