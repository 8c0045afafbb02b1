"""Security headers on every response, the API's own errors and the body gate's included.

WSGI middleware, outermost, so that nothing answers without them:

- ``X-Content-Type-Options: nosniff`` (WHATWG Fetch §3.5.x): a browser takes JSON, SVG and PNG as
  the type they are sent with and never sniffs a script or a page out of them;
- ``Content-Security-Policy`` (CSP Level 3): report pages get the policy they carry themselves
  (``service.reports.pages.PAGE_POLICY``, plus ``frame-ancestors 'none'``, which only a header
  can say); SVG plots may style themselves (matplotlib writes a ``<style>`` element) and use
  ``data:`` images; everything else (JSON, problem details, PNG) may load and run nothing;
- ``Referrer-Policy: no-referrer``: a report's links do not carry the check's URL elsewhere;
- ``X-Frame-Options: DENY`` for browsers without ``frame-ancestors``;
- ``Cross-Origin-Resource-Policy: same-origin`` and ``Cross-Origin-Opener-Policy: same-origin``:
  another site cannot embed a tenant's plots or keep a handle on a report window;
- ``Cache-Control: no-store`` unless the endpoint chose its own (plots are ``private``): tenant
  data is not kept by shared caches.

Strict-Transport-Security belongs to whatever terminates TLS (``deploy/README.md``).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

from service.reports.pages import PAGE_POLICY

NOTHING_POLICY = "default-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
SVG_POLICY = ("default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
              "frame-ancestors 'none'")
HTML_POLICY = PAGE_POLICY + "; frame-ancestors 'none'"
COMMON_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "X-Frame-Options": "DENY",
    "Cross-Origin-Resource-Policy": "same-origin",
    "Cross-Origin-Opener-Policy": "same-origin",
}
DEFAULT_CACHE_CONTROL = "no-store"


def security_headers(content_type: str | None) -> dict[str, str]:
    """The headers a response of ``content_type`` gets (those it set itself are kept)."""
    media = (content_type or "").split(";", 1)[0].strip().lower()
    if media == "text/html":
        policy = HTML_POLICY
    elif media == "image/svg+xml":
        policy = SVG_POLICY
    else:
        policy = NOTHING_POLICY
    return {**COMMON_HEADERS, "Content-Security-Policy": policy,
            "Cache-Control": DEFAULT_CACHE_CONTROL}


class SecurityHeadersMiddleware:
    """Adds :func:`security_headers` to every response of the wrapped WSGI application."""

    def __init__(self, app: Callable[..., Iterable[bytes]]) -> None:
        self.app = app

    def __call__(self, environ: dict[str, Any], start_response: Callable[..., Any]
                 ) -> Iterable[bytes]:
        def start(status: str, headers: list[tuple[str, str]], exc_info: Any = None) -> Any:
            present = {name.lower(): value for name, value in headers}
            extra = [(name, value) for name, value in
                     security_headers(present.get("content-type")).items()
                     if name.lower() not in present]
            return start_response(status, [*headers, *extra], exc_info)

        return self.app(environ, start)
