"""The job lifecycle in Redis: transitions, fencing, immutability, listing."""
import time

import pytest

from jobs import blob
from jobs.keys import new_job_id

SPEC = {"model": {"states": {"a": 1.0}}, "span": [0, 1]}


def make(store, n=1):
    return [store.create(SPEC, title=f"job {i}", method="auto", owner="ana") for i in range(n)]


def test_a_new_job_is_queued_with_revision_one(store):
    (rec,) = make(store)
    assert rec.state == "queued" and rec.rev == 1 and rec.progress == 0.0
    assert store.spec(rec.id) == SPEC


def test_claim_runs_the_job_once(store):
    (rec,) = make(store)
    assert store.claim(rec.id) == ("claimed", 1)
    assert store.claim(rec.id) == ("running", 0)  # a redelivered message does nothing
    assert store.get(rec.id).state == "running"


def test_only_the_current_attempt_can_finish(store):
    (rec,) = make(store)
    _, attempt = store.claim(rec.id)
    assert not store.finish(rec.id, attempt + 1, "succeeded", "succeeded", "", {}, b"x")
    assert store.finish(rec.id, attempt, "succeeded", "succeeded", "ok", {"steps": 3}, b"x")
    assert not store.finish(rec.id, attempt, "failed", "internal_error", "late", {}, b"y")
    final = store.get(rec.id)
    assert final.state == "succeeded" and final.summary == {"steps": 3} and final.progress == 1.0
    assert store.result_blob(rec.id) == b"x"
    assert int(store.r.hget(store.keys.job(rec.id), "writes")) == 1


def test_terminal_states_are_immutable(store):
    (rec,) = make(store)
    store.cancel(rec.id)
    assert store.get(rec.id).state == "cancelled"
    assert store.claim(rec.id) == ("cancelled", 0)
    assert store.cancel(rec.id) == "cancelled"


def test_cancelling_a_running_job_raises_its_flag(store):
    (rec,) = make(store)
    _, attempt = store.claim(rec.id)
    assert store.cancel(rec.id) == "cancelling"
    assert store.heartbeat(rec.id, attempt, 0.5) == 1
    assert store.get(rec.id).cancel_requested


def test_heartbeat_reports_progress_and_fences_stale_attempts(store):
    (rec,) = make(store)
    _, attempt = store.claim(rec.id)
    rev = store.rev(rec.id)
    assert store.heartbeat(rec.id, attempt, 0.25) == 0
    assert store.get(rec.id).progress == 0.25 and store.rev(rec.id) == rev + 1
    assert store.heartbeat(rec.id, attempt, 0.25) == 0
    assert store.rev(rec.id) == rev + 1  # unchanged progress does not change the ETag
    assert store.heartbeat(rec.id, attempt + 1, 0.3) == -1


def test_an_expired_lease_is_requeued_and_claimed_again(store):
    (rec,) = make(store)
    store.claim(rec.id)
    store.r.hset(store.keys.job(rec.id), "lease", time.time() - 1)
    assert store.expired_running() == [rec.id]
    assert store.requeue(rec.id) == 1
    assert store.requeue(rec.id) == 0  # a second reconciler does nothing
    assert store.claim(rec.id) == ("claimed", 2)


def test_a_job_that_kills_its_worker_three_times_fails(store):
    (rec,) = make(store)
    for _ in range(store.settings.max_attempts):
        assert store.claim(rec.id)[0] == "claimed"
        store.r.hset(store.keys.job(rec.id), "lease", time.time() - 1)
        store.requeue(rec.id)
    status, _ = store.claim(rec.id)
    final = store.get(rec.id)
    assert status == "exhausted" and final.state == "failed" and "died" in final.message


def test_listing_is_newest_first_with_cursor_pages(store):
    recs = make(store, 5)
    page1, cursor = store.list("ana", None, 2, None)
    page2, cursor2 = store.list("ana", None, 2, cursor)
    page3, cursor3 = store.list("ana", None, 2, cursor2)
    ids = [r.id for r in page1 + page2 + page3]
    assert ids == [r.id for r in reversed(recs)] and cursor3 is None


def test_listing_filters_by_state_and_skips_expired_records(store):
    a, b, c = make(store, 3)
    store.cancel(b.id)
    store.r.delete(store.keys.job(c.id))  # as if its TTL ran out
    queued, _ = store.list("ana", "queued", 10, None)
    assert [r.id for r in queued] == [a.id]
    everything, _ = store.list("ana", None, 10, None)
    assert [r.id for r in everything] == [b.id, a.id]


def test_job_ids_sort_by_creation_time():
    assert new_job_id(1000.0) < new_job_id(1000.0) < new_job_id() and len(new_job_id()) == 28


def test_result_blobs_round_trip_arrays_and_refuse_non_finite_metadata():
    import numpy as np

    y = np.arange(6.0).reshape(3, 2)
    meta, arrays = blob.decode(blob.encode({"x": float("nan"), "n": np.int64(3)}, {"y": y, "t": np.zeros(0)}))
    assert meta == {"x": None, "n": 3}
    assert np.array_equal(arrays["y"], y) and arrays["t"].shape == (0,)
    with pytest.raises(Exception):
        blob.decode(b"not zlib")


def test_a_redis_that_evicts_keys_is_reported(store):
    # An eviction policy silently drops queued jobs (common practice: noeviction for queues).
    before = store.r.config_get("maxmemory-policy")["maxmemory-policy"]
    try:
        store.r.config_set("maxmemory-policy", "allkeys-lru")
        assert any("noeviction" in p for p in store.durability_problems())
    finally:
        store.r.config_set("maxmemory-policy", before)
    assert store.durability_problems() == []


def test_owners_see_only_their_own_jobs(store):
    (mine,) = make(store)
    theirs = store.create(SPEC, title="other", method="auto", owner="ben")
    assert store.get(theirs.id, owner="ana") is None and store.get(mine.id, owner="ana") is not None
    assert [r.id for r in store.list("ben", None, 10, None)[0]] == [theirs.id]
    assert store.active_count("ana") == 1


def test_every_key_a_job_writes_has_a_ttl(store):
    # Common practice for Redis as a store: TTLs everywhere, noeviction as the policy.
    (rec,) = make(store)
    _, attempt = store.claim(rec.id)
    store.finish(rec.id, attempt, "succeeded", "succeeded", "ok", {}, b"blob")
    keys = list(store.r.scan_iter(match=store.keys.prefix + ":*"))
    assert keys and all(store.r.ttl(k) > 0 for k in keys), [k for k in keys if store.r.ttl(k) <= 0]


def test_queued_jobs_whose_message_is_gone_are_found_once(store):
    (rec,) = make(store)
    assert store.stranded_queued(older_than=3600) == []  # young: still legitimately waiting
    assert store.stranded_queued(older_than=-1) == [rec.id]
    assert store.stranded_queued(older_than=1) == []  # just republished
    store.r.rpush(store.settings.interactive_queue, b"a message")
    assert store.stranded_queued(older_than=-1) == []  # the broker still holds messages
