"""ADM object masters: broadcast WAVs (RIFF, RF64, BW64) with ``axml`` and ``chna`` chunks.

Reads ITU-R BS.2076-2 (the Audio Definition Model, in ``axml``) and ITU-R BS.2088
(``chna``, the track map, and the BW64 header), with the common definitions of
ITU-R BS.2094 for formats a file references without defining.

- :func:`read_adm` -> :class:`AdmMaster`: one programme resolved to the file's tracks
  (objects with their blocks, bed loudspeakers, HOA packs; what is ignored and why).
- :func:`object_positions`: an object's position, gain and extent at any times
  (BS.2076-2 interpolation: ``jumpPosition``, ``interpolationLength``).
- :func:`inspect_adm`: a JSON-ready summary for a command or a page.
- :func:`read_wav_chunks`: the header walk alone (``fmt ``, ``data``, ``chna``, ``axml``).
- :func:`write_master`: a master written byte by byte (the benchmark's, the tests'), with
  the ``axml`` element builders in ``_write``.

Modules, each one concept: ``_chunks`` (RIFF/RF64/BW64), ``_chna``, ``_xml`` (safe
parsing, limits in ``_limits``), ``_time``, ``_ids``, ``_definitions`` (XML to
definitions), ``_common_data``/``_common`` (BS.2094 table), ``_read`` (the programme
resolved), ``_positions``, ``_inspect``, ``_write``.
"""

from __future__ import annotations

from ._chna import ChnaEntry, parse_chna
from ._chunks import WavChunks, read_wav_chunks
from ._common_data import (
    BS2051_SYSTEMS,
    COMMON_DIRECT_SPEAKERS,
    COMMON_HOA_PACKS,
    COMMON_SPEAKER_PACKS,
)
from ._inspect import inspect_adm, motion_summary
from ._limits import (
    MAX_ATTRIBUTE_CHARS,
    MAX_ATTRIBUTES,
    MAX_AXML_BYTES,
    MAX_BLOCKS_PER_CHANNEL,
    MAX_DEPTH,
    MAX_ELEMENTS,
    MAX_TEXT_CHARS,
    MAX_TOTAL_BLOCKS,
)
from ._model import (
    AdmMaster,
    BedChannel,
    ChannelFormat,
    HoaBlock,
    HoaPack,
    ObjectBlock,
    ObjectChannel,
    PackFormat,
    SpeakerBlock,
)
from ._positions import ObjectPath, object_positions
from ._read import read_adm
from ._time import format_time, parse_time
from ._write import write_master

__all__ = [
    "BS2051_SYSTEMS",
    "COMMON_DIRECT_SPEAKERS",
    "COMMON_HOA_PACKS",
    "COMMON_SPEAKER_PACKS",
    "MAX_ATTRIBUTES",
    "MAX_ATTRIBUTE_CHARS",
    "MAX_AXML_BYTES",
    "MAX_BLOCKS_PER_CHANNEL",
    "MAX_DEPTH",
    "MAX_ELEMENTS",
    "MAX_TEXT_CHARS",
    "MAX_TOTAL_BLOCKS",
    "AdmMaster",
    "BedChannel",
    "ChannelFormat",
    "ChnaEntry",
    "HoaBlock",
    "HoaPack",
    "ObjectBlock",
    "ObjectChannel",
    "ObjectPath",
    "PackFormat",
    "SpeakerBlock",
    "WavChunks",
    "format_time",
    "inspect_adm",
    "motion_summary",
    "object_positions",
    "parse_chna",
    "parse_time",
    "read_adm",
    "read_wav_chunks",
    "write_master",
]
