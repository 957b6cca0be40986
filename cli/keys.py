"""``stifflane keys create|list|revoke``: API keys, managed directly in the service's Redis.

These commands talk to Redis, not to the API: they are for the operator of the stack. The
Redis is --redis-url, else $REDIS_URL, else the local stack's own (``stifflane up`` on this
machine: its address and password are read from var/redis/, so nothing needs setting). The
full key is printed once, at creation; only its digest is stored.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
from dataclasses import replace
from datetime import datetime, timezone
from pathlib import Path

from cli import local_stack
from cli.common import API_ERROR, OK, USAGE

NOT_FOUND = 4


class NoRedis(Exception):
    """Neither an address given nor a local stack running."""


def redis_url(args) -> str:
    """--redis-url, $REDIS_URL (or $STIFFLANE_REDIS_URL), else the local stack's Redis."""
    from jobs.settings import Settings

    if args.redis_url:
        return args.redis_url
    if os.environ.get("REDIS_URL") or os.environ.get("STIFFLANE_REDIS_URL"):
        return Settings.from_env().redis_url
    var = Path(args.var) if getattr(args, "var", None) else local_stack.default_var()
    url = local_stack.local_redis_url(var)
    if url is None:
        raise NoRedis(f"no Redis to manage keys in: no local stack is running on {local_stack.shown(var)} "
                      "(start it with 'stifflane up'), and neither --redis-url nor REDIS_URL is set")
    return url


def _store(args):
    from jobs.settings import Settings
    from jobs.store import JobStore

    return JobStore.connect(replace(Settings.from_env(), redis_url=redis_url(args)))


def _guard(func):
    def run(args) -> int:
        import redis

        try:
            return func(args)
        except NoRedis as e:
            print(f"error: {e}", file=sys.stderr)
            return API_ERROR
        except redis.RedisError as e:
            print(f"error: cannot use Redis ({e}); is the stack running? Pass --redis-url or set "
                  "REDIS_URL for a Redis of your own", file=sys.stderr)
            return API_ERROR
        except ValueError as e:
            print(f"error: {e}", file=sys.stderr)
            return USAGE
    return run


def cmd_create(args) -> int:
    from jobs import accounts

    store = _store(args)
    key_id, key = accounts.create_key(store.r, store.keys, args.owner, args.role, label=args.label or "")
    print(key)
    print(f"key {key_id} for owner '{args.owner}' ({args.role}); shown once: store it now", file=sys.stderr)
    return OK


def cmd_list(args) -> int:
    from jobs import accounts

    store = _store(args)
    rows = accounts.list_keys(store.r, store.keys)
    if args.json:
        print(json.dumps(rows, indent=2))
        return OK
    print(f"{'ID':8}  {'OWNER':20}  {'ROLE':5}  {'CREATED':19}  LABEL")
    for k in rows:
        try:
            created = datetime.fromtimestamp(float(k.get("created", 0)), tz=timezone.utc).strftime("%Y-%m-%d %H:%M:%S")
        except ValueError:
            created = "-"
        print(f"{k.get('id', ''):8}  {k.get('owner', ''):20}  {k.get('role', ''):5}  {created:19}  {k.get('label', '')}")
    return OK


def cmd_revoke(args) -> int:
    from jobs import accounts

    store = _store(args)
    if accounts.revoke_key(store.r, store.keys, args.key_id):
        print(f"key {args.key_id} revoked")
        return OK
    print(f"no key with id {args.key_id!r}", file=sys.stderr)
    return NOT_FOUND


def register(sub) -> None:
    p = sub.add_parser("keys", help="create, list or revoke API keys (operator; talks to Redis)",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ks = p.add_subparsers(dest="keys_command", required=True)

    def common(q, examples):
        q.add_argument("--redis-url", help="the service's Redis (default $REDIS_URL, else the local "
                                           "stack's, found in its folder)")
        q.add_argument("--var", metavar="DIR", help="the local stack's folder (default $STIFFLANE_VAR "
                                                    "or the project's var/)")
        q.formatter_class = argparse.RawDescriptionHelpFormatter
        q.epilog = "examples:\n" + examples + "\n\nexit codes: 0 success, 2 bad arguments, 4 not found or Redis error"

    c = ks.add_parser("create", help="create a key; prints it once")
    c.add_argument("owner", help="owner name: a-z, 0-9, '_', '.', '-' (jobs belong to owners)")
    c.add_argument("--role", choices=("user", "admin"), default="user")
    c.add_argument("--label", help="a note shown in 'keys list'")
    common(c, "  stifflane keys create lab-alice\n  export STIFFLANE_KEY=$(stifflane keys create ci --label 'CI runner')")
    c.set_defaults(func=_guard(cmd_create))
    ls = ks.add_parser("list", help="list keys (ids, owners, roles; never the secrets)")
    ls.add_argument("--json", action="store_true")
    common(ls, "  stifflane keys list")
    ls.set_defaults(func=_guard(cmd_list))
    r = ks.add_parser("revoke", help="revoke a key by its id")
    r.add_argument("key_id", help="the 8-hex id shown by 'keys list'")
    common(r, "  stifflane keys revoke 1a2b3c4d")
    r.set_defaults(func=_guard(cmd_revoke))
