"""The OpenAPI document: committed file = generated file, valid OpenAPI 3.1, and the API keeps it.

Sources: the OpenAPI Specification 3.1.0 (validated by openapi-spec-validator), and property-based
fuzzing of every documented operation (the report pages and plots included) with schemathesis 4
through the WSGI app, on the SQLite and on the Redis store, as either of two tenants: no server
error, every response's status code, content type, headers and body conform to the document,
data that breaks the document is refused, no operation answers without the token, and a check or
batch of the other tenant is 404.
"""

from __future__ import annotations

import json
import re
import shutil
import tempfile
import uuid
from collections import Counter
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
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

from service.api.path_ids import PATH_IDS
from service.api.reports import DEVICE_PLOT, PLOT_NAMES
from service.app import create_app
from service.auth import create_token
from service.intake import load_request, new_check
from service.openapi_export import OPENAPI_PATH, generate, render
from tests.api_fixtures import FakeQueue, api_config, run_worker, sqlite_file_stores, tiny_request
from tests.conftest import TEST_REDIS_URL
from workers.store import Stores
from workers.store.redis_backend import RedisAccessStore, RedisCheckStore, connect


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
        # the report routes (issue 10: documented so that the fuzzer reaches them)
        "/v1/checks/{check_id}/plots/{name}.{fmt}": {"get"},
        "/v1/checks/{check_id}/report": {"get"}, "/v1/batches/{batch_id}/report": {"get"},
        "/v1/checks/{check_id}/curves.csv": {"get"},            # issue 12
        "/v1/batches/{batch_id}/margin.csv": {"get"},
        "/v1/batches/{batch_id}/margin": {"get"},
    }
    assert {p: set(ops) - {"parameters"} for p, ops in paths.items()} == expected


def test_served_document_matches_the_committed_one(client):
    assert client.get("/openapi.json").get_json() == json.loads(OPENAPI_PATH.read_text())


# schemathesis's lazy fixture loader does not work with this pytest, so the fuzzed apps are built at
# import: one on a SQLite store in a temporary directory, one on Redis (db 13, a key prefix of
# its own); both are filled by the module's fixture and emptied at its teardown.
_FUZZ_DIR = Path(tempfile.mkdtemp(prefix="ballast-fuzz-"))
_FUZZ_PREFIX = f"ballast-fuzz:{uuid.uuid4().hex}:"
_REDIS = connect(TEST_REDIS_URL)
FUZZ_STORES = {
    "sqlite": sqlite_file_stores(_FUZZ_DIR / "fuzz.sqlite3"),
    "redis": Stores(RedisCheckStore(prefix=_FUZZ_PREFIX, client=_REDIS),
                    RedisAccessStore(prefix=_FUZZ_PREFIX, client=_REDIS)),
}
_SETTINGS = {"BALLAST_RATE_LIMIT": 10**9, "BALLAST_CHECK_RATE_LIMIT": 10**9,
             "BALLAST_MAX_BODY_BYTES": 1 << 20}
schema = schemathesis.openapi.from_wsgi(
    "/openapi.json", create_app(api_config(FUZZ_STORES["sqlite"], FakeQueue(), **_SETTINGS)))
redis_schema = schemathesis.openapi.from_wsgi(
    "/openapi.json", create_app(api_config(FUZZ_STORES["redis"], FakeQueue(), **_SETTINGS)))
TENANTS = ("fuzz", "rival")
PLOT_NAME = re.compile("|".join((*PLOT_NAMES, DEVICE_PLOT.pattern)))
#: per store: tenant → token, and (kind, tenant) → ids the tenant owns: a finished check (its
#: plots and pages exist), a queued one (plots answer 409), the batch of each
SEEDED: dict[str, dict] = {}
#: what the fuzzer reached, per store: (route, own|foreign, status) → count (checked at teardown)
REACHED: dict[str, Counter] = {"sqlite": Counter(), "redis": Counter()}

# no server error; responses as documented; data outside the schema refused; no access without
# the token; undocumented methods answer 405; a deleted resource is not served again
FUZZ_CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
               response_headers_conformance, response_schema_conformance,
               negative_data_rejection, ignored_auth, unsupported_method, use_after_free]


def _seed(stores: Stores) -> dict:
    tokens = {tenant: create_token(stores.access, tenant) for tenant in TENANTS}
    owned: dict[tuple[str, str], list[str]] = {}
    for tenant in TENANTS:
        checks = [new_check(load_request(tiny_request()), "done"),
                  new_check(load_request(tiny_request()), "queued")]
        batch_id, (done, queued) = stores.checks.create_checks(tenant, checks, as_batch=True)
        run_worker(stores.checks, [done])
        owned[("check_id", tenant)] = [done, queued]
        owned[("batch_id", tenant)] = [batch_id]
    return {"tokens": tokens, "owned": owned}


@pytest.fixture(scope="module", autouse=True)
def _fuzz_stores():
    if not FUZZ_STORES["redis"].checks.ping():
        pytest.fail(f"no Redis at {TEST_REDIS_URL} (the fuzz test runs on Redis too)")
    for name, stores in FUZZ_STORES.items():
        SEEDED[name] = _seed(stores)
    yield
    for reached in REACHED.values():
        if reached:  # the fuzz test ran on this store: it must have reached what it checks
            assert reached[("plots", "own", 200)] and reached[("report", "own", 200)], reached
            assert sum(n for (_, whose, status), n in reached.items()
                       if whose == "foreign" and status == 404) >= 5, reached
    FUZZ_STORES["sqlite"].close()
    shutil.rmtree(_FUZZ_DIR, ignore_errors=True)
    keys = list(_REDIS.scan_iter(match=_FUZZ_PREFIX + "*", count=1000))
    if keys:
        _REDIS.delete(*keys)
    _REDIS.close()


def _fuzz(case, data, store: str) -> None:
    """One generated request, as one of two tenants; a well-formed path id is swapped (drawn by
    hypothesis) for an id this or the other tenant owns: the other tenant's must be 404."""
    seeded = SEEDED[store]
    tenant = data.draw(st.sampled_from(TENANTS), label="tenant")
    foreign = swapped = False
    for name in ("check_id", "batch_id"):
        value = (case.path_parameters or {}).get(name)
        if value is None or not PATH_IDS[name][1].fullmatch(str(value)):
            continue  # a malformed id stays: it must be refused as it is
        owner = data.draw(st.sampled_from((None, *TENANTS)), label=f"{name} owner")
        if owner is not None:
            case.path_parameters[name] = data.draw(
                st.sampled_from(seeded["owned"][(name, owner)]), label=name)
            foreign = foreign or owner != tenant
            swapped = True
    plot = (case.path_parameters or {}).get("name")
    if swapped and plot is not None and PLOT_NAME.fullmatch(str(plot)):  # one that exists, too
        case.path_parameters["name"] = data.draw(
            st.sampled_from((plot, *PLOT_NAMES, "device-1")), label="plot")
    response = case.call_and_validate(
        headers={"Authorization": f"Bearer {seeded['tokens'][tenant]}"}, checks=FUZZ_CHECKS)
    # a valid request with the token (not a case made to break the document, nor one sent
    # without the token) for another tenant's check or batch: as if it did not exist
    positive = case.meta is None or not case.meta.generation.mode.is_negative
    sent_token = response.request.headers.get("Authorization") is not None
    if positive and sent_token and (swapped or foreign):
        route = ("plots" if "/plots/" in case.formatted_path else
                 "report" if case.formatted_path.endswith("/report") else case.method)
        REACHED[store][(route, "foreign" if foreign else "own", response.status_code)] += 1
    if foreign and positive and sent_token:
        assert response.status_code == 404, (case.method, case.formatted_path,
                                              response.status_code)


_FUZZ_SETTINGS = settings(max_examples=40, deadline=None, derandomize=True,
                          suppress_health_check=list(HealthCheck))


@schema.parametrize()
@schema.given(data=st.data())
@_FUZZ_SETTINGS
def test_fuzz_the_api_against_its_document(case, data):
    _fuzz(case, data, "sqlite")


@redis_schema.parametrize()
@redis_schema.given(data=st.data())
@_FUZZ_SETTINGS
def test_fuzz_the_api_on_redis(case, data):
    _fuzz(case, data, "redis")
