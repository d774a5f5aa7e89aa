"""Limits on what an ADM master may ask of the reader, so that any file is read in bounded
time and memory. Each limit is far above what a real master needs; a file past one gets an
:class:`~earfold.renderer.errors.AdmError` naming the limit, never a partial model.
"""

from __future__ import annotations

__all__ = [
    "MAX_ATTRIBUTES",
    "MAX_ATTRIBUTE_CHARS",
    "MAX_AXML_BYTES",
    "MAX_BLOCKS_PER_CHANNEL",
    "MAX_CHUNKS",
    "MAX_DEPTH",
    "MAX_ELEMENTS",
    "MAX_NOTES",
    "MAX_TEXT_CHARS",
    "MAX_TOTAL_BLOCKS",
]

MAX_AXML_BYTES = 64 * 1024 * 1024
"""Largest ``axml`` chunk read into memory (64 MiB). Measured: 80 000 object blocks take
18.7 MB of XML (about 230 bytes each); masters in practice hold a few MB."""

MAX_ELEMENTS = 1_000_000
"""Most XML elements in one ``axml`` chunk. Measured (tracemalloc, Python 3.11): a parsed
element with two short attributes and a text costs about 500 bytes at the peak of the
parse, so this bounds the parse near 0.5 GB whatever the file; a block of an object is
3 to 6 elements, so this allows about 200 000 blocks in all."""

MAX_DEPTH = 32
"""Deepest XML nesting. The ADM's own nesting (ebuCoreMain, coreMetadata, format,
audioFormatExtended, audioChannelFormat, audioBlockFormat, position) is 7 deep."""

MAX_ATTRIBUTES = 64
"""Most attributes on one element (an audioBlockFormat has three or four)."""

MAX_ATTRIBUTE_CHARS = 4096
"""Longest attribute value, in characters (IDs are 4-20, names a few dozen)."""

MAX_TEXT_CHARS = 65536
"""Longest text of one element, in characters (descriptions and labels)."""

MAX_BLOCKS_PER_CHANNEL = 200_000
"""Most audioBlockFormats in one audioChannelFormat: a two-hour object updated every
36 ms. The model's memory grows with the number of blocks (about 2.2 kB each at the peak
of reading, measured), never with the length of the audio."""

MAX_TOTAL_BLOCKS = 250_000
"""Most audioBlockFormats in the whole file (also bounded by :data:`MAX_ELEMENTS`)."""

MAX_CHUNKS = 10_000
"""Most RIFF chunks walked before the reader gives up on a header."""

MAX_NOTES = 200
"""Most entries kept in a master's list of ignored parts; the rest are counted."""
