"""Talking to a live API server in tests: submit a batch and wait for it, and what every
tenant-owned route must do for anyone else (the API's tenancy contract: another tenant's id is
unknown to you, and nothing answers without a token)."""

from __future__ import annotations

import time
from collections.abc import Iterable
from typing import Any

import requests


def authorised_session(token: str) -> requests.Session:
    """A session that sends ``token`` as its bearer token."""
    session = requests.Session()
    session.headers["Authorization"] = f"Bearer {token}"
    return session


def submit_batch_and_wait(session: requests.Session, base_url: str, body: dict[str, Any],
                          timeout_s: float = 90.0) -> dict[str, Any]:
    """POST ``body`` to /v1/batches and poll until the batch has finished (or ``timeout_s``);
    the accepted answer (id, check_ids)."""
    accepted = session.post(f"{base_url}/v1/batches", json=body, timeout=60).json()
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        batch = session.get(f"{base_url}/v1/batches/{accepted['id']}", timeout=30).json()
        if batch["finished"]:
            break
        time.sleep(0.1)
    return accepted


def assert_private(base_url: str, paths: Iterable[str], other_token: str) -> None:
    """Each of ``paths`` answers 404 to ``other_token`` (another tenant's) and 401 to no token."""
    for path in paths:
        response = requests.get(base_url + path, timeout=60,
                                headers={"Authorization": f"Bearer {other_token}"})
        assert response.status_code == 404, path
        assert requests.get(base_url + path, timeout=60).status_code == 401, path
