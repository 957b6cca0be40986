"""Idempotency records and rate windows in a real Redis: no record may ever lack a TTL."""
from __future__ import annotations

import redis

from jobs import guards


class DiesAfter(redis.Redis):
    """A real connection whose process 'dies' after ``n`` commands: every later command fails.

    It stands for a crash of the API process between two commands, which cannot be timed
    from outside.
    """

    def __init__(self, n: int, **kwargs):
        super().__init__(**kwargs)
        self.left = n

    def execute_command(self, *args, **options):
        if self.left <= 0:
            raise redis.ConnectionError("process died")
        self.left -= 1
        return super().execute_command(*args, **options)


def _keys_without_ttl(r: redis.Redis, prefix: str) -> list[bytes]:
    return [k for k in r.scan_iter(match=f"{prefix}:*") if r.ttl(k) == -1]


def test_a_crash_right_after_the_first_command_leaves_no_record_without_ttl(store, redis_server):
    for n in range(1, 4):
        dying = DiesAfter(n, port=redis_server.port)
        try:
            guards.idempotency_begin(dying, store.keys, "owner", f"key-{n}", "print")
        except redis.ConnectionError:
            pass
    assert _keys_without_ttl(store.r, store.keys.prefix) == []


def test_finishing_a_record_that_expired_creates_nothing(store):
    r, keys = store.r, store.keys
    assert guards.idempotency_begin(r, keys, "owner", "k", "print") == ("new", None)
    assert 0 < r.ttl(keys.idempotency("owner", "k")) <= guards.IDEMPOTENCY_TTL
    r.delete(keys.idempotency("owner", "k"))  # what the 24 h TTL does
    guards.idempotency_finish(r, keys, "owner", "k", guards.IdempotentReply(202, "{}", {}))
    assert r.exists(keys.idempotency("owner", "k")) == 0
    assert _keys_without_ttl(r, keys.prefix) == []


def test_begin_then_finish_then_replay_keeps_the_ttl(store):
    r, keys = store.r, store.keys
    assert guards.idempotency_begin(r, keys, "o", "k", "p") == ("new", None)
    assert guards.idempotency_begin(r, keys, "o", "k", "p") == ("in_flight", None)
    assert guards.idempotency_begin(r, keys, "o", "k", "other") == ("mismatch", None)
    guards.idempotency_finish(r, keys, "o", "k", guards.IdempotentReply(202, '{"id": 1}', {"Location": "/x"}))
    status, reply = guards.idempotency_begin(r, keys, "o", "k", "p")
    assert status == "replay" and reply.status == 202 and reply.headers == {"Location": "/x"}
    assert r.ttl(keys.idempotency("o", "k")) > 0
