"""Security headers on every response: JSON, problem details (the router's, the API's and the
body gate's), the OpenAPI document; report pages, SVG and PNG are checked on a live server in
tests/test_reports_api.py.

Sources: WHATWG Fetch (``X-Content-Type-Options: nosniff``), W3C Content Security Policy Level 3
(directives, hash-source), RFC 7034 (X-Frame-Options), W3C Referrer Policy, WHATWG HTML
(Cross-Origin-Opener-Policy), WHATWG Fetch (Cross-Origin-Resource-Policy), RFC 9111 §5.2.2.5
(``no-store``).
"""

from __future__ import annotations

import io

import pytest

from service.api.security_headers import security_headers
from service.app import create_app
from tests.api_fixtures import api_config, tiny_request


def _assert_secured(response) -> None:
    headers = response.headers
    assert headers["X-Content-Type-Options"] == "nosniff"
    assert headers["X-Frame-Options"] == "DENY"
    assert headers["Referrer-Policy"] == "no-referrer"
    assert headers["Cross-Origin-Resource-Policy"] == "same-origin"
    policy = {d.strip().split(" ", 1)[0]: d.strip() for d in
              headers["Content-Security-Policy"].split(";")}
    assert policy["default-src"] == "default-src 'none'"
    assert policy["frame-ancestors"] == "frame-ancestors 'none'"


def test_json_and_problem_answers_carry_the_headers(client, auth):
    accepted = client.post("/v1/checks", json=tiny_request(), headers=auth)
    answers = [
        client.get("/healthz"), client.get("/openapi.json"), accepted,
        client.get(accepted.headers["Location"], headers=auth),
        client.get("/v1/batches"),                          # 401 of the token check
        client.get("/v2/nothing", headers=auth),             # 404 of the router
        client.put("/v1/checks", json={}, headers=auth),     # 405 of the router
        client.get("/v1/checks/abc", headers=auth),          # 404 of the path-id check
        client.post("/v1/checks", json={"ports": []}, headers=auth),  # 422 of the schema
    ]
    for response in answers:
        _assert_secured(response)
        assert response.headers["Cache-Control"] == "no-store"


@pytest.mark.parametrize("environ", [
    {"CONTENT_LENGTH": "abc"},                                            # 400
    {"CONTENT_LENGTH": str(1 << 40)},                                     # 413
    {"HTTP_TRANSFER_ENCODING": "chunked", "wsgi.input": io.BytesIO(b"{}")},  # 411
])
def test_the_body_gate_s_own_answers_carry_them(api_stores, fake_queue, auth, environ):
    app = create_app(api_config(api_stores, fake_queue))
    response = app.test_client().post("/v1/checks", headers=auth, environ_overrides=environ,
                                      content_type="application/json")
    assert response.status_code in (400, 411, 413)
    _assert_secured(response)


def test_an_endpoint_s_own_cache_policy_is_kept():
    assert security_headers("image/png")["Cache-Control"] == "no-store"
    # the middleware only adds what the response did not set (plots say "private, max-age")
    from service.api.security_headers import SecurityHeadersMiddleware

    def app(environ, start_response):
        start_response("200 OK", [("Content-Type", "image/png"),
                                  ("Cache-Control", "private, max-age=3600")])
        return [b""]

    seen: list = []
    SecurityHeadersMiddleware(app)({}, lambda status, headers, exc=None: seen.extend(headers))
    assert dict(seen)["Cache-Control"] == "private, max-age=3600"
    assert dict(seen)["X-Content-Type-Options"] == "nosniff"


def test_each_media_type_gets_its_policy():
    html = security_headers("text/html; charset=utf-8")["Content-Security-Policy"]
    assert "script-src 'sha256-" in html and "img-src data:" in html and "unsafe-eval" not in html
    svg = security_headers("image/svg+xml")["Content-Security-Policy"]
    assert "style-src 'unsafe-inline'" in svg and "script-src" not in svg
    assert security_headers("application/json")["Content-Security-Policy"].startswith(
        "default-src 'none'")
