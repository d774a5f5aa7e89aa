"""The ``axml`` chunk parsed safely: no DTD, no entities, bounded size, depth and counts.

Why the standard library's expat and not ``defusedxml``: the limits we need (element count,
depth, attribute and text sizes) are checked in expat's own callbacks while the document is
read, so a hostile file stops at the first element past a limit; ``defusedxml`` refuses the
same DTD and entity constructs but has no counting limits and would be one more dependency.

Refused outright, whatever they contain: a document type declaration (``<!DOCTYPE``), hence
every entity declaration, internal ("billion laughs") or external (a file or a URL read by
the parser); a reference to an undefined entity is already an error in expat. An ADM
document needs none of them (BS.2076-2 documents are plain elements, attributes and text).
Element names are read without namespace processing and their prefix dropped
(``ebucore:audioObject`` is ``audioObject``): ADM chunks are written with and without the
EBU Core namespace, and the ADM names do not collide.
"""

from __future__ import annotations

import xml.parsers.expat
from dataclasses import dataclass, field

from ..errors import AdmError
from ._limits import (
    MAX_ATTRIBUTE_CHARS,
    MAX_ATTRIBUTES,
    MAX_DEPTH,
    MAX_ELEMENTS,
    MAX_TEXT_CHARS,
)

__all__ = ["XmlNode", "parse_axml"]

_FEED = 1 << 20  # bytes handed to expat at a time, so a limit stops the parse early


@dataclass(eq=False, slots=True)
class XmlNode:
    """One element: local name, attributes, text (stripped) and children, with its line."""

    tag: str
    attrib: dict[str, str]
    line: int
    text: str = ""
    children: list[XmlNode] = field(default_factory=list)

    def find_all(self, tag: str) -> list[XmlNode]:
        """The children named ``tag``, in document order."""
        return [c for c in self.children if c.tag == tag]

    def find(self, tag: str) -> XmlNode | None:
        """The first child named ``tag``, or None."""
        for c in self.children:
            if c.tag == tag:
                return c
        return None


def _local(name: str, cache: dict[str, str]) -> str:
    """``name`` without its namespace prefix (cached: a document repeats a few dozen names)."""
    local = cache.get(name)
    if local is None:
        if len(cache) < 4096:
            local = cache[name] = name.rpartition(":")[2]
        else:
            local = name.rpartition(":")[2]
    return local


class _Builder:
    def __init__(self, parser: xml.parsers.expat.XMLParserType) -> None:
        self.parser = parser
        self.root: XmlNode | None = None
        self.stack: list[XmlNode] = []
        self.texts: list[list[str]] = []
        self.text_sizes: list[int] = []
        self.count = 0
        self.names: dict[str, str] = {}

    def _fail(self, message: str) -> AdmError:
        return AdmError(f"axml line {self.parser.CurrentLineNumber}: {message}")

    def start(self, name: str, attrs: dict[str, str]) -> None:
        self.count += 1
        if self.count > MAX_ELEMENTS:
            raise self._fail(f"more than {MAX_ELEMENTS} elements; the reader stops there")
        if len(self.stack) >= MAX_DEPTH:
            raise self._fail(f"elements nested more than {MAX_DEPTH} deep")
        if len(attrs) > MAX_ATTRIBUTES:
            raise self._fail(f"<{name}> has {len(attrs)} attributes, more than {MAX_ATTRIBUTES}")
        for key, value in attrs.items():
            if len(value) > MAX_ATTRIBUTE_CHARS:
                raise self._fail(
                    f"attribute {key!r} of <{name}> is {len(value)} characters long, "
                    f"more than {MAX_ATTRIBUTE_CHARS}"
                )
        names = self.names
        node = XmlNode(
            _local(name, names),
            {_local(k, names): v for k, v in attrs.items()},
            self.parser.CurrentLineNumber,
        )
        if self.stack:
            self.stack[-1].children.append(node)
        elif self.root is None:
            self.root = node
        self.stack.append(node)
        self.texts.append([])
        self.text_sizes.append(0)

    def end(self, name: str) -> None:
        node = self.stack.pop()
        node.text = "".join(self.texts.pop()).strip()
        self.text_sizes.pop()

    def chars(self, data: str) -> None:
        if not self.stack:
            return
        self.text_sizes[-1] += len(data)
        if self.text_sizes[-1] > MAX_TEXT_CHARS:
            raise self._fail(
                f"the text of <{self.stack[-1].tag}> is longer than {MAX_TEXT_CHARS} characters"
            )
        self.texts[-1].append(data)

    def doctype(self, name: str, *args: object) -> None:
        raise self._fail(
            f"a document type declaration (<!DOCTYPE {name}>) is refused: an ADM document "
            "needs none, and DTDs carry entity declarations (entity expansion, external files)"
        )

    def entity(self, name: str, *args: object) -> None:
        raise self._fail(f"entity declaration {name!r} refused (no DTD or entities are read)")

    def external(self, *args: object) -> int:
        raise self._fail("an external entity reference is refused (no outside file is read)")


def parse_axml(data: bytes) -> XmlNode:
    """The element tree of an ``axml`` chunk, parsed within the limits of :mod:`._limits`.

    Raises
    ------
    AdmError
        If the XML is not well formed, has a DTD or entity declaration, or passes a limit.
    """
    parser = xml.parsers.expat.ParserCreate()
    builder = _Builder(parser)
    parser.StartElementHandler = builder.start
    parser.EndElementHandler = builder.end
    parser.CharacterDataHandler = builder.chars
    parser.StartDoctypeDeclHandler = builder.doctype
    parser.EntityDeclHandler = builder.entity
    parser.ExternalEntityRefHandler = builder.external
    parser.SetParamEntityParsing(xml.parsers.expat.XML_PARAM_ENTITY_PARSING_NEVER)
    parser.buffer_text = True
    # Trailing NUL padding is common after the document (writers reserve room for edits).
    body = data.rstrip(b"\x00 \t\r\n")
    try:
        for start in range(0, len(body), _FEED):
            parser.Parse(body[start : start + _FEED], False)
        parser.Parse(b"", True)
    except xml.parsers.expat.ExpatError as exc:
        raise AdmError(f"axml is not well-formed XML: {exc}") from None
    if builder.root is None:
        raise AdmError("axml holds no XML element")
    return builder.root
