"""A thin Python client for ballast's HTTP API (v1), usable from scripts and other tools.

    from service.client import BallastClient
    client = BallastClient.from_environment()          # BALLAST_URL, BALLAST_TOKEN, config file
    batch = client.submit_touchstone_batch(paths, mapping)
    client.wait_batch(batch["id"])
    check = client.check_network(skrf_network, ports=[...], devices=[...])  # submit and wait

Where the settings come from, first match wins: explicit arguments; the environment
(``BALLAST_URL``, ``BALLAST_TOKEN``); the TOML file named by ``BALLAST_CONFIG`` or else
``~/.config/ballast/client.toml`` (keys ``url`` and ``token``); the URL defaults to
``http://127.0.0.1:8000``.

Every request has a (connect, read) timeout. Transient answers (429, 502, 503, 504) and connection
failures are retried by urllib3's ``Retry`` (mounted on the session): exponential backoff with
jitter, or as long as the server's ``Retry-After`` says (RFC 9110 §10.2.3; at most
``RetryPolicy.max_retry_after_s``). Every POST carries an ``Idempotency-Key`` (one is made when the
caller gives none), so a POST whose answer was lost is safe to send again: the server accepts it
once.
"""

from __future__ import annotations

import json
import os
import time
import tomllib
import uuid
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import requests
from requests.adapters import HTTPAdapter
from urllib3.exceptions import InvalidHeader
from urllib3.util.retry import Retry

from service.client_network import request_from_network

__all__ = ["ApiError", "BallastClient", "BatchProgress", "ClientConfig", "ClientError",
           "RetryPolicy", "batch_progress", "config_file_path", "load_config", "next_link",
           "request_from_network"]

DEFAULT_URL = "http://127.0.0.1:8000"
CONFIG_ENV = "BALLAST_CONFIG"
URL_ENV = "BALLAST_URL"
TOKEN_ENV = "BALLAST_TOKEN"
RETRY_STATUSES = frozenset({429, 502, 503, 504})
FINAL_STATUSES = frozenset({"done", "failed", "cancelled"})


class ClientError(Exception):
    """The client could not do what was asked (configuration, transport or API error)."""


class ApiError(ClientError):
    """The API answered with an error; ``problem`` is its RFC 9457 body when it sent one."""

    def __init__(self, status: int, problem: dict[str, Any] | None, text: str = "") -> None:
        self.status = status
        self.problem = problem or {}
        title = self.problem.get("title") or text[:200] or "error"
        detail = self.problem.get("detail")
        super().__init__(f"HTTP {status}: {title}" + (f" ({detail})" if detail else ""))


@dataclass(frozen=True)
class RetryPolicy:
    """How patient the client is: ``attempts`` tries in all; between them urllib3's backoff,
    min(cap, base·2^(n−1)) plus up to ``base_s`` of jitter before retry n (none before the
    first), or the server's Retry-After, at most ``max_retry_after_s``."""

    attempts: int = 5
    base_s: float = 0.25
    cap_s: float = 8.0
    max_retry_after_s: float = 60.0

    def urllib3_retry(self) -> Retry:
        return _Retry(
            total=self.attempts - 1, status_forcelist=RETRY_STATUSES,
            allowed_methods=None,  # any method: every POST carries an Idempotency-Key
            backoff_factor=self.base_s, backoff_max=self.cap_s, backoff_jitter=self.base_s,
            respect_retry_after_header=True, raise_on_status=False,
            max_retry_after_s=self.max_retry_after_s,
        )


class _Retry(Retry):
    """urllib3's Retry with the server's Retry-After capped, and a Retry-After that is neither
    delta-seconds nor an HTTP-date ignored (urllib3 raises ``InvalidHeader``): then it backs
    off as without one."""

    def __init__(self, *args: Any, max_retry_after_s: float = 60.0, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.max_retry_after_s = max_retry_after_s

    def new(self, **kwargs: Any) -> _Retry:
        return super().new(max_retry_after_s=self.max_retry_after_s, **kwargs)

    def parse_retry_after(self, retry_after: str) -> float:
        return min(super().parse_retry_after(retry_after), self.max_retry_after_s)

    def get_retry_after(self, response: Any) -> float | None:
        try:
            return super().get_retry_after(response)
        except InvalidHeader:
            return None


@dataclass(frozen=True)
class ClientConfig:
    """Where the API is, how to authenticate, and how patient to be."""

    url: str = DEFAULT_URL
    token: str | None = None
    connect_timeout_s: float = 5.0
    read_timeout_s: float = 60.0
    retry: RetryPolicy = field(default_factory=RetryPolicy)


def config_file_path() -> Path:
    """``$BALLAST_CONFIG`` or ``~/.config/ballast/client.toml`` (XDG_CONFIG_HOME honoured)."""
    explicit = os.environ.get(CONFIG_ENV)
    if explicit:
        return Path(explicit)
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "ballast" / "client.toml"


def load_config(url: str | None = None, token: str | None = None,
                config_path: Path | None = None) -> ClientConfig:
    """Arguments, then environment, then the config file, then the defaults."""
    path = config_path or config_file_path()
    from_file: dict[str, Any] = {}
    if path.is_file():
        try:
            from_file = tomllib.loads(path.read_text(encoding="utf-8"))
        except (OSError, tomllib.TOMLDecodeError) as exc:
            raise ClientError(f"cannot read client config {path}: {exc}") from exc
    chosen_url = url or os.environ.get(URL_ENV) or from_file.get("url") or DEFAULT_URL
    chosen_token = token or os.environ.get(TOKEN_ENV) or from_file.get("token")
    return ClientConfig(url=str(chosen_url).rstrip("/"),
                        token=str(chosen_token) if chosen_token else None)


def next_link(header: str | None) -> str | None:
    """The target of ``rel="next"`` in a Link header (RFC 8288), or None."""
    if not header:
        return None
    for part in header.split(","):
        target, _, params = part.partition(";")
        rels = [p.strip() for p in params.split(";")]
        if any(p.replace(" ", "") in ('rel="next"', "rel=next") for p in rels):
            return target.strip().strip("<>")
    return None


@dataclass(frozen=True)
class BatchProgress:
    """One poll of a batch: how many checks are finished, and the verdicts so far."""

    total: int
    finished: int
    by_status: dict[str, int]
    by_verdict: dict[str, int]
    elapsed_s: float

    @property
    def rate_per_s(self) -> float:
        return self.finished / self.elapsed_s if self.elapsed_s > 0 else 0.0


class BallastClient:
    """Calls the v1 API; every method returns the decoded JSON body."""

    def __init__(self, config: ClientConfig, session: requests.Session | None = None,
                 sleep: Callable[[float], None] = time.sleep) -> None:
        """``session`` gets the retrying adapters mounted for http:// and https://;
        ``sleep`` paces :meth:`wait_batch`'s polling."""
        self.config = config
        self.session = session or requests.Session()
        self.session.headers["User-Agent"] = "ballast-client/1"
        if config.token:
            self.session.headers["Authorization"] = f"Bearer {config.token}"
        adapter = HTTPAdapter(max_retries=config.retry.urllib3_retry())
        for scheme in ("http://", "https://"):
            self.session.mount(scheme, adapter)
        self._sleep = sleep

    @classmethod
    def from_environment(cls, url: str | None = None, token: str | None = None) -> BallastClient:
        return cls(load_config(url, token))

    def with_timeouts(self, connect_s: float, read_s: float) -> BallastClient:
        config = replace(self.config, connect_timeout_s=connect_s, read_timeout_s=read_s)
        return BallastClient(config, self.session, self._sleep)

    # --- transport -------------------------------------------------------------------------

    def _url(self, path_or_url: str) -> str:
        if path_or_url.startswith(("http://", "https://")):
            return path_or_url
        return self.config.url + path_or_url

    def request(self, method: str, path: str, **kwargs: Any) -> requests.Response:
        """Send one request (retried by the session's urllib3 ``Retry``); raise
        :class:`ApiError` on a non-2xx final answer, :class:`ClientError` when none came."""
        headers = dict(kwargs.pop("headers", None) or {})
        if method.upper() == "POST":
            headers.setdefault("Idempotency-Key", uuid.uuid4().hex)  # safe to send again
        timeout = (self.config.connect_timeout_s, self.config.read_timeout_s)
        try:
            response = self.session.request(method, self._url(path), headers=headers,
                                            timeout=timeout, **kwargs)
        except requests.RequestException as exc:  # connection, time-out, retries used up
            raise ClientError(f"{method} {self._url(path)}: {exc}") from exc
        if response.status_code >= 400:
            raise _api_error(response)
        return response

    def _json(self, method: str, path: str, **kwargs: Any) -> Any:
        response = self.request(method, path, **kwargs)
        if response.status_code == 204 or not response.content:
            return {}
        return response.json()

    # --- checks ----------------------------------------------------------------------------

    def submit_check(self, request: dict[str, Any], idempotency_key: str | None = None) -> dict:
        """POST /v1/checks; safe to retry (an Idempotency-Key is always sent)."""
        key = idempotency_key or uuid.uuid4().hex
        return self._json("POST", "/v1/checks", json=request, headers={"Idempotency-Key": key})

    def get_check(self, check_id: str) -> dict:
        return self._json("GET", f"/v1/checks/{check_id}")

    def wait_check(self, check_id: str, poll_s: float = 0.25, max_poll_s: float = 3.0,
                   timeout_s: float | None = None) -> dict:
        """Poll until the check is done, failed or cancelled; return the check (its
        ``verdict`` when done)."""
        return self._poll(lambda _: self.get_check(check_id),
                          lambda check: check.get("status") in FINAL_STATUSES,
                          f"check {check_id}", lambda check: f"status {check.get('status')}",
                          poll_s, max_poll_s, timeout_s)

    def check_network(self, network: Any, ports: Sequence[dict[str, Any]],
                      devices: Sequence[dict[str, Any]] | None = None, gain_off: Any = None,
                      options: dict[str, Any] | None = None, *, priority: str | None = None,
                      poll_s: float = 0.25, max_poll_s: float = 3.0,
                      timeout_s: float | None = None) -> dict:
        """Check a scikit-rf ``Network`` (or any object with ``.f``, ``.s``, ``.z0``): the request
        of :func:`request_from_network`, submitted (POST /v1/checks) and waited for
        (:meth:`wait_check`); returns the finished check with its verdict."""
        request = request_from_network(network, ports, devices, gain_off, options)
        if priority is not None:
            request["priority"] = priority
        accepted = self.submit_check(request)
        return self.wait_check(accepted["id"], poll_s=poll_s, max_poll_s=max_poll_s,
                               timeout_s=timeout_s)

    def add_samples(self, check_id: str, samples: dict[str, Any],
                    idempotency_key: str | None = None) -> dict:
        """POST /v1/checks/{id}/samples: a new check on the union of the check's frequencies and
        ``samples`` (the network part of a check request at new frequencies, e.g. where the
        verdict's ``next_sweep`` asks); the answer names the new check and ``extends``."""
        key = idempotency_key or uuid.uuid4().hex
        return self._json("POST", f"/v1/checks/{check_id}/samples", json=samples,
                          headers={"Idempotency-Key": key})

    def cancel_check(self, check_id: str) -> dict:
        return self._json("DELETE", f"/v1/checks/{check_id}")

    def get_curves(self, check_id: str) -> str:
        """GET /v1/checks/{id}/curves.csv: NDF, each F_k and each node's Y as CSV text."""
        return self.request("GET", f"/v1/checks/{check_id}/curves.csv").text

    # --- batches ---------------------------------------------------------------------------

    def submit_batch(self, shared: dict[str, Any] | None,
                     variants: Sequence[dict[str, Any]], label: str | None = None) -> dict:
        """POST /v1/batches (JSON): each variant ``{"label": ..., **request members}`` is merged
        over the shared ``map``; safe to retry (an Idempotency-Key is always sent)."""
        body: dict[str, Any] = {"variants": list(variants)}
        if shared:
            body["map"] = shared
        if label:
            body["label"] = label
        return self._json("POST", "/v1/batches", json=body,
                          headers={"Idempotency-Key": uuid.uuid4().hex})

    def submit_touchstone_batch(self, files: Sequence[Path], mapping: dict[str, Any],
                                label: str | None = None) -> dict:
        """POST /v1/batches (multipart): one part per Touchstone file, the map as a JSON part.

        The server labels each variant with its file name. Safe to retry (Idempotency-Key).
        """
        parts: list[tuple[str, tuple[str | None, bytes | str, str]]] = [
            ("map", (None, json.dumps(mapping), "application/json"))]
        if label:
            parts.append(("label", (None, label, "text/plain")))
        for path in files:
            parts.append(("files", (path.name, path.read_bytes(), "application/octet-stream")))
        return self._json("POST", "/v1/batches", files=parts,
                          headers={"Idempotency-Key": uuid.uuid4().hex})

    def get_batch(self, batch_id: str) -> dict:
        return self._json("GET", f"/v1/batches/{batch_id}")

    def cancel_batch(self, batch_id: str) -> dict:
        return self._json("DELETE", f"/v1/batches/{batch_id}")

    def list_batches(self) -> dict:
        return self._json("GET", "/v1/batches")

    def iter_batch_checks(self, batch_id: str, verdict: str | None = None,
                          status: str | None = None, limit: int = 500) -> Iterator[dict]:
        """Every check of a batch, following the ``Link: rel="next"`` cursor pages."""
        params: dict[str, Any] | None = {"limit": limit}
        if verdict:
            params["verdict"] = verdict  # type: ignore[index]
        if status:
            params["status"] = status  # type: ignore[index]
        url: str | None = f"/v1/batches/{batch_id}/checks"
        while url:
            response = self.request("GET", url, params=params)
            body = response.json()
            yield from body["items"]
            url = next_link(response.headers.get("Link"))
            params = None  # the next link carries the cursor and the filters

    def wait_batch(self, batch_id: str, on_progress: Callable[[BatchProgress], None] | None = None,
                   poll_s: float = 0.5, max_poll_s: float = 3.0,
                   timeout_s: float | None = None) -> dict:
        """Poll until every check of the batch is done, failed or cancelled; return the batch."""
        def fetch(elapsed_s: float) -> dict:
            batch = self.get_batch(batch_id)
            progress = batch_progress(batch, elapsed_s)
            if on_progress:
                on_progress(progress)
            return {"batch": batch, "progress": progress}

        def finished(state: dict) -> bool:
            progress = state["progress"]
            return bool(state["batch"].get("finished")) or progress.finished >= progress.total

        def so_far(state: dict) -> str:
            return f"{state['progress'].finished}/{state['progress'].total}"

        return self._poll(fetch, finished, f"batch {batch_id}", so_far, poll_s,
                          max_poll_s, timeout_s)["batch"]

    def _poll(self, fetch: Callable[[float], dict], finished: Callable[[dict], bool],
              name: str, so_far: Callable[[dict], str], poll_s: float,
              max_poll_s: float, timeout_s: float | None) -> dict:
        """``fetch(elapsed seconds)`` until ``finished``, the interval growing 1.5× per poll up
        to ``max_poll_s``; a ClientError naming the resource after ``timeout_s``."""
        start = time.monotonic()
        interval = poll_s
        while True:
            state = fetch(time.monotonic() - start)
            if finished(state):
                return state
            if timeout_s is not None and time.monotonic() - start > timeout_s:
                raise ClientError(f"{name}: not finished after {timeout_s:g} s "
                                  f"({so_far(state)})")
            self._sleep(interval)
            interval = min(max_poll_s, interval * 1.5)

    def health(self) -> dict:
        return self._json("GET", "/healthz")


def batch_progress(batch: dict[str, Any], elapsed_s: float) -> BatchProgress:
    """Counts from a GET /v1/batches/{id} body."""
    by_status = {k: int(v) for k, v in (batch.get("counts_by_status") or {}).items()}
    by_verdict = {k: int(v) for k, v in (batch.get("counts_by_verdict") or {}).items()}
    total = int(batch.get("size") or sum(by_status.values()))
    finished = sum(n for s, n in by_status.items() if s in FINAL_STATUSES)
    return BatchProgress(total, finished, by_status, by_verdict, elapsed_s)


def _api_error(response: requests.Response) -> ApiError:
    problem = None
    if "json" in response.headers.get("Content-Type", ""):
        try:
            body = response.json()
            problem = body if isinstance(body, dict) else None
        except ValueError:
            problem = None
    return ApiError(response.status_code, problem, response.text)
