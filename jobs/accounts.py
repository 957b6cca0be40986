"""API keys: random secrets shown once, stored only as SHA-256 digests.

A key is ``slk_<id>_<secret>``: ``id`` (8 hex) names the key in lists and
revocation, ``secret`` carries 256 random bits. Because the secret is random
(not a password), one SHA-256 is the usual storage; lookups go by digest and
the stored digest is compared in constant time.
"""
from __future__ import annotations

import hashlib
import hmac
import re
import secrets
import time
from dataclasses import dataclass
from typing import Optional

import redis

from jobs.keys import Keys

ROLES = ("user", "admin")
OWNER_RE = re.compile(r"^[a-z0-9][a-z0-9_.-]{0,63}$")
_KEY_RE = re.compile(r"^slk_([0-9a-f]{8})_([A-Za-z0-9_-]{43})$")


@dataclass(frozen=True)
class Principal:
    owner: str
    role: str
    key_id: str

    @property
    def is_admin(self) -> bool:
        return self.role == "admin"


def digest(key: str) -> str:
    return hashlib.sha256(key.encode()).hexdigest()


def create_key(client: redis.Redis, keys: Keys, owner: str, role: str = "user",
               label: str = "") -> tuple[str, str]:
    """Create a key for ``owner``; returns (key_id, full key). The key is not stored."""
    if not OWNER_RE.match(owner):
        raise ValueError("owner: 1-64 characters from a-z, 0-9, '_', '.', '-', starting alphanumeric")
    if role not in ROLES:
        raise ValueError(f"role must be one of {', '.join(ROLES)}")
    key_id = secrets.token_hex(4)
    key = f"slk_{key_id}_{secrets.token_urlsafe(32)}"
    d = digest(key)
    pipe = client.pipeline(transaction=True)
    pipe.hset(keys.api_key(d), mapping={"owner": owner, "role": role, "id": key_id,
                                        "label": label, "created": repr(time.time()), "digest": d})
    pipe.hset(keys.api_key_ids(), key_id, d)
    pipe.execute()
    return key_id, key


def authenticate(client: redis.Redis, keys: Keys, key: str) -> Optional[Principal]:
    """The principal holding ``key``, or None."""
    if not _KEY_RE.match(key or ""):
        return None
    d = digest(key)
    owner, role, key_id, stored = client.hmget(keys.api_key(d), "owner", "role", "id", "digest")
    if stored is None or not hmac.compare_digest(stored.decode(), d):
        return None
    return Principal(owner=owner.decode(), role=role.decode(), key_id=key_id.decode())


def list_keys(client: redis.Redis, keys: Keys) -> list[dict]:
    out = []
    for key_id, d in sorted(client.hgetall(keys.api_key_ids()).items()):
        rec = client.hgetall(keys.api_key(d.decode()))
        if rec:
            out.append({k.decode(): v.decode() for k, v in rec.items() if k != b"digest"})
    return out


def revoke_key(client: redis.Redis, keys: Keys, key_id: str) -> bool:
    d = client.hget(keys.api_key_ids(), key_id)
    if d is None:
        return False
    pipe = client.pipeline(transaction=True)
    pipe.delete(keys.api_key(d.decode()))
    pipe.hdel(keys.api_key_ids(), key_id)
    pipe.execute()
    return True
