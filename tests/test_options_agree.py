"""Every render option is declared once (earfold.renderer.render.RENDER_OPTIONS): the
command line's ``render`` parser, the HTTP request model's JSON schema, the job payload
check and the comparison variant model must all agree with that declaration."""

from __future__ import annotations

import argparse

import pytest

from earfold.renderer.errors import OptionError
from earfold.renderer.render import (
    RENDER_OPTIONS,
    RenderSettings,
    option,
    settings_from_options,
)
from earfold.service.cli import build_parser
from earfold.service.jobs.render_child import build_settings
from earfold.service.routes.comparisons import VariantRequest
from earfold.service.routes.renders import RenderRequest


def _render_parser() -> argparse.ArgumentParser:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices["render"]


def _schema_props(model) -> tuple[dict, dict]:
    schema = model.model_json_schema()
    return schema["properties"], schema.get("$defs", {})


def _numbers(prop: dict) -> dict:
    """The numeric bounds of a schema property (inside anyOf too)."""
    found: dict = {}
    for part in [prop, *prop.get("anyOf", [])]:
        for key in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
            if key in part:
                found[key] = part[key]
    return found


def _words(prop: dict) -> set:
    found: set = set()
    for part in [prop, *prop.get("anyOf", [])]:
        found.update(part.get("enum", []))
        if "const" in part:
            found.add(part["const"])
    return found


def _expected_bounds(spec) -> dict:
    out = {}
    if spec.minimum is not None:
        out["exclusiveMinimum" if spec.exclusive else "minimum"] = spec.minimum
    if spec.maximum is not None:
        out["exclusiveMaximum" if spec.exclusive else "maximum"] = spec.maximum
    return out


def test_the_cli_parser_agrees_with_the_declaration():
    parser = _render_parser()
    actions = {a.dest: a for a in parser._actions}
    for spec in RENDER_OPTIONS:
        if not spec.cli:
            assert spec.name not in actions
            continue
        action = actions[spec.name]
        assert action.option_strings == [spec.flag]
        assert action.help == spec.help
        assert action.default == spec.default
        if spec.kind == "choice":
            assert tuple(action.choices) == spec.choices
        else:
            assert action.metavar == spec.metavar
    # Nothing render-shaped on the command line that the declaration does not have.
    own = {"help", "inputs", "output", "report", "quiet", "no_cache"}
    assert set(actions) - own == {s.name for s in RENDER_OPTIONS if s.cli}


@pytest.mark.parametrize("model", [RenderRequest, VariantRequest], ids=["render", "variant"])
def test_the_http_models_agree_with_the_declaration(model):
    props, _ = _schema_props(model)
    sound_only = model is VariantRequest
    expected = {s.name for s in RENDER_OPTIONS if s.http and (s.shapes_sound or not sound_only)}
    own = {"stem_id"} if model is RenderRequest else {"name"}
    assert set(props) - own == expected
    for name in expected:
        spec, prop = option(name), props[name]
        assert prop["description"] == spec.help
        assert prop.get("default") == spec.default
        assert _numbers(prop) == _expected_bounds(spec)
        if spec.kind in ("choice", "level"):
            assert _words(prop) == set(spec.choices)
    assert model.model_config["extra"] == "forbid"


def test_variants_take_every_option_that_shapes_the_sound():
    props, _ = _schema_props(VariantRequest)
    for spec in RENDER_OPTIONS:
        if spec.http:
            assert (spec.name in props) == spec.shapes_sound, spec.name
    for name in (
        "layout",
        "channel_order",
        "hrtf",
        "room",
        "room_mode",
        "eq",
        "headphone_eq",
        "lfe_cutoff",
        "lfe_gain",
    ):
        assert name in props


def test_the_payload_check_agrees_with_the_declaration():
    # Defaults: an empty payload is the declaration's defaults.
    settings = build_settings({})
    assert settings == RenderSettings()
    for spec in RENDER_OPTIONS:
        if spec.name in ("lfe_cutoff", "lfe_gain"):
            value = getattr(settings.lfe, "cutoff_hz" if spec.name == "lfe_cutoff" else "gain_db")
        else:
            value = getattr(settings, spec.name)
        assert value == spec.default, spec.name
    # Ranges: the bounds themselves are in or out as declared; just outside is refused
    # with the bounds in words.
    for spec in RENDER_OPTIONS:
        if spec.kind not in ("number", "integer", "level"):
            continue
        for bound, outside in ((spec.minimum, -1), (spec.maximum, 1)):
            if bound is None:
                continue
            if spec.exclusive:
                with pytest.raises(OptionError, match="exclusive"):
                    build_settings({spec.name: bound})
            elif not spec.power_of_two:
                build_settings({spec.name: bound})
            with pytest.raises(OptionError) as info:
                build_settings(
                    {spec.name: bound + outside * (1 if spec.kind == "integer" else 0.5)}
                )
            message = str(info.value)
            words = str(int(bound)) if float(bound).is_integer() else f"{bound:g}"
            assert spec.name in message and words in message
            assert "array(" not in message and "b'" not in message
    for spec in RENDER_OPTIONS:
        if spec.kind == "choice":
            for choice in spec.choices:
                build_settings({spec.name: choice})
            with pytest.raises(OptionError, match=", ".join(spec.choices)):
                build_settings({spec.name: "no-such-choice"})


def test_an_unknown_payload_key_is_an_error():
    with pytest.raises(OptionError, match="colour"):
        build_settings({"layout": "5.1", "colour": "red"})
    with pytest.raises(OptionError, match="unknown render option"):
        settings_from_options({"lfe_order": 4})


def test_words_of_level_options_mean_off():
    settings = build_settings({"loudness": "none", "true_peak": "off"})
    assert settings.loudness is None and settings.true_peak is None
    assert build_settings({"loudness": "match"}).loudness == "match"


def test_the_cli_refuses_a_loudness_target_at_the_absolute_gate(tmp_path, capsys):
    from earfold.service.cli import main

    with pytest.raises(SystemExit) as info:
        main(
            ["render", str(tmp_path / "x.wav"), "-o", str(tmp_path / "y.wav"), "--loudness", "-70"]
        )
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "between -70 and 0 LUFS (exclusive)" in err
