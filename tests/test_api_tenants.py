"""Tokens and tenants: format, hashing, the embedded default's token, the admin command, and the
API on both store back ends (tenant isolation, restart of the SQLite store).

Sources: FIPS 180-4 SHA-256 (the stored digest is hashlib's, checked against the standard's
"abc" test vector); RFC 4648 §5 (base64url alphabet of the token body); the service issue (tokens
stored only as hashes, created and revoked by an admin command, another tenant's id → 404).
"""

from __future__ import annotations

import re

import pytest

from service.app import create_app
from service.auth import (
    TOKEN_PREFIX,
    create_token,
    ensure_token,
    hash_token,
    new_token,
    tenant_of,
)
from service.cli import main as ballast
from service.runner import load_request
from tests.api_fixtures import FakeQueue, api_config, run_worker, sqlite_file_stores, tiny_request
from tests.request_equality import assert_same_request


def test_tokens_have_the_prefix_and_256_random_bits():
    tokens = {new_token() for _ in range(100)}
    assert len(tokens) == 100
    for token in tokens:
        # 32 bytes in base64url without padding = 43 characters of A-Z a-z 0-9 - _
        assert re.fullmatch(TOKEN_PREFIX + r"[A-Za-z0-9_-]{43}", token)


def test_only_the_sha256_digest_is_stored(api_stores):
    access = api_stores.access
    # FIPS 180-4 appendix B.1 test vector: SHA-256("abc")
    assert hash_token("abc") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad")
    token = create_token(access, "acme")
    (record,) = access.list_tokens()
    assert record.token_hash == hash_token(token) and token not in repr(record)
    dump = "\n".join(access._conn().iterdump())
    assert token not in dump and hash_token(token) in dump
    assert tenant_of(access, token) == "acme"
    assert tenant_of(access, token[:-1] + ("A" if token[-1] != "A" else "B")) is None


def test_ensure_token_uses_the_given_token_or_makes_one(api_stores):
    given = new_token()
    assert ensure_token(api_stores.access, given) == given
    assert ensure_token(api_stores.access, given) == given  # idempotent across restarts
    assert tenant_of(api_stores.access, given) == "local"
    made = ensure_token(api_stores.access, None)
    assert made != given and tenant_of(api_stores.access, made) == "local"
    with pytest.raises(ValueError, match=TOKEN_PREFIX):
        ensure_token(api_stores.access, "not-a-token")  # a malformed BALLAST_TOKEN is refused


def test_admin_command_creates_lists_and_revokes(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'admin.sqlite3'}"
    assert ballast(["token", "--store", url, "create", "--tenant", "acme"]) == 0
    token = capsys.readouterr().out.strip()
    store = sqlite_file_stores(tmp_path / "admin.sqlite3").access
    assert tenant_of(store, token) == "acme"
    assert ballast(["token", "--store", url, "list"]) == 0
    listing = capsys.readouterr().out
    assert hash_token(token)[:12] in listing and "acme" in listing and token not in listing
    assert ballast(["token", "--store", url, "revoke", hash_token(token)[:12]]) == 0
    assert tenant_of(store, token) is None
    assert ballast(["token", "--store", url, "revoke", token]) == 3
    assert ballast(["token", "--store", url, "create", "--tenant", "bad name!"]) == 3


def test_token_commands_refuse_without_a_named_store(tmp_path, capsys, monkeypatch):
    """Issue 10: without BALLAST_DATA_DIR, ``token create`` made a token in ./var of whatever
    directory it ran in, a store no service reads."""
    from service.cli.admin_cmd import STORE_SETTINGS

    for name in STORE_SETTINGS:
        monkeypatch.delenv(name, raising=False)
    monkeypatch.chdir(tmp_path)
    for action in (["create", "--tenant", "acme"], ["list"], ["revoke", "0123456789ab"]):
        assert ballast(["token", *action]) == 3
        err = capsys.readouterr().err
        assert "--store" in err and "BALLAST_DATA_DIR" in err
    assert list(tmp_path.iterdir()) == []  # no store was made anywhere
    monkeypatch.setenv("BALLAST_DATA_DIR", str(tmp_path / "data"))
    assert ballast(["token", "create", "--tenant", "acme"]) == 0
    out, err = capsys.readouterr()
    store = tmp_path / "data" / "store.sqlite3"
    assert f"store sqlite:///{store}" in err and "'acme'" in err
    assert tenant_of(sqlite_file_stores(store).access, out.strip()) == "acme"


def test_the_store_is_named_without_its_password(monkeypatch):
    from service.cli.admin_cmd import store_url
    from service.config import printable_url

    env = {"BALLAST_REDIS_URL": "redis://:s3cret@redis.internal:6379/0"}
    assert store_url(None, env) == env["BALLAST_REDIS_URL"]
    assert printable_url(env["BALLAST_REDIS_URL"]) == "redis://:***@redis.internal:6379/0"
    assert printable_url("redis://ops:pw@h/1") == "redis://ops:***@h/1"
    assert printable_url("sqlite:///var/store.sqlite3") == "sqlite:///var/store.sqlite3"
    assert store_url("sqlite:///x.sqlite3", {}) == "sqlite:///x.sqlite3"


def test_api_on_both_stores_keeps_tenants_apart(stores, clock):
    """The same flow on both back ends (the ``stores`` fixture runs SQLite and a real Redis)."""
    queue = FakeQueue()
    client = create_app(api_config(stores, queue)).test_client()
    acme = {"Authorization": f"Bearer {create_token(stores.access, 'acme')}"}
    rival = {"Authorization": f"Bearer {create_token(stores.access, 'rival')}"}
    batch = {"map": tiny_request(), "variants": [{"label": "a"}, {"label": "b"}]}
    accepted = client.post("/v1/batches", json=batch, headers=acme).get_json()
    (verdict, _) = run_worker(stores.checks, accepted["check_ids"])
    first = accepted["check_ids"][0]
    assert client.get(f"/v1/checks/{first}", headers=acme).get_json()["verdict"] == verdict
    assert client.get(f"/v1/checks/{first}", headers=rival).status_code == 404
    assert client.get(f"/v1/batches/{accepted['id']}", headers=rival).status_code == 404
    counts = client.get(f"/v1/batches/{accepted['id']}", headers=acme).get_json()
    assert counts["counts_by_status"]["done"] == 2
    # a second batch: paged listing (Link rel="next"), idempotent retry, cancellation
    batch = {"map": tiny_request(), "variants": [{"label": f"v{i}"} for i in range(5)]}
    keyed = {**acme, "Idempotency-Key": "k"}
    clock.now += 1  # the store's clock: the second batch is the more recent
    second = client.post("/v1/batches", json=batch, headers=keyed).get_json()
    assert client.post("/v1/batches", json=batch, headers=keyed).get_json() == second
    page = client.get(f"/v1/batches/{second['id']}/checks?limit=3", headers=acme)
    assert [i["label"] for i in page.get_json()["items"]] == ["v0", "v1", "v2"]
    rest = client.get(page.headers["Link"].split(">")[0].lstrip("<"), headers=acme).get_json()
    assert [i["label"] for i in rest["items"]] == ["v3", "v4"] and rest["next_cursor"] is None
    cancelled = client.delete(f"/v1/batches/{second['id']}", headers=acme).get_json()
    assert cancelled["counts_by_status"]["cancelled"] == 5 and cancelled["finished"] is True
    assert [b["id"] for b in client.get("/v1/batches", headers=acme).get_json()["items"]] == [
        second["id"], accepted["id"]]


def test_accepted_checks_survive_a_restart_of_the_sqlite_store(tmp_path):
    path = tmp_path / "restart.sqlite3"
    stores = sqlite_file_stores(path)
    headers = {"Authorization": f"Bearer {create_token(stores.access, 'acme')}"}
    client = create_app(api_config(stores, FakeQueue())).test_client()
    check_id = client.post("/v1/checks", json=tiny_request(), headers=headers).get_json()["id"]
    stores.close()
    reopened = sqlite_file_stores(path)
    client = create_app(api_config(reopened, FakeQueue())).test_client()
    body = client.get(f"/v1/checks/{check_id}", headers=headers).get_json()
    assert body["status"] == "queued"
    assert_same_request(load_request(reopened.checks.get_request(check_id)),
                        load_request(tiny_request()))
