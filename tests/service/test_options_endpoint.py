"""``GET /v1/options`` agrees with the declaration it is built from."""

from __future__ import annotations

import math

from earfold.renderer.render import RENDER_OPTIONS
from earfold.service.routes.comparisons import DEFAULT_EXCERPT_S, MAX_EXCERPT_S


def _by_name(client) -> dict[str, dict]:
    r = client.get("/v1/options")
    assert r.status_code == 200, r.text
    return {e["name"]: e for e in r.json()["render"]}


def test_every_http_option_is_listed_in_declaration_order(client):
    names = [e["name"] for e in client.get("/v1/options").json()["render"]]
    assert names == [s.name for s in RENDER_OPTIONS if s.http]
    # the command-line-only excerpt is not offered
    assert "excerpt" not in names


def test_ranges_defaults_and_choices_equal_the_declaration(client):
    entries = _by_name(client)
    for spec in RENDER_OPTIONS:
        if not spec.http:
            continue
        e = entries[spec.name]
        assert e["kind"] == spec.kind
        assert e["unit"] == (spec.unit or None)
        assert e["choices"] == list(spec.choices)
        assert e["help"] == spec.help
        assert e["shapes_sound"] is spec.shapes_sound
        assert e["power_of_two"] is spec.power_of_two
        if spec.default is None or isinstance(spec.default, str):
            assert e["default"] == spec.default
        else:
            assert math.isclose(e["default"], spec.default)
        low = e["exclusive_minimum"] if spec.exclusive else e["minimum"]
        high = e["exclusive_maximum"] if spec.exclusive else e["maximum"]
        assert low == spec.minimum, spec.name
        assert high == spec.maximum, spec.name
        # of each pair only one is set (JSON Schema 2020-12 meaning)
        assert e["minimum"] is None or e["exclusive_minimum"] is None
        assert e["maximum"] is None or e["exclusive_maximum"] is None


def test_loudness_bounds_are_open_and_block_size_closed(client):
    entries = _by_name(client)
    loud = entries["loudness"]
    assert loud["minimum"] is None and loud["exclusive_minimum"] is not None
    assert loud["choices"] == ["match", "none"]
    block = entries["block_size"]
    assert block["minimum"] is not None and block["exclusive_minimum"] is None
    assert block["power_of_two"] is True
    assert entries["room"]["catalog"] == "/v1/rooms"
    assert "room object" in entries["room"]["forms"]


def test_options_agree_with_the_render_request_schema(client):
    """The same bounds reach the request model: every number's bounds in /openapi.json."""
    schema = client.get("/openapi.json").json()["components"]["schemas"]["RenderRequest"]
    entries = _by_name(client)
    for name, e in entries.items():
        if e["kind"] not in ("number", "integer"):
            continue
        prop = schema["properties"][name]
        prop = next((p for p in prop.get("anyOf", [prop]) if p.get("type") != "null"), prop)
        for key, json_key in (
            ("minimum", "minimum"),
            ("maximum", "maximum"),
            ("exclusive_minimum", "exclusiveMinimum"),
            ("exclusive_maximum", "exclusiveMaximum"),
        ):
            assert e[key] == prop.get(json_key), (name, key)


def test_comparison_limits_are_the_comparison_model(client):
    comp = client.get("/v1/options").json()["comparison"]
    assert comp["excerpt_max_seconds"] == MAX_EXCERPT_S == 60
    assert comp["excerpt_default_seconds"] == DEFAULT_EXCERPT_S
    assert comp["excerpt_min_seconds"] == 1.0
    assert comp["designs"] == ["ab", "abx"]
    assert comp["design_default"] == "ab"
    assert (comp["min_variants"], comp["max_variants"]) == (2, 8)
    assert (comp["trials_min"], comp["trials_max"], comp["trials_default"]) == (1, 100, 10)
    assert comp["variant_options"] == [s.name for s in RENDER_OPTIONS if s.http and s.shapes_sound]
    assert set(comp["answers"]) == {"ab", "abx"}
    assert comp["answers"]["abx"] == ["A", "B"]


def test_a_comparison_over_the_advertised_limits_is_refused(client):
    """The advertised maxima are the ones the route enforces (one past them is 422)."""
    comp = client.get("/v1/options").json()["comparison"]
    body = {
        "stem_id": "0" * 32,
        "variants": [{}] * (comp["max_variants"] + 1),
    }
    assert client.post("/v1/comparisons", json=body).status_code == 422
    body = {
        "stem_id": "0" * 32,
        "variants": [{}, {}],
        "excerpt": {"length": comp["excerpt_max_seconds"] + 1},
    }
    r = client.post("/v1/comparisons", json=body)
    assert r.status_code == 422 and "length" in r.text


def test_options_need_the_token_when_tokens_are_on(make_client):
    c = make_client(tokens=("tok-a",))
    assert c.get("/v1/options").status_code == 401
    ok = c.get("/v1/options", headers={"Authorization": "Bearer tok-a"})
    assert ok.status_code == 200 and ok.json()["render"]


def test_preset_and_headphone_eq_limits_are_the_stores(client):
    from earfold.renderer.eq.headphone import BAND_TYPES, MAX_BANDS, MAX_EQ_IR_BYTES
    from earfold.service.presets import MAX_PRESETS
    from earfold.service.routes.headphone_eq import MAX_FILES

    body = client.get("/v1/options").json()
    assert body["presets"] == {
        "kinds": ["settings", "layout"],
        "max_per_owner": MAX_PRESETS,
        "name_max": 80,
    }
    eq = body["headphone_eq"]
    assert eq["max_per_owner"] == MAX_FILES and eq["max_bands"] == MAX_BANDS
    assert eq["band_types"] == list(BAND_TYPES) and eq["max_ir_bytes"] == MAX_EQ_IR_BYTES
    # the advertised name limit is the one enforced
    name = "n" * body["presets"]["name_max"]
    ok = client.post("/v1/presets", json={"name": name, "kind": "settings", "body": {}})
    assert ok.status_code == 201
    long = client.post("/v1/presets", json={"name": name + "n", "kind": "settings", "body": {}})
    assert long.status_code == 422
