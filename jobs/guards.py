"""Per-owner request guards kept in Redis: rate windows and Idempotency-Key records.

Shared by every API process, so limits hold across gunicorn workers and hosts.
"""
from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass
from typing import Optional

import redis

from jobs.keys import Keys


@dataclass(frozen=True)
class RateState:
    allowed: bool
    limit: int
    remaining: int
    reset_seconds: int


def hit_rate(client: redis.Redis, keys: Keys, owner: str, limit: int, window: int) -> RateState:
    """Fixed-window counter: ``limit`` requests per ``window`` seconds per owner."""
    now = time.time()
    slot = int(now // window)
    key = keys.rate(owner, slot)
    pipe = client.pipeline(transaction=False)  # one round trip; no MULTI/EXEC on the hot path
    pipe.incr(key)
    pipe.expire(key, 2 * window)
    count, _ = pipe.execute()
    reset = int((slot + 1) * window - now) + 1
    return RateState(count <= limit, limit, max(limit - count, 0), reset)


IDEMPOTENCY_TTL = 24 * 3600


def fingerprint(body: bytes) -> str:
    return hashlib.sha256(body).hexdigest()


@dataclass(frozen=True)
class IdempotentReply:
    status: int
    body: str
    headers: dict


def idempotency_begin(client: redis.Redis, keys: Keys, owner: str, key: str,
                      print_: str) -> tuple[str, Optional[IdempotentReply]]:
    """Start or look up a request with this Idempotency-Key.

    Returns ('new', None) when the caller should run the request, ('replay', reply)
    for a finished one, ('mismatch', None) when the key was used with another body,
    ('in_flight', None) while the first request is still running.
    """
    rkey = keys.idempotency(owner, key)
    if client.hsetnx(rkey, "fingerprint", print_):
        client.expire(rkey, IDEMPOTENCY_TTL)
        return "new", None
    stored_print, reply = client.hmget(rkey, "fingerprint", "reply")
    if stored_print is not None and stored_print.decode() != print_:
        return "mismatch", None
    if reply is None:
        return "in_flight", None
    data = json.loads(reply)
    return "replay", IdempotentReply(data["status"], data["body"], data["headers"])


def idempotency_finish(client: redis.Redis, keys: Keys, owner: str, key: str, reply: IdempotentReply) -> None:
    client.hset(keys.idempotency(owner, key), "reply",
                json.dumps({"status": reply.status, "body": reply.body, "headers": reply.headers}))


def idempotency_abandon(client: redis.Redis, keys: Keys, owner: str, key: str) -> None:
    """Forget a key whose first request failed before it created anything."""
    client.delete(keys.idempotency(owner, key))
