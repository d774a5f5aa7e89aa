"""What feeds the ears: the plan is built from per-channel feeds, so another input kind
can produce feeds of its own and reuse calibration, the engine and the report."""

from __future__ import annotations

import dataclasses

import numpy as np
from numpy.testing import assert_array_equal

from earfold.renderer.io import write_audio
from earfold.renderer.render import (
    ChannelFeed,
    RenderSettings,
    engine_for,
    plan_from_feeds,
    plan_render,
    speaker_feeds,
)

FS = 48000


def _stem(tmp_path, channels: int = 6):
    data = (0.1 * np.random.default_rng(1).standard_normal((FS // 10, channels))).astype(np.float32)
    path = tmp_path / "stem.wav"
    write_audio(path, data, FS, subtype="FLOAT")
    return path, data


def test_a_layout_plan_is_its_speaker_feeds_stacked_and_calibrated(tmp_path):
    stem, _ = _stem(tmp_path)
    plan = plan_render([stem], RenderSettings(layout="5.1", room="small"))
    assert [f.label for f in plan.feeds] == ["L", "R", "C", "LFE", "Ls", "Rs"]
    assert [f.lfe for f in plan.feeds] == [False, False, False, True, False, False]
    assert plan.speakers == tuple(f.report for f in plan.feeds)
    assert_array_equal(plan.tail_weights, [f.tail_weight for f in plan.feeds])
    # Each feed's share of the shared tail: 1 for a loudspeaker, 0 for the LFE.
    assert [f.tail_weight for f in plan.feeds] == [1.0, 1.0, 1.0, 0.0, 1.0, 1.0]


def test_speaker_feeds_free_field_match_the_plan(tmp_path):
    stem, _ = _stem(tmp_path)
    plan = plan_render([stem], RenderSettings(layout="5.1"))
    feeds = speaker_feeds(plan.layout, plan.order, plan.hrir_set, FS, lfe=RenderSettings().lfe)
    rebuilt = plan_from_feeds(
        plan.stem,
        feeds,
        plan.hrir_set,
        plan.warnings,
        layout=plan.layout,
        order=plan.order,
        order_source=plan.order_source,
    )
    assert_array_equal(rebuilt.filters, plan.filters)
    assert rebuilt.calibration == plan.calibration


def test_feeds_of_another_kind_reuse_calibration_and_the_engine(tmp_path):
    """Two made-up feeds (what a scene decoder might produce): a plain delay to both ears
    and a one-sided gain. The plan calibrates them like loudspeakers, leaves the LFE-like
    feed out of calibration, and the engine convolves with them."""
    stem, data = _stem(tmp_path, channels=2)
    plan = plan_render([stem], RenderSettings(layout="2.0"))
    left = np.zeros((2, 4))
    left[:, 2] = 1.0
    right = np.zeros((2, 1))
    right[1, 0] = 0.5
    feeds = (
        ChannelFeed("a", left, report={"label": "a"}),
        ChannelFeed("b", right, lfe=True, report={"label": "b"}),
    )
    custom = plan_from_feeds(
        plan.stem,
        feeds,
        plan.hrir_set,
        (),
        layout=plan.layout,
        order=plan.order,
        order_source="custom",
    )
    gain = 10 ** (custom.calibration["gain_db"] / 20)
    assert custom.filters.shape == (2, 2, 4)
    assert np.isclose(custom.filters[0, 0, 2], gain, rtol=1e-3)
    assert custom.speakers == ({"label": "a"}, {"label": "b"})
    engine = engine_for(custom, 1024)
    try:
        out = np.concatenate([engine.process(data), *engine.tail_blocks(custom.length - 1)])
    finally:
        engine.close()
    assert out.shape == (len(data) + 3, 2)
    expected_left = np.zeros(len(data) + 3)
    expected_left[2 : 2 + len(data)] = custom.filters[0, 0, 2] * data[:, 0]
    assert np.allclose(out[:, 0], expected_left, atol=1e-6)
    assert dataclasses.is_dataclass(feeds[0])
