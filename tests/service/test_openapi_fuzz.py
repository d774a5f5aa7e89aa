"""schemathesis against the app's own OpenAPI schema, in process (ASGI).

For every operation in ``/openapi.json`` schemathesis generates requests (valid and
invalid) and runs its default checks on each answer: no 5xx, the status, Content-Type,
headers and body are the ones the schema documents (problem+json for errors), invalid
input is refused, and a 405 lists the allowed methods in ``Allow``. The number of
examples is bounded so that the file runs in well under half a minute.
"""

from __future__ import annotations

import tempfile

import pytest
import schemathesis  # noqa: E402  (a declared test dependency: fail loudly when missing)
from hypothesis import HealthCheck, settings  # noqa: E402 - schemathesis brings hypothesis
from stem_factory import FS, files_field, write_stem

from earfold.service.app import create_app  # noqa: E402
from earfold.service.settings import ServiceSettings  # noqa: E402

#: Examples per operation; enough to reach each documented status, few enough for CI.
MAX_EXAMPLES = 12

# The schema is read when the module is collected, so the app exists from then on; its
# data directory goes away with the module (see the fixture below).
_DATA = tempfile.TemporaryDirectory(prefix="earfold-fuzz-")
APP = create_app(ServiceSettings(data_dir=_DATA.name, min_free_bytes=0, hrtf_check_timeout_s=10.0))
# Event streams answer text/event-stream and may never end (the all-renders stream by
# design), which an in-process call waits for; tests/service/test_listening.py covers
# them against a real server.
schema = schemathesis.openapi.from_asgi("/openapi.json", APP).exclude(path_regex=r"/events$")

#: Operations whose body is a file: a schema cannot say "decodable audio" or "a SOFA
#: file", so schema-valid random bytes are rightly refused (415/422) and
#: schemathesis's "valid data is accepted" check does not apply to them.
_FILE_UPLOADS = {("POST", "/v1/stems"), ("POST", "/v1/hrtf-sets"), ("POST", "/v1/headphone-eq")}

#: Operations whose body is checked by the renderer beyond what a schema can say: a
#: preset's layout object (labels that name the same channel, 'L' and 'fl', count as
#: duplicates) or room object (the listener inside the room); schemathesis's "valid data
#: is accepted" check does not apply to them either.
_RENDERER_CHECKED = {("POST", "/v1/presets"), ("PUT", "/v1/presets/{preset_id}")}


@pytest.fixture(scope="module", autouse=True)
def _cleanup():
    yield
    APP.state.queue.close()
    _DATA.cleanup()


@schema.parametrize()
@settings(
    max_examples=MAX_EXAMPLES, deadline=None, database=None, suppress_health_check=list(HealthCheck)
)
def test_answers_match_the_schema(case):
    excluded = []
    if (case.method.upper(), case.path) in _FILE_UPLOADS | _RENDERER_CHECKED:
        excluded.append(schemathesis.checks.positive_data_acceptance)
    case.call_and_validate(excluded_checks=excluded)


def _validator(component: str):
    """A JSON Schema 2020-12 validator of one component of the app's schema (OpenAPI
    3.1 schemas are JSON Schema 2020-12), with its ``$ref``s resolved in the document."""
    from jsonschema_rs import Draft202012Validator  # comes with schemathesis

    document = {**APP.openapi(), "$ref": f"#/components/schemas/{component}"}
    return Draft202012Validator(document)


def _comparison(mode: str, variants: int) -> dict:
    return {"stem_id": "0" * 32, "mode": mode, "variants": [{"layout": "2.0"}] * variants}


def test_schema_says_abx_takes_exactly_two_variants_as_validation_does(tmp_path):
    schema = _validator("ComparisonRequest")
    for mode, count, valid in [("abx", 2, True), ("abx", 3, False), ("ab", 3, True)]:
        assert schema.is_valid(_comparison(mode, count)) is valid, (mode, count)
    # the route refuses what the schema refuses (before it looks for the stem)
    from starlette.testclient import TestClient

    app = create_app(ServiceSettings(data_dir=tmp_path / "data", min_free_bytes=0))
    with TestClient(app) as client:
        path = write_stem(tmp_path / "a.wav", FS // 2, 2)
        stem = client.post("/v1/stems", files=files_field([path])).json()
        body = {**_comparison("abx", 3), "stem_id": stem["id"]}
        resp = client.post("/v1/comparisons", json=body)
        assert resp.status_code == 422, resp.text
        assert "exactly 2 variants" in resp.json()["detail"]
    app.state.queue.close()


def test_schema_lists_the_block_sizes_the_renderer_accepts():
    from earfold.renderer.errors import OptionError
    from earfold.renderer.render import option

    for component in ("RenderRequest", "VariantRequest"):
        allowed = APP.openapi()["components"]["schemas"][component]["properties"]["block_size"]
        sizes = allowed["enum"]
        assert sizes == [2**n for n in range(6, 21)]
        for size in sizes:
            option("block_size").check(size)
        for size in (3 * 64, 96, 32, 2**21):
            with pytest.raises(OptionError):
                option("block_size").check(size)
            assert not _validator(component).is_valid({"stem_id": "0" * 32, "block_size": size})


def test_schema_says_an_upload_has_at_least_one_file():
    body = APP.openapi()["paths"]["/v1/stems"]["post"]["requestBody"]
    field = body["content"]["multipart/form-data"]["schema"]["properties"]["file"]
    assert field["minItems"] == 1 and field["maxItems"] == 128
