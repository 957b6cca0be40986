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
    store.r.hset(store.keys.job(rec.id), "lease", store.redis_time() - 1)
    assert store.expired_running() == [rec.id]
    assert store.requeue(rec.id) == 1
    assert store.requeue(rec.id) == 0  # a second reconciler does nothing
    assert store.claim(rec.id) == ("claimed", 2)


def test_a_job_that_kills_its_worker_three_times_fails(store):
    (rec,) = make(store)
    for _ in range(store.settings.max_attempts):
        assert store.claim(rec.id)[0] == "claimed"
        store.r.hset(store.keys.job(rec.id), "lease", store.redis_time() - 1)
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


def publisher(store):
    from jobs.queue import Publisher

    return Publisher(store.settings)


def test_queued_jobs_whose_message_is_gone_are_found_once(store):
    (rec,) = make(store)
    assert store.stranded_queued(grace=0) == []  # first sight: marked, not yet republished
    assert store.stranded_queued(grace=3600) == []  # not gone for long enough
    assert store.stranded_queued(grace=0) == [rec.id]
    assert store.stranded_queued(grace=0) == []  # just republished: not again
    store.r.rpush(store.settings.interactive_queue, b"a message")
    assert store.stranded_queued(grace=0) == []  # the broker holds a message we cannot read


def test_a_stranded_job_is_found_behind_a_backlog(store):
    # The sweep used to run only when the broker's queue was empty: under a backlog a job
    # whose message was lost waited indefinitely.
    lost, *waiting = make(store, 6)
    pub = publisher(store)
    for rec in waiting:  # five messages in the broker's list; the first job's message is lost
        pub.publish(rec.id)
    assert store.r.llen(store.settings.interactive_queue) == 5
    assert store.stranded_queued(grace=0) == []
    assert store.stranded_queued(grace=0) == [lost.id]
    for _ in range(3):  # jobs whose message is in the list are never republished
        assert store.stranded_queued(grace=0) == []


def test_a_job_taken_from_the_list_and_claimed_is_not_stranded(store):
    first, second = make(store, 2)
    pub = publisher(store)
    pub.publish(first.id)
    pub.publish(second.id)
    store.r.rpop(store.settings.interactive_queue)  # a worker takes the first message...
    assert store.stranded_queued(grace=0) == []  # ...first seen gone...
    store.claim(first.id)  # ...and claims it: not stranded
    assert store.stranded_queued(grace=0) == []
    assert store.get(first.id).state == "running"


def test_a_requeued_job_is_stranded_only_once_its_new_message_is_gone(store):
    old, new = make(store, 2)
    pub = publisher(store)
    store.claim(old.id)
    store.r.hset(store.keys.job(old.id), "lease", store.redis_time() - 1)
    assert store.requeue(old.id) == 1
    pub.publish(new.id)
    pub.publish(old.id)  # republished after the requeue: behind the newer job's message
    for _ in range(3):
        assert store.stranded_queued(grace=0) == []
    store.r.delete(store.settings.interactive_queue)  # both messages lost (a broker crash)
    assert store.stranded_queued(grace=0) == []
    assert sorted(store.stranded_queued(grace=0)) == sorted([old.id, new.id])


class SkewedClock:
    """A host clock off by ``offset`` seconds, in place of the time module."""

    def __init__(self, offset: float):
        self.offset = offset

    def time(self) -> float:
        return time.time() + self.offset

    def __getattr__(self, name):
        return getattr(time, name)


@pytest.mark.parametrize("worker_offset,reconciler_offset", [(-60, 0), (0, 60), (-60, 60)])
def test_a_worker_with_a_skewed_clock_keeps_its_live_job(store, monkeypatch, worker_offset, reconciler_offset):
    # Leases used to be written and compared with each host's time.time(): a worker whose
    # clock ran 60 s slow (or a reconciler 60 s fast) had its live job requeued.
    import jobs.store

    (rec,) = make(store)
    monkeypatch.setattr(jobs.store, "time", SkewedClock(worker_offset))
    _, attempt = store.claim(rec.id)
    assert store.heartbeat(rec.id, attempt, 0.5) == 0
    monkeypatch.setattr(jobs.store, "time", SkewedClock(reconciler_offset))
    assert store.expired_running() == []
    assert store.requeue(rec.id) == 0
    assert store.get(rec.id).state == "running"
    store.r.hset(store.keys.job(rec.id), "lease", store.redis_time() - 1)  # its worker stops beating
    assert store.expired_running() == [rec.id] and store.requeue(rec.id) == 1
