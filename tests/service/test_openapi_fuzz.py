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

from earfold.service.app import create_app  # noqa: E402
from earfold.service.settings import ServiceSettings  # noqa: E402

#: Examples per operation; enough to reach each documented status, few enough for CI.
MAX_EXAMPLES = 12

# The schema is read when the module is collected, so the app exists from then on; its
# data directory goes away with the module (see the fixture below).
_DATA = tempfile.TemporaryDirectory(prefix="earfold-fuzz-")
APP = create_app(ServiceSettings(data_dir=_DATA.name, min_free_bytes=0, hrtf_check_timeout_s=10.0))
schema = schemathesis.openapi.from_asgi("/openapi.json", APP)

#: Operations whose body is a file: a schema cannot say "decodable audio" or "a SOFA
#: file", so schema-valid random bytes are rightly refused (415/422) and
#: schemathesis's "valid data is accepted" check does not apply to them.
_FILE_UPLOADS = {("POST", "/v1/stems"), ("POST", "/v1/hrtf-sets")}


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
    if (case.method.upper(), case.path) in _FILE_UPLOADS:
        excluded.append(schemathesis.checks.positive_data_acceptance)
    case.call_and_validate(excluded_checks=excluded)
