"""Which callback URLs may be called: http(s) only, and no loopback, link-local, private or
otherwise special address unless the operator allows them (``BALLAST_CALLBACK_ALLOW_PRIVATE=1``).

An address is refused when Python's ``ipaddress`` says it is not global (RFC 6890 special-purpose
registries: private 10/8, 172.16/12, 192.168/16, fc00::/7; loopback 127/8 and ::1; link-local
169.254/16 and fe80::/10; unspecified, reserved, shared 100.64/10 …) or multicast. A host name is
resolved and every address it resolves to must pass, both when the batch is accepted and again
before each delivery (a name may resolve elsewhere later).
"""

from __future__ import annotations

import ipaddress
import os
import socket
from collections.abc import Callable
from urllib.parse import urlsplit

MAX_URL_LENGTH = 2000
Resolver = Callable[[str, int], list[str]]


class TargetRefusedError(ValueError):
    """The URL may not be called; the message says why."""


def private_targets_allowed(environ: dict[str, str] | None = None) -> bool:
    env = os.environ if environ is None else environ
    return env.get("BALLAST_CALLBACK_ALLOW_PRIVATE", "").strip().lower() in ("1", "true", "yes")


def resolve(host: str, port: int) -> list[str]:
    """Every address ``host`` resolves to (``getaddrinfo``)."""
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except (socket.gaierror, UnicodeError) as exc:
        raise TargetRefusedError(f"the host {host!r} does not resolve ({exc})") from exc
    return sorted({str(info[4][0]) for info in infos})


def check_target(url: str, *, allow_private: bool, resolver: Resolver = resolve) -> str:
    """``url`` if it may be called, else :class:`TargetRefusedError` naming the problem."""
    if len(url) > MAX_URL_LENGTH:
        raise TargetRefusedError(f"is longer than {MAX_URL_LENGTH} characters")
    parts = urlsplit(url)
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise TargetRefusedError("must be an absolute http:// or https:// URL")
    if parts.username or parts.password:
        raise TargetRefusedError("must not carry a user name or password")
    try:
        port = parts.port or (443 if parts.scheme == "https" else 80)
    except ValueError as exc:
        raise TargetRefusedError(f"has an invalid port ({exc})") from exc
    if allow_private:
        return url
    for address in resolver(parts.hostname, port):
        ip = ipaddress.ip_address(address.split("%")[0])
        if not ip.is_global or ip.is_multicast:
            raise TargetRefusedError(
                f"resolves to {ip}, a loopback, link-local, private or reserved address; "
                "an operator may allow such targets (BALLAST_CALLBACK_ALLOW_PRIVATE=1)")
    return url
