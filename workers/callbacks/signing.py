"""Signing batch callbacks by the open Standard Webhooks scheme (standardwebhooks.com, version
1.0.0, "Signature scheme" and "Webhook headers"):

* the signed content is ``{webhook-id}.{webhook-timestamp}.{body}``; the signature is
  HMAC-SHA256 (RFC 2104) with the secret's key, base64-encoded, prefixed ``v1,``;
* the secret is shown as ``whsec_`` + base64 of 24–64 random bytes (here 32); the key is the
  decoded bytes;
* ``webhook-signature`` lists signatures separated by spaces: during a rotation's grace period
  the current and the previous secret both sign, so a receiver may switch without a gap;
* a receiver checks ``webhook-timestamp`` against its clock (a tolerance of a few minutes) and
  compares signatures in constant time.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import hmac
import secrets
from collections.abc import Iterable, Mapping

SECRET_PREFIX = "whsec_"
SECRET_BYTES = 32
TOLERANCE_S = 300


def new_secret() -> str:
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(SECRET_BYTES)).decode()


def _key(secret: str) -> bytes:
    return base64.b64decode(secret.removeprefix(SECRET_PREFIX), validate=True)


def signature(secret: str, message_id: str, timestamp: int, body: bytes) -> str:
    """``v1,<base64 HMAC-SHA256 of "{id}.{timestamp}.{body}">``."""
    content = f"{message_id}.{int(timestamp)}.".encode() + body
    return "v1," + base64.b64encode(hmac.new(_key(secret), content, hashlib.sha256)
                                    .digest()).decode()


def signature_header(all_secrets: Iterable[str], message_id: str, timestamp: int,
                     body: bytes) -> str:
    """The ``webhook-signature`` value: one signature per secret, space-separated."""
    return " ".join(signature(s, message_id, timestamp, body) for s in all_secrets)


def verify(secret: str, headers: Mapping[str, str], body: bytes, now: float,
           tolerance_s: float = TOLERANCE_S) -> bool:
    """What a receiver does: the timestamp within the tolerance and one of the listed ``v1``
    signatures equal (constant time) to the one computed with ``secret``."""
    lower = {k.lower(): v for k, v in headers.items()}
    message_id = lower.get("webhook-id")
    stamp = lower.get("webhook-timestamp", "")
    listed = lower.get("webhook-signature", "")
    if not message_id or not stamp.isdigit() or abs(now - int(stamp)) > tolerance_s:
        return False
    try:
        expected = signature(secret, message_id, int(stamp), body)
    except (binascii.Error, ValueError):
        return False
    return any(hmac.compare_digest(expected, given) for given in listed.split()
               if given.startswith("v1,"))
