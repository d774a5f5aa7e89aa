"""Layouts without LFE and the small BS.775 systems (3.0, 4.0, LCRS, 5.0 ... 9.0.6), the
WAV channel masks that name them, and the mono surround of LCRS spread over two
loudspeakers."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import LayoutError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.io import write_audio
from earfold.renderer.layouts import (
    LAYOUTS,
    labels_from_filenames,
    labels_from_mask,
    layout_from_dict,
    resolve_channel_order,
    suggest_layout,
)
from earfold.renderer.render import RenderSettings, plan_render

FS = 48000

# Each LFE-less layout is its namesake with the LFE left out, the order otherwise kept.
WITHOUT_LFE = {
    "5.0": "5.1",
    "5.0.2": "5.1.2",
    "5.0.4": "5.1.4",
    "7.0": "7.1",
    "7.0.2": "7.1.2",
    "7.0.4": "7.1.4",
    "9.0.6": "9.1.6",
}


@pytest.mark.parametrize("name,full", sorted(WITHOUT_LFE.items()))
def test_lfe_less_layouts_are_their_namesakes_without_the_lfe(name, full):
    small, big = LAYOUTS[name], LAYOUTS[full]
    assert small.lfe_indices == ()
    assert small.speakers == tuple(s for s in big.speakers if not s.lfe)
    assert "without its LFE" in small.source
    assert small.source.split(" without")[0].split(" plus")[0] in big.source


@pytest.mark.parametrize(
    "name,rows",
    [
        # ITU-R BS.775-3, Figure 1 and its table: C 0, L/R +-30, LS/RS +-100..120 (we take
        # +-110, BS.2051 system B's value).
        ("3.0", [("L", 30, 0), ("R", -30, 0), ("C", 0, 0)]),
        ("4.0", [("L", 30, 0), ("R", -30, 0), ("Ls", 110, 0), ("Rs", -110, 0)]),
    ],
)
def test_bs775_positions(name, rows):
    layout = LAYOUTS[name]
    assert [(s.label, s.azimuth, s.elevation) for s in layout.speakers] == rows
    assert "BS.775" in layout.source
    for s in layout.speakers:
        if s.label in ("Ls", "Rs"):
            assert 100 <= abs(s.azimuth) <= 120  # BS.775-3 Figure 1


def test_lcrs_surround_is_one_channel_on_both_surround_loudspeakers():
    # BS.775 3/1: the mono surround S feeds both surround loudspeakers at -3 dB each
    # (from memory of the Recommendation's note); placed at the 2/2 surround angles.
    lcrs = LAYOUTS["LCRS"]
    assert lcrs.labels == ("L", "R", "C", "S")
    s = lcrs.speakers[3]
    assert s.spread == ((110.0, 0.0), (-110.0, 0.0))
    assert_allclose(20 * np.log10(s.spread_gain), -3.0103, atol=1e-4)
    assert "3/1" in lcrs.source


@pytest.mark.parametrize(
    "mask,name",
    [
        (0x7, "3.0"),  # FL FR FC (Microsoft KSAUDIO_SPEAKER_3POINT0, from memory)
        (0x33, "4.0"),  # FL FR BL BR (KSAUDIO_SPEAKER_QUAD, from memory)
        (0x107, "LCRS"),  # FL FR FC BC (KSAUDIO_SPEAKER_SURROUND, from memory)
        (0x37, "5.0"),  # 5.1's 0x3F without the LFE bit 0x8 (computed)
        (0x637, "7.0"),  # 7.1's 0x63F without 0x8 (computed)
        (0x37 | 0x1000 | 0x4000, "5.0.2"),  # + TFL TFR (computed)
        (0x37 | 0x1000 | 0x4000 | 0x8000 | 0x20000, "5.0.4"),  # + TBL TBR (computed)
        (0x637 | 0x1000 | 0x4000, "7.0.2"),  # computed
        (0x637 | 0x1000 | 0x4000 | 0x8000 | 0x20000, "7.0.4"),  # computed
    ],
)
def test_channel_masks_without_the_lfe_bit_name_the_lfe_less_layouts(mask, name):
    layout = LAYOUTS[name]
    labels = labels_from_mask(mask, layout.channels)
    assert suggest_layout(layout.channels, labels) is layout
    # and the layout's default order is the mask's order
    assert labels_from_mask(mask, layout.channels, layout) == list(layout.labels)


@pytest.mark.parametrize(
    "count,name",
    [(3, "3.0"), (4, "4.0"), (5, "5.0"), (7, "7.0"), (9, "5.0.4"), (11, "7.0.4"), (15, "9.0.6")],
)
def test_suggest_layout_by_count_of_the_small_and_lfe_less_counts(count, name):
    assert suggest_layout(count).name == name


def test_lcrs_from_labelled_mono_files():
    # "S" (BS.775's name for the 3/1 surround) and the WAV mask's back centre are one
    # channel: labelled file names find LCRS as its mask does.
    labels = labels_from_filenames(["pad_L.wav", "pad_R.wav", "pad_C.wav", "pad_S.wav"])
    assert suggest_layout(4, labels) is LAYOUTS["LCRS"]
    assert resolve_channel_order(LAYOUTS["LCRS"], ["BC", "L", "R", "C"]) == (3, 0, 1, 2)


def test_lcrs_name_and_count():
    # LCRS is named for its channels, not "x.y": four channels, no LFE, no heights.
    lcrs = LAYOUTS["LCRS"]
    assert lcrs.channels == 4 and lcrs.lfe_indices == ()
    assert all(s.elevation == 0 for s in lcrs.speakers)


def test_spread_round_trips_and_is_checked():
    data = json.loads(json.dumps(LAYOUTS["LCRS"].to_dict()))
    assert data["speakers"][3]["spread"] == [
        {"azimuth": 110.0, "elevation": 0.0},
        {"azimuth": -110.0, "elevation": 0.0},
    ]
    assert layout_from_dict(data) == LAYOUTS["LCRS"]
    bad = json.loads(json.dumps(data))
    bad["speakers"][3]["spread"] = [{"azimuth": 110, "elevation": 0}]
    with pytest.raises(LayoutError, match=r"speaker 4 \('S'\) spread must be a list of 2 to 8"):
        layout_from_dict(bad)
    bad["speakers"][3]["spread"] = [{"azimuth": 110, "elevation": 0}, {"azimuth": 1}]
    with pytest.raises(LayoutError, match=r"spread direction 2 needs azimuth and elevation"):
        layout_from_dict(bad)
    bad["speakers"][3]["spread"] = None
    bad["speakers"][3]["lfe"] = True
    assert layout_from_dict(bad).speakers[3].spread == ()


def _stem(tmp_path, channels):
    rng = np.random.default_rng(3)
    data = (0.1 * rng.standard_normal((FS // 20, channels))).astype(np.float32)
    path = tmp_path / "stem.wav"
    write_audio(path, data, FS, subtype="FLOAT")
    return path


def test_lcrs_surround_filter_is_the_two_surround_pairs_at_minus_3_db(tmp_path):
    plan = plan_render([_stem(tmp_path, 4)], RenderSettings(layout="LCRS", eq="none"))
    hset = plan.hrir_set
    pairs = [hset.pair(direction_to_vector(az, 0.0)).ir for az in (110.0, -110.0)]
    gain = 10 ** (plan.calibration["gain_db"] / 20)
    expected = np.zeros_like(plan.filters[3])
    for p in pairs:
        expected[:, : p.shape[-1]] += p / np.sqrt(2)
    assert_allclose(plan.filters[3], gain * expected, rtol=1e-3, atol=1e-9 * np.abs(expected).max())
    entry = plan.speakers[3]
    assert [(d["azimuth"], d["gain_db"]) for d in entry["spread"]] == [
        (110.0, -3.01),
        (-110.0, -3.01),
    ]


def test_lcrs_in_a_room_models_one_loudspeaker_per_direction(tmp_path):
    settings = dict(room="small", eq="none")
    lcrs = plan_render([_stem(tmp_path, 4)], RenderSettings(layout="LCRS", **settings))
    quad = plan_render([_stem(tmp_path, 4)], RenderSettings(layout="4.0", **settings))
    # The spread channel's share of the diffuse tail adds by power: two loudspeakers at
    # -3 dB excite the tail as one loudspeaker does.
    assert_allclose(lcrs.tail_weights, [1.0, 1.0, 1.0, 1.0])
    # Its early response is that of 4.0's two surround loudspeakers (same positions,
    # same room), summed at -3 dB each; both plans' calibration gains taken out.
    s = lcrs.filters[3] / 10 ** (lcrs.calibration["gain_db"] / 20)
    q = quad.filters[2:4] / 10 ** (quad.calibration["gain_db"] / 20)
    n = min(s.shape[-1], q.shape[-1])
    expected = (q[0, :, :n] + q[1, :, :n]) / np.sqrt(2)
    assert_allclose(s[:, :n], expected, atol=2e-3 * np.abs(expected).max())
