"""From the ``axml`` element tree to the file's ADM definitions, checked (BS.2076-2).

Every ID is checked for its form and for duplicates; every time for its form, sign and
order; every number for being finite and in its range. Parts the reader does not
support are collected in ``ignored`` with a reason, never dropped silently.
"""

from __future__ import annotations

import math
import re
from collections import deque
from dataclasses import dataclass, field
from fractions import Fraction

from ..errors import AdmError
from ._ids import TYPE_NAMES, check_id, type_code
from ._limits import MAX_BLOCKS_PER_CHANNEL, MAX_TOTAL_BLOCKS
from ._model import ChannelFormat, HoaBlock, ObjectBlock, PackFormat, SpeakerBlock
from ._time import parse_time
from ._xml import XmlNode

__all__ = ["Definitions", "RawObject", "read_definitions"]

_LABEL_URN = re.compile(r"urn:itu:bs:2051:\d+:speaker:", re.IGNORECASE)

#: Objects block parameters this reader does not render, and why.
_UNSUPPORTED_OBJECT_PARTS = {
    "channelLock": "channelLock (snapping to a loudspeaker) needs a loudspeaker layout",
    "objectDivergence": "objectDivergence is not rendered",
    "zoneExclusion": "zoneExclusion needs a loudspeaker layout",
    "headLocked": "headLocked is not rendered (objects are placed relative to the head anyway)",
    "headphoneVirtualise": (
        "headphoneVirtualise (bypass, direct-to-reverberant ratio) is not applied: the object "
        "is rendered binaurally like the others"
    ),
}


@dataclass
class RawObject:
    """An audioObject as written: references not yet resolved."""

    object_id: str
    name: str
    start: Fraction
    duration: Fraction | None
    pack_ids: tuple[str, ...]
    object_ids: tuple[str, ...]
    uids: tuple[str, ...]
    gain: float
    mute: bool


@dataclass
class Definitions:
    """The file's own definitions, by ID, in document order."""

    programmes: dict[str, tuple[str, tuple[str, ...]]] = field(default_factory=dict)
    contents: dict[str, tuple[str, tuple[str, ...]]] = field(default_factory=dict)
    objects: dict[str, RawObject] = field(default_factory=dict)
    packs: dict[str, PackFormat] = field(default_factory=dict)
    channels: dict[str, ChannelFormat] = field(default_factory=dict)
    streams: dict[str, str | None] = field(default_factory=dict)  # AS -> AC
    tracks: dict[str, str | None] = field(default_factory=dict)  # AT -> AS
    uids: dict[str, tuple[str | None, str | None]] = field(default_factory=dict)
    ignored: list[str] = field(default_factory=list)


def _find_root(root: XmlNode) -> XmlNode:
    """The audioFormatExtended element, wherever the wrapper puts it (breadth first)."""
    queue = deque([root])
    while queue:
        node = queue.popleft()
        if node.tag == "audioFormatExtended":
            return node
        queue.extend(node.children)
    raise AdmError("axml has no audioFormatExtended element: it holds no ADM description")


def _attr_id(node: XmlNode, attr: str, kind: str) -> str:
    value = node.attrib.get(attr)
    if value is None:
        raise AdmError(f"axml line {node.line}: <{node.tag}> has no {attr}")
    return check_id(kind, value, f"axml line {node.line}: {attr}")


def _refs(node: XmlNode, tag: str, kind: str) -> tuple[str, ...]:
    return tuple(check_id(kind, c.text, f"axml line {c.line}: <{tag}>") for c in node.find_all(tag))


def _number(text: str, what: str, low: float = -math.inf, high: float = math.inf) -> float:
    try:
        value = float(text)
    except ValueError:
        raise AdmError(f"{what}: {text!r} is not a number") from None
    if not math.isfinite(value) or not low <= value <= high:
        raise AdmError(f"{what}: {text!r} is outside {low:g} .. {high:g}")
    return value


def _flag(text: str, what: str) -> bool:
    value = text.strip().lower()
    if value in ("1", "true"):
        return True
    if value in ("0", "false", ""):
        return False
    raise AdmError(f"{what}: {text!r} is not a flag (0 or 1)")


def _gain(node: XmlNode | None, what: str) -> float:
    """A ``gain`` element as a linear factor (``gainUnit="dB"`` converted; BS.2076-2)."""
    if node is None:
        return 1.0
    unit = node.attrib.get("gainUnit", "linear")
    if unit == "dB":
        return float(10.0 ** (_number(node.text, what, -math.inf, 60.0) / 20.0))
    if unit != "linear":
        raise AdmError(f"{what}: gainUnit {unit!r} is neither 'linear' nor 'dB'")
    return _number(node.text, what, -1000.0, 1000.0)


def _optional_time(node: XmlNode, attr: str, what: str) -> Fraction | None:
    text = node.attrib.get(attr)
    return None if text is None else parse_time(text, f"{attr} of {what}")


def _check_type(node: XmlNode, ident: str, what: str) -> str:
    code = type_code(ident)
    if code not in TYPE_NAMES:
        raise AdmError(
            f"axml line {node.line}: {what} {ident} has type {code}, none of "
            f"{', '.join(f'{k} ({v})' for k, v in TYPE_NAMES.items())}"
        )
    name = TYPE_NAMES[code]
    label = node.attrib.get("typeLabel")
    definition = node.attrib.get("typeDefinition")
    if label is not None and label.upper() != code:
        raise AdmError(
            f"axml line {node.line}: {what} {ident} has typeLabel {label!r} but its ID says {code}"
        )
    if definition is not None and definition != name:
        raise AdmError(
            f"axml line {node.line}: {what} {ident} has typeDefinition {definition!r} but its "
            f"ID says {name!r}"
        )
    return name


def read_definitions(root: XmlNode) -> Definitions:
    """Every programme, content, object, pack, channel, stream, track and UID definition.

    Raises
    ------
    AdmError
        On an ID of the wrong form or defined twice, a bad time, number or flag, blocks
        out of order or past :data:`MAX_BLOCKS_PER_CHANNEL`.
    """
    top = _find_root(root)
    defs = Definitions()
    seen: dict[str, int] = {}
    total_blocks = 0

    def define(ident: str, node: XmlNode) -> None:
        key = ident.upper()
        if key in seen:
            raise AdmError(
                f"axml line {node.line}: {ident} is defined twice (first on line {seen[key]})"
            )
        seen[key] = node.line

    for node in top.children:
        tag = node.tag
        if tag == "audioProgramme":
            ident = _attr_id(node, "audioProgrammeID", "audioProgramme")
            define(ident, node)
            defs.programmes[ident] = (
                node.attrib.get("audioProgrammeName", ""),
                _refs(node, "audioContentIDRef", "audioContent"),
            )
        elif tag == "audioContent":
            ident = _attr_id(node, "audioContentID", "audioContent")
            define(ident, node)
            defs.contents[ident] = (
                node.attrib.get("audioContentName", ""),
                _refs(node, "audioObjectIDRef", "audioObject"),
            )
        elif tag == "audioObject":
            ident = _attr_id(node, "audioObjectID", "audioObject")
            define(ident, node)
            defs.objects[ident] = _read_object(node, ident, defs.ignored)
        elif tag == "audioPackFormat":
            ident = _attr_id(node, "audioPackFormatID", "audioPackFormat")
            define(ident, node)
            defs.packs[ident] = _read_pack(node, ident)
        elif tag == "audioChannelFormat":
            ident = _attr_id(node, "audioChannelFormatID", "audioChannelFormat")
            define(ident, node)
            channel = _read_channel(node, ident, defs.ignored)
            total_blocks += len(channel.blocks)
            if total_blocks > MAX_TOTAL_BLOCKS:
                raise AdmError(f"axml: more than {MAX_TOTAL_BLOCKS} audioBlockFormats in the file")
            defs.channels[ident] = channel
        elif tag == "audioStreamFormat":
            ident = _attr_id(node, "audioStreamFormatID", "audioStreamFormat")
            define(ident, node)
            # None: a coded stream (no channel format), refused only where a track plays it
            defs.streams[ident] = _one_ref(
                node,
                f"audioStreamFormat {ident}",
                "audioChannelFormat",
                "a stream refers to one",
            )
        elif tag == "audioTrackFormat":
            ident = _attr_id(node, "audioTrackFormatID", "audioTrackFormat")
            define(ident, node)
            defs.tracks[ident] = _one_ref(
                node, f"audioTrackFormat {ident}", "audioStreamFormat", "it must refer to one"
            )
        elif tag == "audioTrackUID":
            ident = _attr_id(node, "UID", "audioTrackUID")
            define(ident, node)
            track_refs = _refs(node, "audioTrackFormatIDRef", "audioTrackFormat")
            channel_refs = _refs(node, "audioChannelFormatIDRef", "audioChannelFormat")
            packs = _refs(node, "audioPackFormatIDRef", "audioPackFormat")
            refs = track_refs + channel_refs
            if len(refs) > 1 or len(packs) > 1:
                raise AdmError(
                    f"axml line {node.line}: audioTrackUID {ident} refers to more than one "
                    "track/channel format or pack format"
                )
            defs.uids[ident] = (refs[0] if refs else None, packs[0] if packs else None)
    return defs


def _one_ref(node: XmlNode, owner: str, kind: str, rule: str) -> str | None:
    """The one ``<kind>IDRef`` of ``node`` (``owner`` names it), None without one; more
    than one is an error ending in ``rule``."""
    refs = _refs(node, f"{kind}IDRef", kind)
    if len(refs) > 1:
        raise AdmError(f"axml line {node.line}: {owner} refers to {len(refs)} {kind}s; {rule}")
    return refs[0] if refs else None


def _read_object(node: XmlNode, ident: str, ignored: list[str]) -> RawObject:
    what = f"audioObject {ident}"
    start = _optional_time(node, "start", what) or Fraction(0)
    duration = _optional_time(node, "duration", what)
    mute_node = node.find("mute")
    for part in ("audioComplementaryObjectIDRef", "alternativeValueSet", "positionOffset"):
        if node.find(part) is not None:
            ignored.append(f"{what}: {part} is not supported; the object plays as written")
    return RawObject(
        object_id=ident,
        name=node.attrib.get("audioObjectName", ""),
        start=start,
        duration=duration,
        pack_ids=_refs(node, "audioPackFormatIDRef", "audioPackFormat"),
        object_ids=_refs(node, "audioObjectIDRef", "audioObject"),
        uids=_refs(node, "audioTrackUIDRef", "audioTrackUID"),
        gain=_gain(node.find("gain"), f"gain of {what}"),
        mute=_flag(mute_node.text, f"mute of {what}") if mute_node is not None else False,
    )


def _read_pack(node: XmlNode, ident: str) -> PackFormat:
    type_definition = _check_type(node, ident, "audioPackFormat")
    norm = node.find("normalization")
    nfc = node.find("nfcRefDist")
    return PackFormat(
        pack_id=ident,
        name=node.attrib.get("audioPackFormatName", ""),
        type_definition=type_definition,
        channel_ids=_refs(node, "audioChannelFormatIDRef", "audioChannelFormat"),
        pack_ids=_refs(node, "audioPackFormatIDRef", "audioPackFormat"),
        normalization=norm.text if norm is not None else None,
        nfc_ref_dist=_number(nfc.text, f"nfcRefDist of {ident}", 0.0) if nfc is not None else None,
    )


def _read_channel(node: XmlNode, ident: str, ignored: list[str]) -> ChannelFormat:
    type_definition = _check_type(node, ident, "audioChannelFormat")
    block_nodes = node.find_all("audioBlockFormat")
    if len(block_nodes) > MAX_BLOCKS_PER_CHANNEL:
        raise AdmError(
            f"axml line {node.line}: audioChannelFormat {ident} has {len(block_nodes)} "
            f"audioBlockFormats, more than {MAX_BLOCKS_PER_CHANNEL}"
        )
    low_pass: float | None = None
    for freq in node.find_all("frequency"):
        if freq.attrib.get("typeDefinition") == "lowPass":
            low_pass = _number(freq.text, f"lowPass frequency of {ident}", 0.0)
    name = node.attrib.get("audioChannelFormatName", "")
    blocks: tuple[ObjectBlock, ...] | tuple[SpeakerBlock, ...] | tuple[HoaBlock, ...] | tuple[()]
    if type_definition == "Objects":
        blocks = tuple(_object_block(b, ident, ignored) for b in block_nodes)
        _check_block_times(blocks, ident, node.line)
        _check_coordinates(blocks, ident)
    elif type_definition == "DirectSpeakers":
        blocks = tuple(_speaker_block(b, ident) for b in block_nodes)
        _check_block_times(blocks, ident, node.line)
    elif type_definition == "HOA":
        blocks = tuple(_hoa_block(b, ident) for b in block_nodes)
    else:
        blocks = ()  # Matrix and Binaural: listed as ignored where an object uses them
    if not blocks and type_definition in ("Objects", "DirectSpeakers", "HOA"):
        raise AdmError(
            f"axml line {node.line}: audioChannelFormat {ident} ({type_definition}) has no "
            "audioBlockFormat"
        )
    return ChannelFormat(ident, name, type_definition, blocks, low_pass)


def _block_id(node: XmlNode, channel: str) -> str:
    ident = _attr_id(node, "audioBlockFormatID", "audioBlockFormat")
    if ident.split("_")[1].upper() != channel.split("_")[1].upper():
        raise AdmError(
            f"axml line {node.line}: audioBlockFormat {ident} does not belong to its "
            f"audioChannelFormat {channel} (the yyyyxxxx parts differ)"
        )
    return ident


def _coordinates(node: XmlNode, what: str) -> dict[str, float]:
    """The ``position`` children without a ``bound`` attribute, by coordinate name."""
    ranges = {
        "azimuth": (-180.0, 180.0),
        "elevation": (-90.0, 90.0),
        "distance": (0.0, math.inf),
        "X": (-1.0, 1.0),
        "Y": (-1.0, 1.0),
        "Z": (-1.0, 1.0),
    }
    found: dict[str, float] = {}
    for pos in node.find_all("position"):
        if "bound" in pos.attrib:
            continue
        coordinate = pos.attrib.get("coordinate", "")
        if coordinate not in ranges:
            raise AdmError(
                f"axml line {pos.line}: {what}: position coordinate {coordinate!r} is none of "
                f"{', '.join(ranges)}"
            )
        if coordinate in found:
            raise AdmError(f"axml line {pos.line}: {what}: position {coordinate} given twice")
        low, high = ranges[coordinate]
        found[coordinate] = _number(pos.text, f"{what}: {coordinate}", low, high)
    return found


def _position(node: XmlNode, what: str) -> tuple[bool, tuple[float, float, float]]:
    found = _coordinates(node, what)
    flag_node = node.find("cartesian")
    polar = {"azimuth", "elevation"} <= found.keys()
    square = {"X", "Y"} <= found.keys()
    cartesian = _flag(flag_node.text, f"{what}: cartesian") if flag_node is not None else square
    if cartesian and not square:
        raise AdmError(f"{what}: cartesian is set but position X and Y are not both given")
    if not cartesian and not polar:
        raise AdmError(f"{what}: position azimuth and elevation are not both given")
    if cartesian:
        return True, (found["X"], found["Y"], found.get("Z", 0.0))
    return False, (found["azimuth"], found["elevation"], found.get("distance", 1.0))


def _object_block(node: XmlNode, channel: str, ignored: list[str]) -> ObjectBlock:
    ident = _block_id(node, channel)
    what = f"audioBlockFormat {ident}"
    cartesian, position = _position(node, f"axml line {node.line}: {what}")
    jump = node.find("jumpPosition")
    jump_position = _flag(jump.text, f"jumpPosition of {what}") if jump is not None else False
    interpolation: Fraction | None = None
    if jump is not None and "interpolationLength" in jump.attrib:
        text = jump.attrib["interpolationLength"]
        if ":" in text:
            interpolation = parse_time(text, f"interpolationLength of {what}")
        else:
            _number(text, f"interpolationLength of {what}", 0.0, 86400.0)
            interpolation = Fraction(text.strip())
    values = {}
    for key, high in (("width", 360.0), ("height", 360.0), ("depth", 1.0), ("diffuse", 1.0)):
        child = node.find(key)
        values[key] = (
            _number(child.text, f"{key} of {what}", 0.0, high) if child is not None else 0.0
        )
    for part, reason in _UNSUPPORTED_OBJECT_PARTS.items():
        child = node.find(part)
        if child is not None and (part != "headLocked" or _flag(child.text, part)):
            ignored.append(f"audioChannelFormat {channel}: {reason}")
    screen = node.find("screenRef")
    if screen is not None and _flag(screen.text, f"screenRef of {what}"):
        ignored.append(
            f"audioChannelFormat {channel}: screenRef (scaling to a screen) is not rendered"
        )
    return ObjectBlock(
        block_id=ident,
        rtime=_optional_time(node, "rtime", what),
        duration=_optional_time(node, "duration", what),
        cartesian=cartesian,
        position=position,
        jump_position=jump_position,
        interpolation_length=interpolation,
        gain=_gain(node.find("gain"), f"gain of {what}"),
        width=values["width"],
        height=values["height"],
        depth=values["depth"],
        diffuse=values["diffuse"],
    )


def _speaker_block(node: XmlNode, channel: str) -> SpeakerBlock:
    ident = _block_id(node, channel)
    what = f"audioBlockFormat {ident}"
    labels = tuple(_LABEL_URN.sub("", s.text) for s in node.find_all("speakerLabel") if s.text)
    cartesian, position = _position(node, f"axml line {node.line}: {what}")
    return SpeakerBlock(
        block_id=ident,
        rtime=_optional_time(node, "rtime", what),
        duration=_optional_time(node, "duration", what),
        labels=labels,
        cartesian=cartesian,
        position=position,
    )


def _hoa_block(node: XmlNode, channel: str) -> HoaBlock:
    ident = _block_id(node, channel)
    what = f"axml line {node.line}: audioBlockFormat {ident}"
    order_node, degree_node = node.find("order"), node.find("degree")
    if order_node is None or degree_node is None:
        raise AdmError(f"{what}: an HOA block needs both order and degree")
    order = int(_number(order_node.text, f"{what}: order", 0, 32))
    degree = int(_number(degree_node.text, f"{what}: degree", -32, 32))
    whole = str(order) == order_node.text.strip() and str(degree) == degree_node.text.strip()
    if not whole or abs(degree) > order:
        raise AdmError(
            f"{what}: order {order_node.text!r} and degree {degree_node.text!r} are not whole "
            "numbers with |degree| <= order"
        )
    norm = node.find("normalization")
    nfc = node.find("nfcRefDist")
    equation = node.find("equation")
    return HoaBlock(
        block_id=ident,
        order=order,
        degree=degree,
        normalization=norm.text if norm is not None else None,
        nfc_ref_dist=_number(nfc.text, f"{what}: nfcRefDist", 0.0) if nfc is not None else None,
        equation=equation.text if equation is not None else None,
    )


def _check_block_times(
    blocks: tuple[ObjectBlock, ...] | tuple[SpeakerBlock, ...], channel: str, line: int
) -> None:
    timed = [b.rtime is not None and b.duration is not None for b in blocks]
    if any(timed) and not all(timed):
        raise AdmError(
            f"axml line {line}: audioChannelFormat {channel} mixes blocks with and without "
            "rtime/duration; either every block is timed or there is one untimed block"
        )
    if not any(timed):
        if len(blocks) > 1:
            raise AdmError(
                f"axml line {line}: audioChannelFormat {channel} has {len(blocks)} blocks "
                "without rtime/duration; only a single block may hold for the whole object"
            )
        return
    end = Fraction(0)
    previous = None
    for block in blocks:
        assert block.rtime is not None and block.duration is not None
        if block.rtime < end:
            raise AdmError(
                f"audioChannelFormat {channel}: block {block.block_id} starts at "
                f"{float(block.rtime):g} s, before the previous block {previous} ends "
                f"({float(end):g} s): blocks out of order or overlapping"
            )
        end = block.rtime + block.duration
        previous = block.block_id


def _check_coordinates(blocks: tuple[ObjectBlock, ...], channel: str) -> None:
    kinds = {b.cartesian for b in blocks}
    if len(kinds) > 1:
        raise AdmError(
            f"audioChannelFormat {channel} mixes polar and cartesian blocks; interpolating "
            "between the two systems is not defined by BS.2076 and is not supported"
        )
    for b in blocks:
        if b.interpolation_length is not None and b.duration is not None:
            if b.interpolation_length > b.duration:
                raise AdmError(
                    f"audioBlockFormat {b.block_id}: interpolationLength "
                    f"{float(b.interpolation_length):g} s is longer than the block "
                    f"({float(b.duration):g} s)"
                )
