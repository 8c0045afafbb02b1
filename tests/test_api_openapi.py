"""The OpenAPI document: committed file = generated file, valid OpenAPI 3.1, and the API keeps it.

Sources: the OpenAPI Specification 3.1.0 (validated by openapi-spec-validator), and property-based
fuzzing of every documented operation with schemathesis 4 through the WSGI app: no server error,
every response's status code, content type, headers and body conform to the document, data that
breaks the document is refused, and no operation answers without the token.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from openapi_spec_validator import validate
from schemathesis.checks import (
    content_type_conformance,
    ignored_auth,
    negative_data_rejection,
    not_a_server_error,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
    unsupported_method,
    use_after_free,
)

from service.app import create_app
from service.auth import create_token
from service.openapi_export import OPENAPI_PATH, generate, render
from tests.api_fixtures import FakeQueue, api_config, sqlite_file_stores


def test_committed_document_is_the_generated_one():
    assert OPENAPI_PATH.read_text() == render(generate()), (
        "openapi/openapi.json is stale: run python -m service.openapi_export")


def test_document_is_valid_openapi_3_1():
    document = json.loads(OPENAPI_PATH.read_text())
    assert document["openapi"] == "3.1.0"
    validate(document)  # raises on any violation of the 3.1 schema


def test_every_endpoint_of_the_issue_is_documented():
    paths = json.loads(OPENAPI_PATH.read_text())["paths"]
    expected = {
        "/v1/checks": {"post"}, "/v1/checks/{check_id}": {"get", "delete"},
        "/v1/batches": {"post", "get"}, "/v1/batches/{batch_id}": {"get", "delete"},
        "/v1/batches/{batch_id}/checks": {"get"}, "/healthz": {"get"}, "/readyz": {"get"},
        "/v1/checks/{check_id}/samples": {"post"},
        "/v1/callbacks/secret": {"get", "post"},  # issue 10: verifying batch callbacks
    }
    assert {p: set(ops) - {"parameters"} for p, ops in paths.items()} == expected


def test_served_document_matches_the_committed_one(client):
    assert client.get("/openapi.json").get_json() == json.loads(OPENAPI_PATH.read_text())


# schemathesis's lazy fixture loader does not work with this pytest, so the fuzzed app is built at
# import, on a store in a temporary directory that the module's teardown removes.
_FUZZ_DIR = Path(tempfile.mkdtemp(prefix="ballast-fuzz-"))
_FUZZ_STORE = sqlite_file_stores(_FUZZ_DIR / "fuzz.sqlite3")
_FUZZ_TOKEN = create_token(_FUZZ_STORE.access, "fuzz")
_FUZZ_APP = create_app(api_config(_FUZZ_STORE, FakeQueue(), BALLAST_RATE_LIMIT=10**9,
                                  BALLAST_CHECK_RATE_LIMIT=10**9,
                                  BALLAST_MAX_BODY_BYTES=1 << 20))
schema = schemathesis.openapi.from_wsgi("/openapi.json", _FUZZ_APP)

# no server error; responses as documented; data outside the schema refused; no access without
# the token; undocumented methods answer 405; a deleted resource is not served again
FUZZ_CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
               response_headers_conformance, response_schema_conformance,
               negative_data_rejection, ignored_auth, unsupported_method, use_after_free]


@pytest.fixture(scope="module", autouse=True)
def _remove_fuzz_store():
    yield
    _FUZZ_STORE.close()
    shutil.rmtree(_FUZZ_DIR, ignore_errors=True)


@schema.parametrize()
@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=list(HealthCheck))
def test_fuzz_the_api_against_its_document(case):
    case.call_and_validate(headers={"Authorization": f"Bearer {_FUZZ_TOKEN}"},
                           checks=FUZZ_CHECKS)
