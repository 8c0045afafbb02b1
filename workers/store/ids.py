"""Unguessable identifiers for checks and batches (128 bits from the OS's CSPRNG)."""

from __future__ import annotations

import secrets

CHECK_PREFIX = "chk_"
BATCH_PREFIX = "bat_"


def new_check_id() -> str:
    return CHECK_PREFIX + secrets.token_urlsafe(16)


def new_batch_id() -> str:
    return BATCH_PREFIX + secrets.token_urlsafe(16)
