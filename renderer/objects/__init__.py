"""ADM object masters: broadcast WAVs (RIFF, RF64, BW64) with ``axml`` and ``chna`` chunks.

Reads ITU-R BS.2076-2 (the Audio Definition Model, in ``axml``) and ITU-R BS.2088
(``chna``, the track map, and the BW64 header), with the common definitions of
ITU-R BS.2094 for formats a file references without defining.

- :func:`read_adm` -> :class:`AdmMaster`: one programme resolved to the file's tracks
  (objects with their blocks, bed loudspeakers, HOA packs; what is ignored and why).
- :func:`object_positions`: an object's position, gain and extent at any times
  (BS.2076-2 interpolation: ``jumpPosition``, ``interpolationLength``).
- :func:`object_spread`: an object's width, height, depth and diffuse as a source path's
  spread (cartesian sizes turned into angles: :func:`cartesian_extent`).
- :func:`inspect_adm`: a JSON-ready summary for a command or a page; :func:`probe_adm`
  the short one an upload gives (None for a WAV that is not a master);
  :func:`object_paths` each object's direction and gain over time, sampled for drawing,
  and :func:`adm_overview` both with the bed's directions, for a page.
- :func:`direction_vectors`: ADM positions (polar, or cartesian X right, Y front, Z up)
  as our unit vectors.
- :func:`read_wav_chunks`: the header walk alone (``fmt ``, ``data``, ``chna``, ``axml``).
- :func:`write_master`: a master written byte by byte (the benchmark's, the tests'), with
  the ``axml`` element builders in ``writer`` (a public module: the bench and the tests
  build masters with them).

Modules, each one concept: ``_chunks`` (RIFF/RF64/BW64), ``_chna``, ``_xml`` (safe
parsing, limits in ``_limits``), ``_time``, ``_ids``, ``_definitions`` (XML to
definitions), ``_common_data``/``_common`` (BS.2094 table), ``_read`` (the programme
resolved), ``_positions``, ``_extent``, ``_inspect``, ``writer``.
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
from ._extent import cartesian_extent, object_spread
from ._inspect import (
    MAX_LISTED,
    PATH_POINTS,
    adm_overview,
    inspect_adm,
    is_adm_chunks,
    motion_summary,
    object_paths,
    probe_adm,
)
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
from ._positions import BlockTable, ObjectPath, direction_vectors, object_positions
from ._read import read_adm
from ._time import format_time, parse_time
from .writer import write_master

__all__ = [
    "BlockTable",
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
    "MAX_LISTED",
    "MAX_TEXT_CHARS",
    "MAX_TOTAL_BLOCKS",
    "PATH_POINTS",
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
    "adm_overview",
    "cartesian_extent",
    "direction_vectors",
    "format_time",
    "inspect_adm",
    "is_adm_chunks",
    "motion_summary",
    "object_paths",
    "object_positions",
    "object_spread",
    "parse_chna",
    "parse_time",
    "probe_adm",
    "read_adm",
    "read_wav_chunks",
    "write_master",
]
