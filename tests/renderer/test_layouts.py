"""Loudspeaker layouts, labels, channel orders and layout files (the layouts wing)."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import LayoutError
from earfold.renderer.layouts import (
    LAYOUTS,
    MAX_SPEAKERS,
    Layout,
    Speaker,
    canonical_label,
    get_layout,
    labels_from_filenames,
    labels_from_mask,
    layout_from_dict,
    load_layout_file,
    resolve_channel_order,
    suggest_layout,
)

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "layouts"

# -- positions -------------------------------------------------------------------------

# ITU-R BS.2051 loudspeaker positions (azimuth positive left / elevation, degrees), as
# tabulated in ../shared/REFERENCES.md, system by system.
_BS2051_B = [("L", 30, 0), ("R", -30, 0), ("C", 0, 0), ("Ls", 110, 0), ("Rs", -110, 0)]
_BS2051_I = [
    ("L", 30, 0),
    ("R", -30, 0),
    ("C", 0, 0),
    ("Ls", 90, 0),
    ("Rs", -90, 0),
    ("Lrs", 135, 0),
    ("Rrs", -135, 0),
]
BS2051_POSITIONS = {
    "5.1": _BS2051_B,  # system B
    "5.1.2": _BS2051_B + [("Ltf", 30, 30), ("Rtf", -30, 30)],  # system C
    "5.1.4": _BS2051_B
    + [
        ("Ltf", 30, 30),
        ("Rtf", -30, 30),  # system D
        ("Ltr", 110, 30),
        ("Rtr", -110, 30),
    ],
    "7.1": _BS2051_I,  # system I
    "7.1.4": _BS2051_I
    + [
        ("Ltf", 45, 30),
        ("Rtf", -45, 30),  # system J
        ("Ltr", 135, 30),
        ("Rtr", -135, 30),
    ],
    "22.2": (  # system H
        [(f"M{a:+04d}" if a else "M+000", a, 0) for a in (60, -60, 30, -30, 0, 90, -90, 135, -135)]
        + [("M+180", 180, 0)]
        + [(f"U{a:+04d}" if a else "U+000", a, 30) for a in (0, 45, -45, 90, -90, 135, -135)]
        + [("U+180", 180, 30), ("T+000", 0, 90)]
        + [(f"B{a:+04d}" if a else "B+000", a, -30) for a in (0, 45, -45)]
    ),
}
BS2051_SYSTEM = {
    "2.0": "A",
    "5.1": "B",
    "5.1.2": "C",
    "5.1.4": "D",
    "7.1": "I",
    "7.1.4": "J",
    "22.2": "H",
}


@pytest.mark.parametrize(
    "layout_name,label,azimuth,elevation",
    [(n, lab, az, el) for n, rows in BS2051_POSITIONS.items() for lab, az, el in rows],
)
def test_positions_follow_bs2051(layout_name, label, azimuth, elevation):
    # Source: ITU-R BS.2051 (table in ../shared/REFERENCES.md).
    spk = get_layout(layout_name).speakers[get_layout(layout_name).index(label)]
    assert spk.label == label
    assert_allclose([spk.azimuth, spk.elevation], [azimuth, elevation])
    assert not spk.lfe


def test_bs2051_layouts_have_no_speakers_beyond_the_recommendation():
    # Every non-LFE speaker of a BS.2051 layout is one the table lists (source as above).
    for name, rows in BS2051_POSITIONS.items():
        layout = LAYOUTS[name]
        listed = {lab for lab, _, _ in rows}
        assert {s.label for s in layout.speakers if not s.lfe} == listed, name


@pytest.mark.parametrize("name,letter", sorted(BS2051_SYSTEM.items()))
def test_source_names_the_bs2051_system(name, letter):
    assert re.search(rf"BS\.2051\S* system {letter}\b", LAYOUTS[name].source)


def test_22_2_lfe_channels_sit_low_left_and_right():
    # BS.2051 system H places LFE1 at +45/-30 and LFE2 at -45/-30 (from memory of the
    # Recommendation's table; only their symmetry matters for rendering).
    lay = LAYOUTS["22.2"]
    lfe = [lay.speakers[i] for i in lay.lfe_indices]
    assert [s.label for s in lfe] == ["LFE1", "LFE2"]
    assert_allclose([(s.azimuth, s.elevation) for s in lfe], [(45, -30), (-45, -30)])


def test_9_1_6_is_7_1_4_plus_wides_and_top_middles():
    # Our definition (module docstring): system J + wides +-60/0 + tops +-90/+30.
    big, base = LAYOUTS["9.1.6"], LAYOUTS["7.1.4"]
    for s in base.speakers:
        t = big.speakers[big.index(s.label)]
        assert (t.azimuth, t.elevation, t.lfe) == (s.azimuth, s.elevation, s.lfe)
    extra = {s.label: (s.azimuth, s.elevation) for s in big.speakers if s.label not in base.labels}
    assert extra == {"Lw": (60, 0), "Rw": (-60, 0), "Ltm": (90, 30), "Rtm": (-90, 30)}


def _mirror_label(label: str) -> str:
    m = re.fullmatch(r"([MUTB])([+-])(\d{3})", label)
    if m:
        flipped = "+" if m.group(3) in ("000", "180") else {"+": "-", "-": "+"}[m.group(2)]
        return f"{m.group(1)}{flipped}{m.group(3)}"
    if label in ("LFE1", "LFE2"):
        return "LFE2" if label == "LFE1" else "LFE1"
    if label.startswith("L") and label != "LFE":
        return "R" + label[1:]
    if label.startswith("R"):
        return "L" + label[1:]
    return label


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_every_builtin_layout_is_left_right_symmetric(name):
    layout = LAYOUTS[name]
    for s in layout.speakers:
        m = layout.speakers[layout.index(_mirror_label(s.label))]
        # The mirror image has the opposite azimuth (mod 360) and the same elevation.
        assert math.isclose((m.azimuth + s.azimuth) % 360.0, 0.0, abs_tol=1e-9) or math.isclose(
            (m.azimuth + s.azimuth) % 360.0, 360.0, abs_tol=1e-9
        ), (s, m)
        assert m.elevation == s.elevation and m.lfe == s.lfe
        # Positive azimuth is the left: labels starting with L sit left (geometry.py).
        if s.label[0] == "L" and not s.lfe:
            assert s.azimuth > 0 and s.vector[1] > 0


@pytest.mark.parametrize("name", [n for n in LAYOUTS if n != "LCRS"])
def test_channel_count_follows_the_layout_name(name):
    # "x.y" or "x.y.z": x main, y LFE, z height channels (common practice); 22.2 = 24.
    # LCRS is named for its channels (test_layouts_more.py).
    layout = LAYOUTS[name]
    parts = [int(p) for p in name.split(".")]
    assert layout.channels == sum(parts) == len(layout.labels)
    assert len(layout.lfe_indices) == parts[1]
    if len(parts) == 3:
        assert sum(s.elevation > 0 for s in layout.speakers) == parts[2]


def test_channel_counts_of_the_large_layouts():
    assert LAYOUTS["9.1.6"].channels == 16
    assert LAYOUTS["22.2"].channels == 24


@pytest.mark.parametrize(
    "name,mask",
    [
        ("5.1", 0x3F),  # Microsoft channel-mask documentation: 5.1 = 0x3F
        ("7.1", 0x63F),  # same: 7.1 = FL FR FC LFE BL BR SL SR
        ("7.1.4", 0x2D63F),  # computed: 7.1 + TFL TFR TBL TBR (REFERENCES.md)
        ("5.1.2", 0x3F | 0x1000 | 0x4000),  # computed: 5.1 + TFL TFR
        ("5.1.4", 0x3F | 0x1000 | 0x4000 | 0x8000 | 0x20000),  # computed: + TBL TBR
        ("7.1.2", 0x63F | 0x1000 | 0x4000),  # computed: 7.1 + TFL TFR
    ],
)
def test_default_order_is_the_wav_mask_order(name, mask):
    layout = LAYOUTS[name]
    assert labels_from_mask(mask, layout.channels) == list(layout.labels)


def test_speaker_vector_points_left_for_positive_azimuth():
    # x front, y left, z up (renderer/geometry.py); cos/sin of 30 degrees.
    v = Speaker("L", 30.0, 0.0).vector
    assert_allclose(v, [math.cos(math.radians(30)), 0.5, 0.0], atol=1e-12)
    assert_allclose(Speaker("T+000", 0.0, 90.0).vector, [0.0, 0.0, 1.0], atol=1e-12)
    assert_allclose(np.linalg.norm(Speaker("x", 123.0, -31.0).vector), 1.0)


# -- labels ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    "given,expected",
    [
        ("FL", "L"),
        ("fl", "L"),
        ("R", "R"),
        ("fc", "C"),
        ("Centre", "C"),
        ("lfe", "LFE"),
        ("SL", "Ls"),
        ("Lss", "Ls"),
        ("sr", "Rs"),
        ("Lsr", "Lrs"),
        ("BL", "Lrs"),
        ("Lb", "Lrs"),
        ("BR", "Rrs"),
        ("TFL", "Ltf"),
        ("Ltf", "Ltf"),
        ("tfr", "Rtf"),
        ("TBL", "Ltr"),
        ("TBR", "Rtr"),
        ("TSL", "Ltm"),
        ("FLW", "Lw"),
        ("FLC", "Lc"),
        ("TC", "Tc"),
        ("LFE1", "LFE1"),
        ("lfe2", "LFE2"),
        ("m+30", "M+030"),
        ("U-135", "U-135"),
        ("T-000", "T+000"),
        ("M-180", "M+180"),
        (" Ls ", "Ls"),
    ],
)
def test_canonical_label_aliases(given, expected):
    # WAV mask names (Microsoft) and SMPTE-style names are common practice.
    assert canonical_label(given) == expected


@pytest.mark.parametrize("bad", ["", "Q", "LL", "M+200", "Left Front", "X-030"])
def test_canonical_label_rejects_unknown_labels(bad):
    with pytest.raises(LayoutError, match=r"unknown channel label .*known labels: .*Ltf"):
        canonical_label(bad)


def test_index_accepts_aliases_and_layout_fallbacks():
    five = LAYOUTS["5.1"]
    assert five.index("Ls") == 4
    assert five.index("ls") == 4
    assert five.index("SL") == 4
    assert five.index("BL") == 4  # 5.1's surrounds are the rear pair of the WAV mask
    assert five.index("Lrs") == 4
    assert five.index("M+110") == 4  # BS.2051 name of system B's left surround
    assert five.index("LFE1") == 3
    seven = LAYOUTS["7.1"]
    assert seven.index("BL") == seven.labels.index("Lrs")
    assert seven.index("SL") == seven.labels.index("Ls")
    assert seven.index("M-090") == seven.labels.index("Rs")
    big = LAYOUTS["22.2"]
    assert big.index("LFE") == big.labels.index("LFE1")
    assert big.index("m-30") == big.labels.index("M-030")
    assert LAYOUTS["7.1.4"].index("U-135") == LAYOUTS["7.1.4"].labels.index("Rtr")


def test_t000_is_not_found_in_a_layout_without_a_zenith_speaker():
    with pytest.raises(LayoutError, match=r"'T\+000' is not a channel of layout '9\.1\.6'"):
        LAYOUTS["9.1.6"].index("T+000")


def test_index_error_lists_the_layout_labels():
    with pytest.raises(
        LayoutError,
        match=r"'Ltf' is not a channel of layout '5\.1'; "
        r"its channels are L, R, C, LFE, Ls, Rs",
    ):
        LAYOUTS["5.1"].index("Ltf")


def test_side_surround_alias_does_not_fall_back_to_the_rear_in_7_1():
    # In 7.1 "Ls" is the side pair: "Lss" must not land on the rear "Lrs".
    seven = LAYOUTS["7.1"]
    assert seven.labels[seven.index("Lss")] == "Ls"
    assert seven.labels[seven.index("Lsr")] == "Lrs"


# -- channel orders --------------------------------------------------------------------


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_resolve_channel_order_inverts_any_permutation(name):
    layout = LAYOUTS[name]
    rng = np.random.default_rng(len(name))
    for _ in range(5):
        perm = [int(i) for i in rng.permutation(layout.channels)]
        labels = [layout.labels[i] for i in perm]
        assert resolve_channel_order(layout, labels) == tuple(perm)
    assert resolve_channel_order(layout, layout.labels) == tuple(range(layout.channels))


def test_resolve_channel_order_accepts_wav_names():
    seven = LAYOUTS["7.1"]
    order = resolve_channel_order(seven, ["FL", "FR", "FC", "LFE", "SL", "SR", "BL", "BR"])
    assert [seven.labels[i] for i in order] == ["L", "R", "C", "LFE", "Ls", "Rs", "Lrs", "Rrs"]


def test_resolve_channel_order_reports_wrong_count():
    with pytest.raises(
        LayoutError,
        match=r"names 5 channel\(s\) \(L, R, C, LFE, Ls\) but "
        r"layout '5\.1' has 6: L, R, C, LFE, Ls, Rs",
    ):
        resolve_channel_order(LAYOUTS["5.1"], ["L", "R", "C", "LFE", "Ls"])


def test_resolve_channel_order_reports_duplicates_unknown_and_missing():
    with pytest.raises(LayoutError) as info:
        resolve_channel_order(LAYOUTS["5.1"], ["L", "FL", "C", "LFE", "Foo", "Rs"])
    msg = str(info.value)
    assert "unknown label(s) 'Foo'" in msg
    assert "repeated: L (given as 'L', 'FL')" in msg
    assert "missing: R, Ls" in msg
    assert msg.endswith("layout '5.1' has 6: L, R, C, LFE, Ls, Rs")


def test_resolve_channel_order_reports_rear_and_surround_both_given_in_5_1():
    with pytest.raises(LayoutError, match=r"repeated: Ls \(given as 'Ls', 'BL'\).*missing: Rs"):
        resolve_channel_order(LAYOUTS["5.1"], ["L", "R", "C", "LFE", "Ls", "BL"])


@pytest.mark.parametrize(
    "paths,expected",
    [
        (
            ["mix.L.wav", "mix_Ls.wav", "scene-LFE.flac", "Mix.Rtf.wav", "take3 C.wav"],
            ["L", "Ls", "LFE", "Rtf", "C"],
        ),
        (["stems/ep1/mix.fl.wav", "stems/ep1/mix.FR.wav"], ["L", "R"]),
        (["hall_M-030.wav", "hall_u+045.wav", "hall-T+000.wav"], ["M-030", "U+045", "T+000"]),
        (["Lss.wav", "x_TBR.aiff"], ["Ls", "Rtr"]),
    ],
)
def test_labels_from_filenames(paths, expected):
    assert labels_from_filenames(paths) == expected


@pytest.mark.parametrize(
    "paths",
    [
        ["mix.L.wav", "mix.wav"],
        ["drums_01.wav"],
        ["L.wav", "take-Left Front.wav"],
        ["mix_L_final.wav"],
    ],
)
def test_labels_from_filenames_needs_a_label_in_every_name(paths):
    assert labels_from_filenames(paths) is None


def test_labels_from_filenames_leaves_repeats_to_resolve():
    labels = labels_from_filenames(["a.L.wav", "b.FL.wav"])
    assert labels == ["L", "L"]
    with pytest.raises(LayoutError, match=r"repeated: L"):
        resolve_channel_order(LAYOUTS["2.0"], labels)


def test_suggest_layout_by_count_and_by_labels():
    assert suggest_layout(6).name == "5.1"
    assert suggest_layout(8).name == "7.1"
    assert suggest_layout(12).name == "7.1.4"
    assert suggest_layout(16).name == "9.1.6"
    assert suggest_layout(24).name == "22.2"
    assert suggest_layout(13) is None  # no layout of 13 channels (7 is 7.0 now)
    heights = ["L", "R", "C", "LFE", "Ls", "Rs", "Ltf", "Rtf"]
    assert suggest_layout(8, heights).name == "5.1.2"
    assert suggest_layout(8, ["FL", "FR", "FC", "LFE", "BL", "BR", "SL", "SR"]).name == "7.1"
    assert (
        suggest_layout(10, ["L", "R", "C", "LFE", "Lrs", "Rrs", "Ls", "Rs", "TFL", "TFR"]).name
        == "7.1.2"
    )
    assert suggest_layout(2, ["L", "Q"]) is None
    assert suggest_layout(3, ["L", "R"]) is None


# -- layout files ----------------------------------------------------------------------


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_to_dict_round_trips_through_json(name):
    layout = LAYOUTS[name]
    again = layout_from_dict(json.loads(json.dumps(layout.to_dict())))
    assert again == layout


def test_example_layout_file_loads():
    files = sorted(EXAMPLES.glob("*.json"))
    assert files, f"no example layouts in {EXAMPLES}"
    for path in files:
        layout = get_layout(path)
        assert layout == get_layout(str(path))
        assert layout.channels >= 1 and layout.name
        assert all(s.distance is None or s.distance > 0 for s in layout.speakers)
    hexagon = load_layout_file(EXAMPLES / "saltmarsh-hexagon.json")
    assert hexagon.channels == 6 and hexagon.lfe_indices == ()
    # A regular hexagon: neighbours 60 degrees apart all round.
    az = sorted(s.azimuth % 360 for s in hexagon.speakers)
    assert_allclose(np.diff(az + [az[0] + 360]), 60.0)
    assert hexagon.index("nw") == hexagon.labels.index("NW")


def _write(tmp_path: Path, data) -> Path:
    path = tmp_path / "room.json"
    path.write_text(data if isinstance(data, str) else json.dumps(data), encoding="utf-8")
    return path


def _spk(label="L", az=30, el=0, **kw):
    return {"label": label, "azimuth": az, "elevation": el, **kw}


def test_custom_layout_defaults_and_azimuth_wrap(tmp_path):
    path = _write(
        tmp_path,
        {
            "speakers": [
                _spk("front", 0),
                _spk("back right", 270, 10, distance=2.5),
                _spk("sub", -400 + 360, -10, lfe=True),
            ]
        },
    )
    layout = load_layout_file(path)
    assert layout.name == "room"  # from the file name
    assert layout.labels == ("front", "back right", "sub")
    assert layout.speakers[1].azimuth == -90.0 and layout.speakers[1].distance == 2.5
    assert layout.lfe_indices == (2,)
    assert layout.index("BACK RIGHT") == 1
    assert layout.index("LFE") == 2  # "sub" is a known alias of LFE


@pytest.mark.parametrize(
    "data,pattern",
    [
        ({"speakers": []}, r"has no speakers"),
        ({"name": "x"}, r"missing 'speakers'"),
        ({"speakers": {"L": 30}}, r"'speakers' must be a list"),
        ([1, 2], r"must be a JSON object"),
        (
            {"speakers": [_spk()], "speaker": []},
            r"unknown field\(s\) 'speaker'; valid fields: "
            r"name, description, source, speakers",
        ),
        ({"speakers": [{"label": "L", "azimuth": 30}]}, r"speaker 1 is missing elevation"),
        ({"speakers": [{"azimuth": 30, "elevation": 0}]}, r"speaker 1 is missing label"),
        (
            {"speakers": [_spk(), _spk("R", "-30")]},
            r"speaker 2 \('R'\) azimuth must be a number, got '-30'",
        ),
        ({"speakers": [_spk(el=True)]}, r"elevation must be a number, got True"),
        ({"speakers": [_spk(az=361)]}, r"azimuth 361 is outside -360\.\.360"),
        ({"speakers": [_spk(az=-400)]}, r"azimuth -400 is outside -360\.\.360"),
        ({"speakers": [_spk(el=90.5)]}, r"elevation 90\.5 is outside -90\.\.90"),
        ({"speakers": [_spk(distance=-1)]}, r"distance -1 must be positive"),
        ({"speakers": [_spk(distance=0)]}, r"distance 0 must be positive"),
        ({"speakers": [_spk(distance="2 m")]}, r"distance must be a number, got '2 m'"),
        ({"speakers": [_spk(lfe="yes")]}, r"lfe must be true or false, got 'yes'"),
        (
            {"speakers": [_spk(elev=0)]},
            r"unknown field\(s\) 'elev'; valid fields: label, "
            r"azimuth, elevation, distance, lfe",
        ),
        ({"speakers": [_spk("L"), _spk("L", -30)]}, r"duplicate label 'L'"),
        (
            {"speakers": [_spk("L"), _spk("fl", -30)]},
            r"duplicate label 'fl' \(same channel "
            r"as 'L'\)",
        ),
        ({"speakers": [_spk("Top, Left")]}, r"label 'Top, Left' must be 1 to 16 printable"),
        ({"speakers": [_spk("x" * 17)]}, r"must be 1 to 16 printable"),
        ({"speakers": [_spk("")]}, r"must be 1 to 16 printable"),
        ({"speakers": [_spk("tab\there")]}, r"must be 1 to 16 printable"),
        ({"speakers": [_spk(7)]}, r"label must be a string, got 7"),
        ({"speakers": ["L"]}, r"speaker 1 must be an object"),
        ({"name": 5, "speakers": [_spk()]}, r"layout name must be a string, got 5"),
        (
            {"speakers": [_spk(f"s{i}", i) for i in range(MAX_SPEAKERS + 1)]},
            rf"has {MAX_SPEAKERS + 1} speakers; at most {MAX_SPEAKERS}",
        ),
    ],
)
def test_layout_file_errors_name_the_file_and_the_problem(tmp_path, data, pattern):
    path = _write(tmp_path, data)
    with pytest.raises(LayoutError, match=re.escape(repr(str(path))) + ".*" + pattern):
        load_layout_file(path)


def test_layout_file_with_nan_is_rejected(tmp_path):
    # Python's json module reads the non-standard NaN literal.
    path = _write(tmp_path, '{"speakers": [{"label": "L", "azimuth": NaN, "elevation": 0}]}')
    with pytest.raises(LayoutError, match=r"azimuth must be finite, got nan"):
        load_layout_file(path)


def test_bad_json_reports_line_and_column(tmp_path):
    text = '{\n  "speakers": [\n    {"label": "L", "azimuth": 30 "elevation": 0}\n  ]\n}\n'
    path = _write(tmp_path, text)
    with pytest.raises(
        LayoutError,
        match=r"is not valid JSON: Expecting ',' delimiter at "
        r"line 3, column 34",
    ):
        load_layout_file(path)


def test_missing_layout_file(tmp_path):
    with pytest.raises(LayoutError, match=r"layout file '.*nope\.json' does not exist"):
        get_layout(str(tmp_path / "nope.json"))


def test_max_speakers_is_accepted(tmp_path):
    data = {"speakers": [_spk(f"s{i}", -180 + 5.5 * i) for i in range(MAX_SPEAKERS)]}
    assert load_layout_file(_write(tmp_path, data)).channels == MAX_SPEAKERS


def test_get_layout_by_name():
    assert get_layout("7.1.4") is LAYOUTS["7.1.4"]
    assert get_layout(" 22.2 ") is LAYOUTS["22.2"]
    with pytest.raises(
        LayoutError,
        match=r"unknown layout '7\.2'; choose one of 2\.0, 3\.0, "
        r".*22\.2 or give a \.json layout file",
    ):
        get_layout("7.2")


def test_layout_rejects_duplicate_labels_when_built_in_code():
    with pytest.raises(LayoutError, match=r"layout 'x' has duplicate labels: L, l"):
        Layout("x", (Speaker("L", 30, 0), Speaker("l", -30, 0)))
    with pytest.raises(LayoutError, match=r"layout 'x' has no speakers"):
        Layout("x", ())


@pytest.mark.parametrize(
    ("call", "shown"),
    [
        (lambda: layout_from_dict({"speakers": np.zeros((3, 2))}), r"got a 3 x 2 array"),
        (
            lambda: layout_from_dict({"speakers": [{"label": b"L", "azimuth": 0, "elevation": 0}]}),
            r"label must be a string, got binary data \(1 byte\)",
        ),
        (lambda: canonical_label(b"FL"), r"unknown channel label binary data \(2 bytes\)"),
        (lambda: LAYOUTS["5.1"].index(b"L"), r"binary data \(1 byte\) is not a channel"),
        (lambda: get_layout(np.array([5.1])), r"got \[5\.1\]"),
        (
            lambda: resolve_channel_order(LAYOUTS["2.0"], [b"L", np.float64(2.0)]),
            r"unknown label\(s\) binary data \(1 byte\), 2\.0",
        ),
    ],
)
def test_error_messages_show_values_not_array_or_bytes_reprs(call, shown):
    with pytest.raises(LayoutError, match=shown) as info:
        call()
    message = str(info.value)
    assert "array(" not in message and "b'" not in message and "np." not in message
