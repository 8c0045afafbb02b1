"""``ballast token create|list|revoke``: API tokens for tenants.

A token is printed once, at creation; the store keeps only its SHA-256 digest. ``list`` shows each
token's id (the first 12 hex digits of the digest), its tenant and creation time; ``revoke`` takes
the token itself or that id.

The store must be named: ``--store URL``, or the service's own settings (``BALLAST_STORE_URL``,
``BALLAST_REDIS_URL``, or ``BALLAST_DATA_DIR`` for the embedded SQLite store). Without any of
them the command refuses (exit 3) rather than open ``./var`` of whatever directory it runs in,
where a token would work for no service. Every action says on stderr which store it used (a
Redis password shown as ``***``); stdout carries only the token, the listing or the revocation.
"""

from __future__ import annotations

import argparse
import os
import sys
from datetime import UTC, datetime

from service.auth import create_token, hash_token, looks_like_token
from service.cli import PLAIN_EXIT_CODES_HELP
from service.config import printable_url
from workers.store import AccessStore

ID_LENGTH = 12
STORE_SETTINGS = ("BALLAST_STORE_URL", "BALLAST_REDIS_URL", "BALLAST_DATA_DIR")


class NoStoreNamedError(Exception):
    """Neither ``--store`` nor a setting of the service names the store."""


def store_url(given: str | None, environ: dict[str, str] | None = None) -> str:
    """The store's URL: ``given``, else the service's configured one if a setting names it."""
    if given:
        return given
    env = dict(os.environ if environ is None else environ)
    if not any(env.get(name, "").strip() for name in STORE_SETTINGS):
        raise NoStoreNamedError(
            "name the store: --store URL (redis://… or sqlite:///path), or set "
            + ", ".join(STORE_SETTINGS[:-1]) + f" or {STORE_SETTINGS[-1]} as the service has them")
    from workers.runtime_config import load_config

    return load_config(env).store_url


def _store(args: argparse.Namespace) -> AccessStore:
    from workers.store import open_stores

    url = store_url(args.store)
    print(f"ballast token: store {printable_url(url)}", file=sys.stderr)
    return open_stores(url).access


def _create(args: argparse.Namespace) -> int:
    try:
        token = create_token(_store(args), args.tenant)
    except ValueError as exc:
        print(f"ballast token: {exc}", file=sys.stderr)
        return 3
    print(token)
    print(f"ballast token: made a token for tenant {args.tenant!r}", file=sys.stderr)
    return 0


def _list(args: argparse.Namespace) -> int:
    for record in _store(args).list_tokens():
        created = datetime.fromtimestamp(record.created_at, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        print(f"{record.token_hash[:ID_LENGTH]}  {record.tenant}  {created}")
    return 0


def _revoke(args: argparse.Namespace) -> int:
    store = _store(args)
    given = args.token.strip()
    if looks_like_token(given):
        digests = [hash_token(given)]
    else:
        digests = [t.token_hash for t in store.list_tokens()
                   if len(given) >= 6 and t.token_hash.startswith(given.lower())]
    if len(digests) != 1 or not store.revoke_token(digests[0]):
        what = "matches several tokens" if len(digests) > 1 else "is not a known token or id"
        print(f"ballast token revoke: {given[:ID_LENGTH]}… {what}", file=sys.stderr)
        return 3
    print(f"revoked {digests[0][:ID_LENGTH]}")
    return 0


def _refusing(action):
    def run(args: argparse.Namespace) -> int:
        try:
            return action(args)
        except NoStoreNamedError as exc:
            print(f"ballast token: {exc}", file=sys.stderr)
            return 3

    return run


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser("token", help="create, list or revoke API tokens",
                                   epilog=PLAIN_EXIT_CODES_HELP)
    parser.add_argument("--store", help="store URL (default: the store the service's settings "
                                        "name; required when none is set)")
    actions = parser.add_subparsers(dest="token_action", required=True, metavar="ACTION",
                                    help="one of:")
    create = actions.add_parser("create", help="make a token for a tenant and print it once",
                                epilog=PLAIN_EXIT_CODES_HELP)
    create.add_argument("--tenant", required=True, help="tenant name (letters, digits, . _ -)")
    create.set_defaults(func=_refusing(_create))
    listing = actions.add_parser("list", help="list tokens (id, tenant, created)",
                                 epilog=PLAIN_EXIT_CODES_HELP)
    listing.set_defaults(func=_refusing(_list))
    revoke = actions.add_parser("revoke", help="revoke a token (give the token or its id)",
                                epilog=PLAIN_EXIT_CODES_HELP)
    revoke.add_argument("token", help="the token, or the id shown by 'ballast token list'")
    revoke.set_defaults(func=_refusing(_revoke))
