"""Bad input is a 4xx problem naming the field, never a 500: huge integers, deep nesting, forged
cursors, path ids of the wrong shape, reference impedances that are not finite.

Each case below answered 500 before (issue 10: OverflowError, RecursionError, SQLite/Redis errors,
Redis WRONGTYPE). Sources: RFC 8259 §6 (JSON numbers have no range limit; "an implementation may
set limits"), IEEE 754 binary64 (largest finite value about 1.797e308, Python's
``sys.float_info.max``), RFC 9457 (problem details), Touchstone 2.0 (R and [Reference] are
resistances in ohms), RFC 4648 §5 (base64url: the alphabet of an id's 22 characters).
"""

from __future__ import annotations

import base64
import json
import sys
from collections.abc import Iterator

import pytest

from service.app import create_app
from service.auth import create_token
from tests.api_fixtures import FakeQueue, api_config, sqlite_file_stores, tiny_request
from tests.conftest import FakeClock, redis_stores
from workers.store import Stores
from workers.store.ids import new_batch_id, new_check_id

PROBLEM = "application/problem+json"
HUGE = "9" * 400  # beyond the largest binary64 value (about 1.8e308): float() overflows


@pytest.fixture(params=["sqlite", "redis"])
def both_stores(request: pytest.FixtureRequest, tmp_path) -> Iterator[Stores]:
    if request.param == "sqlite":
        stores = sqlite_file_stores(tmp_path / "store.sqlite3")
        yield stores
        stores.close()
    else:
        yield from redis_stores(FakeClock())


@pytest.fixture
def api(both_stores):
    token = create_token(both_stores.access, "acme")
    app = create_app(api_config(both_stores, FakeQueue()))
    return app.test_client(), {"Authorization": f"Bearer {token}"}


def _problem(response, status: int) -> dict:
    assert response.status_code == status, response.get_data(as_text=True)[:300]
    assert response.mimetype == PROBLEM
    return response.get_json()


def _fields(problem: dict) -> list[str]:
    return [e["field"] for e in problem.get("errors", [])]


def _post_text(client, auth, path: str, text: str):
    return client.post(path, data=text.encode(), content_type="application/json", headers=auth)


def _with_literal(request: dict, marker: str, literal: str) -> str:
    """The request as JSON text with the string ``marker`` replaced by a raw JSON literal
    (json.dumps cannot write a 400-digit integer where a float is expected)."""
    return json.dumps(request).replace(json.dumps(marker), literal)


def _batch_text(variant: str) -> str:
    return '{"variants": [' + variant + "]}"


def _huge_in(field: str) -> tuple[dict, str]:
    request = tiny_request()
    if field == "devices.0.gm_s":
        request["devices"][0]["gm_s"] = "@"
    elif field == "ports.0.termination_ohm":
        request["ports"][0]["termination_ohm"] = "@"
    elif field == "z0_ohm":
        request.update(parameters="S", z0_ohm="@")
    elif field == "frequency_hz":
        request["frequency_hz"][0] = "@"
    elif field == "devices.0.delay_s":
        request["devices"][0]["delay_s"] = "@"
    return request, field


HUGE_FIELDS = ["devices.0.gm_s", "ports.0.termination_ohm", "z0_ohm", "frequency_hz",
               "devices.0.delay_s"]


@pytest.mark.parametrize("field", HUGE_FIELDS)
@pytest.mark.parametrize("sign", ["", "-"])
def test_a_400_digit_integer_is_refused_naming_its_field(api, field, sign):
    client, auth = api
    request, name = _huge_in(field)
    problem = _problem(_post_text(client, auth, "/v1/checks",
                                  _with_literal(request, "@", sign + HUGE)), 422)
    assert _fields(problem) == [name]
    batch = _problem(_post_text(client, auth, "/v1/batches",
                                _batch_text(_with_literal(request, "@", sign + HUGE))), 422)
    assert _fields(batch) == [f"variants.0.{name}"]


def test_huge_integers_in_lists_and_past_the_digit_limit(api):
    client, auth = api
    request = tiny_request()
    request.update(parameters="S", z0_ohm=[50, "@"])
    problem = _problem(_post_text(client, auth, "/v1/checks",
                                  _with_literal(request, "@", HUGE)), 422)
    assert _fields(problem) == ["z0_ohm"]
    # 5,000 digits: past CPython's 4,300-digit limit of int() (a ValueError, not JSON's fault)
    request = tiny_request()
    request["data"]["re"][0][0][0] = "@"
    problem = _problem(_post_text(client, auth, "/v1/checks",
                                  _with_literal(request, "@", "9" * 5000)), 422)
    assert _fields(problem) == ["data.re"]


def test_an_integer_just_inside_the_float_range_is_a_number():
    from service.api.jsontext import int_or_infinity, stdlib_loads

    largest = int(sys.float_info.max)  # 309 digits, still a finite binary64 value
    assert int_or_infinity(str(largest)) == largest
    assert int_or_infinity(str(largest + 10**292)) == float("inf")
    assert int_or_infinity("-" + HUGE) == float("-inf")
    assert stdlib_loads("[12, -3]") == [12, -3]


def test_json_nested_beyond_the_stack_is_a_value_error():
    from service.api.jsontext import loads_json, stdlib_loads

    deep = "[" * 100_000 + "]" * 100_000
    for reader in (stdlib_loads, loads_json):
        with pytest.raises(ValueError, match=r"nested too deeply|recursion"):
            reader(deep)


def test_no_nesting_depth_of_a_batch_variant_is_a_server_error(api):
    """Depths around the interpreter's recursion limit (1,000): the whole body is cut by msgspec,
    then each variant is read by orjson or json.loads deeper in the stack, where a variant that
    the first pass accepted ran out of stack (a 500 at depths 963-969 before the fix, on this
    machine). A 400-digit integer inside makes orjson hand the variant to json.loads."""
    client, auth = api
    statuses = set()
    for depth in range(900, 1031, 3):
        body = _batch_text('{"label": "deep", "data": ' + "[" * depth + HUGE + "]" * depth + "}")
        response = _post_text(client, auth, "/v1/batches", body)
        assert response.mimetype == PROBLEM
        statuses.add(response.status_code)
    assert statuses <= {400, 422}, statuses


def _cursor(value: str) -> str:
    return base64.urlsafe_b64encode(value.encode()).decode().rstrip("=")


@pytest.mark.parametrize("after", [
    '"' + "9" * 130 + '"',       # digits beyond any 64-bit integer (SQLite OverflowError)
    '"9223372036854775808"',     # 2**63: LRANGE's and SQLite's integers end below it
    '"9007199254740992"',        # 2**53: the first position this API never gives out
    "9" * 130,                   # a number, not the string the API writes
    '"١٢"',                      # digits, but not ASCII ones (str.isdigit accepts them)
    "[" * 60 + "]" * 60,         # nesting
])
def test_a_forged_cursor_is_a_400_naming_the_cursor(api, after):
    client, auth = api
    batch = client.post("/v1/batches", json={"variants": [tiny_request()]}, headers=auth)
    cursor = _cursor('{"after": ' + after + "}")
    assert len(cursor) <= 200  # the documented limit; longer ones are a 422 of the schema
    response = client.get(f"/v1/batches/{batch.get_json()['id']}/checks?cursor={cursor}",
                          headers=auth)
    assert _fields(_problem(response, 400)) == ["cursor"]


def test_the_last_position_a_cursor_may_hold_reads_an_empty_page(api):
    client, auth = api
    batch = client.post("/v1/batches", json={"variants": [tiny_request()]}, headers=auth)
    cursor = _cursor(json.dumps({"after": str(2**53 - 1)}))
    page = client.get(f"/v1/batches/{batch.get_json()['id']}/checks?cursor={cursor}",
                      headers=auth)
    assert page.status_code == 200 and page.get_json()["items"] == []


# ------------------------------------------------------------------------------- path ids


def test_the_documented_id_shape_is_the_one_the_store_makes():
    from service.api.path_ids import PATH_IDS

    for _ in range(200):  # seeded by the OS; every id the store makes must pass
        assert PATH_IDS["check_id"][1].fullmatch(new_check_id())
        assert PATH_IDS["batch_id"][1].fullmatch(new_batch_id())


def _wrong_shapes(batch_id: str, check_id: str) -> list[str]:
    return [
        f"/v1/batches/{batch_id}:ids", f"/v1/batches/{batch_id}:ids/checks",
        f"/v1/batches/{batch_id}:counts", f"/v1/batches/{batch_id}:ids/report",
        f"/v1/checks/{check_id}:request", f"/v1/checks/{check_id}x",
        f"/v1/checks/{check_id}:request/report", f"/v1/checks/{check_id}:x/plots/ndf.svg",
        "/v1/checks/abc", "/v1/batches/" + "b" * 5000, f"/v1/checks/{batch_id}",
        f"/v1/batches/{check_id}",
    ]


def test_path_ids_of_the_wrong_shape_are_404_naming_the_parameter(api):
    """On Redis, ``batch:<id>:ids`` is the batch's list of check ids: GET /v1/batches/<id>:ids
    read it as a hash (500 WRONGTYPE, which also told that the batch exists)."""
    client, auth = api
    batch = client.post("/v1/batches", json={"variants": [tiny_request()]}, headers=auth)
    batch_id, (check_id,) = batch.get_json()["id"], batch.get_json()["check_ids"]
    for path in _wrong_shapes(batch_id, check_id):
        for method in ("GET", "DELETE") if "report" not in path and "plots" not in path and \
                path.count("/") == 3 else ("GET",):
            problem = _problem(client.open(path, method=method, headers=auth), 404)
            parameter = "batch_id" if path.startswith("/v1/batches/") else "check_id"
            assert _fields(problem) == [parameter], (method, path)
    # the same answer as an id of the right shape that does not exist
    unknown = client.get("/v1/batches/bat_" + "A" * 22, headers=auth)
    assert _problem(unknown, 404)["type"] == _problem(
        client.get(f"/v1/batches/{batch_id}:ids", headers=auth), 404)["type"]
    assert client.get(f"/v1/batches/{batch_id}", headers=auth).status_code == 200


class _NoStore:
    """A check store that fails the test when asked anything."""

    def __getattr__(self, name: str):
        raise AssertionError(f"the check store was asked {name!r} for a malformed path id")


def test_a_malformed_path_id_never_reaches_the_store(tmp_path):
    real = sqlite_file_stores(tmp_path / "store.sqlite3")
    token = create_token(real.access, "acme")
    app = create_app(api_config(Stores(_NoStore(), real.access), FakeQueue()))  # type: ignore
    client, auth = app.test_client(), {"Authorization": f"Bearer {token}"}
    for path in _wrong_shapes("bat_" + "B" * 22, "chk_" + "C" * 22):
        assert _problem(client.get(path, headers=auth), 404)["errors"]
    # without a token the answer is 401, whatever the path
    _problem(client.get("/v1/checks/abc"), 401)
    real.close()


# ----------------------------------------------------------- reference impedances


@pytest.mark.parametrize("touchstone, field", [
    ("# HZ S RI R 1e400\n1 0 0 0 0 0 0 0 0\n2 0 0 0 0 0 0 0 0\n3 0 0 0 0 0 0 0 0\n",
     "touchstone"),
    ("[Version] 2.0\n# HZ S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
     "[Reference] 50 1e999\n[Number of Frequencies] 3\n[Network Data]\n"
     "1 0 0 0 0 0 0 0 0\n2 0 0 0 0 0 0 0 0\n3 0 0 0 0 0 0 0 0\n[End]\n", "touchstone"),
])
def test_touchstone_references_that_are_not_finite_are_refused(api, touchstone, field):
    client, auth = api
    request = {"touchstone": touchstone,
               "ports": [{"name": "a", "role": "external"}, {"name": "b", "role": "probe"}],
               "devices": [{"name": "Q", "gm_s": 0.01, "control": ["a", None],
                            "output": ["b", None]}]}
    problem = _problem(client.post("/v1/checks", json=request, headers=auth), 422)
    assert _fields(problem) == [field] and "finite" in problem["errors"][0]["detail"]


@pytest.mark.parametrize("literal", ["1e400", "-1e400", HUGE])
def test_json_references_that_are_not_finite_are_refused(api, literal):
    client, auth = api
    request = tiny_request()
    request.update(parameters="S", z0_ohm="@")
    assert _fields(_problem(_post_text(client, auth, "/v1/checks",
                                       _with_literal(request, "@", literal)), 422)) == ["z0_ohm"]
    request = tiny_request()
    request["ports"][1]["termination_ohm"] = {"re": 50, "im": "@"}
    assert _fields(_problem(_post_text(client, auth, "/v1/checks",
                                       _with_literal(request, "@", literal)), 422)) == [
        "ports.1.termination_ohm"]
