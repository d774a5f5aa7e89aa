"""Named channel orders (``wav``, ``film``): what each layout offers, how a name is
resolved wherever a channel order is taken, and that a render in film order equals the
same content in the default order."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import LayoutError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.layouts import LAYOUTS, order_labels, resolve_channel_order
from earfold.renderer.render import RenderSettings, render, settings_from_options

FS = 48000


@pytest.mark.parametrize(
    "name,film",
    [
        # Film / post-production order, common practice: L C R, surrounds front to back,
        # LFE, then the heights.
        ("2.0", "L R"),
        ("3.0", "L C R"),
        ("LCRS", "L C R S"),
        ("5.1", "L C R Ls Rs LFE"),
        ("5.0", "L C R Ls Rs"),
        ("7.1", "L C R Ls Rs Lrs Rrs LFE"),
        ("7.1.4", "L C R Ls Rs Lrs Rrs LFE Ltf Rtf Ltr Rtr"),
        ("9.1.6", "L C R Lw Rw Ls Rs Lrs Rrs LFE Ltf Rtf Ltm Rtm Ltr Rtr"),
    ],
)
def test_film_order(name, film):
    layout = LAYOUTS[name]
    assert layout.orders["film"] == tuple(film.split())
    assert layout.orders["wav"] == layout.labels


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_every_order_is_a_permutation_of_the_layout(name):
    layout = LAYOUTS[name]
    for order, labels in layout.orders.items():
        assert sorted(labels) == sorted(layout.labels), order
        assert resolve_channel_order(layout, order) == tuple(layout.index(x) for x in labels)


def test_22_2_has_only_the_wav_order_and_says_why():
    assert list(LAYOUTS["22.2"].orders) == ["wav"]
    with pytest.raises(LayoutError, match=r"film needs the labels L and R.*orders are wav"):
        resolve_channel_order(LAYOUTS["22.2"], "film")


def test_order_name_forms_and_unknown_names():
    five = LAYOUTS["5.1"]
    film = (0, 2, 1, 4, 5, 3)
    assert resolve_channel_order(five, "film") == film
    assert resolve_channel_order(five, ["FILM"]) == film
    assert resolve_channel_order(five, " Film ") == film
    assert resolve_channel_order(five, "wav") == tuple(range(6))
    # A text with commas is a list of labels.
    assert resolve_channel_order(five, "L,C,R,Ls,Rs,LFE") == film
    with pytest.raises(
        LayoutError, match=r"unknown channel order 'smpte' for layout '5\.1'; its orders are wav, "
    ):
        resolve_channel_order(five, ["smpte"])
    with pytest.raises(LayoutError, match=r"orders are wav, film, or give the labels"):
        order_labels(five, "dts")


def test_channel_order_option_takes_a_name():
    settings = settings_from_options({"channel_order": "film", "layout": "5.1"})
    assert resolve_channel_order(LAYOUTS["5.1"], settings.channel_order) == (0, 2, 1, 4, 5, 3)


def test_listing_adds_orders_to_the_layout_schema():
    entry = json.loads(json.dumps(LAYOUTS["5.1"].listing()))
    assert entry["orders"] == {
        "wav": ["L", "R", "C", "LFE", "Ls", "Rs"],
        "film": ["L", "C", "R", "Ls", "Rs", "LFE"],
    }
    assert entry["kind"] == "loudspeakers"  # an Ambisonic scene's listing says "scene"
    assert {k: v for k, v in entry.items() if k not in ("orders", "kind")} == LAYOUTS[
        "5.1"
    ].to_dict()


def test_a_film_order_stem_renders_as_the_same_content_in_wav_order(tmp_path):
    rng = np.random.default_rng(5)
    wav_order = (0.1 * rng.standard_normal((FS // 10, 6))).astype(np.float32)
    layout = LAYOUTS["5.1"]
    film = [layout.index(x) for x in layout.orders["film"]]
    write_audio(tmp_path / "wav.wav", wav_order, FS, subtype="FLOAT")
    write_audio(tmp_path / "film.wav", wav_order[:, film], FS, subtype="FLOAT")
    plain = dict(layout="5.1", loudness=None, true_peak=None, subtype="FLOAT")
    a = render([tmp_path / "wav.wav"], tmp_path / "a.wav", RenderSettings(**plain))
    b = render(
        [tmp_path / "film.wav"],
        tmp_path / "b.wav",
        RenderSettings(channel_order=("film",), **plain),
    )
    assert b["channel_order"] == {
        "labels": ["L", "C", "R", "Ls", "Rs", "LFE"],
        "source": "channel order 'film'",
    }
    assert a["channel_order"]["source"] == "layout default"
    out_a, out_b = read_audio(tmp_path / "a.wav")[0], read_audio(tmp_path / "b.wav")[0]
    # Equal up to float32 rounding (the engine sums the channels in another order).
    assert_allclose(out_b, out_a, rtol=0, atol=1e-5 * np.abs(out_a).max())
