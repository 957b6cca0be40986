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
    return _hit(client, keys.rate(owner, int(now // window)), now, limit, window)


def hit_address(client: redis.Redis, keys: Keys, address: str, limit: int, window: int) -> RateState:
    """The same counter for requests without a valid key, per client address."""
    now = time.time()
    return _hit(client, keys.rate_address(address, int(now // window)), now, limit, window)


def _hit(client: redis.Redis, key: str, now: float, limit: int, window: int) -> RateState:
    slot = int(now // window)
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


# Both scripts run atomically in Redis: a record is created with its TTL in one step, and a
# reply is added only to a record that still exists (HSET on a missing key would create a
# record without TTL that answers 409 for ever).
_BEGIN = """
if redis.call('HSETNX', KEYS[1], 'fingerprint', ARGV[1]) == 1 then
  redis.call('EXPIRE', KEYS[1], ARGV[2])
  return {1}
end
return {0, redis.call('HGET', KEYS[1], 'fingerprint'), redis.call('HGET', KEYS[1], 'reply')}
"""
_FINISH = """
if redis.call('EXISTS', KEYS[1]) == 1 then
  redis.call('HSET', KEYS[1], 'reply', ARGV[1])
  return 1
end
return 0
"""


def idempotency_begin(client: redis.Redis, keys: Keys, owner: str, key: str,
                      print_: str) -> tuple[str, Optional[IdempotentReply]]:
    """Start or look up a request with this Idempotency-Key.

    Returns ('new', None) when the caller should run the request, ('replay', reply)
    for a finished one, ('mismatch', None) when the key was used with another body,
    ('in_flight', None) while the first request is still running.
    """
    rkey = keys.idempotency(owner, key)
    found = client.eval(_BEGIN, 1, rkey, print_, IDEMPOTENCY_TTL)
    if found[0] == 1:
        return "new", None
    stored_print = found[1] if len(found) > 1 else None
    reply = found[2] if len(found) > 2 else None
    if stored_print and stored_print.decode() != print_:
        return "mismatch", None
    if not reply:
        return "in_flight", None
    data = json.loads(reply)
    return "replay", IdempotentReply(data["status"], data["body"], data["headers"])


def idempotency_finish(client: redis.Redis, keys: Keys, owner: str, key: str, reply: IdempotentReply) -> None:
    """Keep the first reply for replays (only while the record lives: it never loses its TTL)."""
    client.eval(_FINISH, 1, keys.idempotency(owner, key),
                json.dumps({"status": reply.status, "body": reply.body, "headers": reply.headers}))


def idempotency_abandon(client: redis.Redis, keys: Keys, owner: str, key: str) -> None:
    """Forget a key whose first request failed before it created anything."""
    client.delete(keys.idempotency(owner, key))
