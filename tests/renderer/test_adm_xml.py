"""The ``axml`` chunk parsed safely and within limits, and ADM time values (BS.2076-2)."""

from __future__ import annotations

import time
import tracemalloc
from fractions import Fraction

import pytest

import earfold.renderer.objects._xml as xml_module
from earfold.renderer.errors import AdmError
from earfold.renderer.objects import MAX_DEPTH, format_time, parse_time
from earfold.renderer.objects._xml import parse_axml

LAUGHS = b"""<?xml version="1.0"?>
<!DOCTYPE lolz [
 <!ENTITY lol "lol">
 <!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">
 <!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">
 <!ENTITY lol4 "&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;">
 <!ENTITY lol9 "&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;">
]>
<audioFormatExtended><audioProgramme audioProgrammeName="&lol9;"/></audioFormatExtended>
"""

EXTERNAL = b"""<?xml version="1.0"?>
<!DOCTYPE x [<!ENTITY secret SYSTEM "file:///etc/passwd">]>
<audioFormatExtended>&secret;</audioFormatExtended>
"""

PARAMETER = b"""<?xml version="1.0"?>
<!DOCTYPE x SYSTEM "http://example.invalid/adm.dtd">
<audioFormatExtended/>
"""


@pytest.mark.parametrize("doc", [LAUGHS, EXTERNAL, PARAMETER], ids=["laughs", "file", "dtd"])
def test_dtds_and_entities_are_refused_at_once(doc):
    tracemalloc.start()
    begin = time.perf_counter()
    with pytest.raises(AdmError, match=r"document type declaration .* is refused"):
        parse_axml(doc)
    elapsed = time.perf_counter() - begin
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert elapsed < 0.5 and peak < 5_000_000


def test_an_undefined_entity_is_an_xml_error():
    with pytest.raises(AdmError, match="not well-formed XML: undefined entity"):
        parse_axml(b"<a>&secret;</a>")


def test_predefined_entities_and_namespaces_are_read():
    root = parse_axml(
        b'<ebucore:ebuCoreMain xmlns:ebucore="urn:x"><ebucore:audioObject '
        b'audioObjectName="A &amp; B">x &lt; y</ebucore:audioObject></ebucore:ebuCoreMain>\x00\x00'
    )
    assert root.tag == "ebuCoreMain"
    (child,) = root.children
    assert (child.tag, child.attrib["audioObjectName"], child.text) == (
        "audioObject",
        "A & B",
        "x < y",
    )


def test_nesting_past_the_limit():
    deep = b"<a>" * (MAX_DEPTH + 1) + b"</a>" * (MAX_DEPTH + 1)
    with pytest.raises(AdmError, match=f"nested more than {MAX_DEPTH} deep"):
        parse_axml(deep)
    parse_axml(b"<a>" * MAX_DEPTH + b"</a>" * MAX_DEPTH)


def test_element_count_past_the_limit_stops_early(monkeypatch):
    monkeypatch.setattr(xml_module, "MAX_ELEMENTS", 1000)
    doc = b"<a>" + b"<b/>" * 5_000_000 + b"</a>"  # 20 MB of elements
    begin = time.perf_counter()
    with pytest.raises(AdmError, match="more than 1000 elements"):
        parse_axml(doc)
    # expat is fed 1 MB at a time, so the parse stops within the first piece
    assert time.perf_counter() - begin < 1.0


@pytest.mark.parametrize(
    ("doc", "message"),
    [
        (b'<a v="' + b"x" * 5000 + b'"/>', r"attribute 'v' of <a> is 5000 characters long"),
        (b"<a>" + b"x" * 70000 + b"</a>", r"the text of <a> is longer than 65536 characters"),
        (b"<a " + b" ".join(b'k%d="1"' % k for k in range(70)) + b"/>", "70 attributes"),
        (b"<a><b></a>", "not well-formed XML: mismatched tag"),
        (b"", "not well-formed XML"),
        (b"\x00\x00", "not well-formed XML"),
    ],
)
def test_sizes_past_their_limits_and_broken_xml(doc, message):
    with pytest.raises(AdmError, match=message):
        parse_axml(doc)


# -- times ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "seconds"),
    [
        ("00:00:00.00000", Fraction(0)),
        ("00:00:01.5", Fraction(3, 2)),
        ("01:02:03.25000", Fraction(3723 * 4 + 1, 4)),
        ("00:00:02", Fraction(2)),
        # BS.2076-2 sample form: 480 samples at 48 kHz past 1 s
        ("00:00:01.00480S48000", Fraction(1) + Fraction(480, 48000)),
        ("00:00:00.1S3", Fraction(1, 3)),  # a fraction decimals cannot write
        ("10:00:00.00000", Fraction(36000)),
    ],
)
def test_times_are_read_exactly(text, seconds):
    assert parse_time(text, "t") == seconds


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("-00:00:01.00000", "is negative"),
        ("00:61:00.00000", "is not an ADM time"),
        ("1.5", "is not an ADM time"),
        ("00:00:01.5S0", "rate of 0"),
        ("00:00:01.3S3", "less than a second"),
        ("00:00:01.00000S", "is not an ADM time"),
    ],
)
def test_bad_times(text, message):
    with pytest.raises(AdmError, match=message):
        parse_time(text, "t")


def test_format_time():
    assert format_time(Fraction(7385, 2)) == "01:01:32.50000"
