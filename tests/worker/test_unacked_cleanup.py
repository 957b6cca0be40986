"""Messages that killed workers had taken leave the broker's unacknowledged set once their
job no longer needs them (instead of coming back as duplicates after the visibility timeout).

Messages are published by Celery and taken by kombu exactly as a worker takes them
(``basic_get`` without acknowledgement writes the ``unacked`` hash and ``unacked_index``).
"""
import dataclasses
import time
import uuid

import pytest
from kombu import Connection, Exchange, Queue

from jobs import messages
from jobs.batch_store import BatchStore
from jobs.queue import Publisher
from worker.reconciler import clear_unacked

SPEC = {"model": {"states": {"a": 1.0}}, "span": [0, 1]}


@pytest.fixture
def ustore(settings):
    from jobs.store import JobStore

    return JobStore.connect(dataclasses.replace(settings, batch_queue=f"stifflane.test.b.{uuid.uuid4().hex[:8]}"))


@pytest.fixture(autouse=True)
def dead_workers():
    yield
    while DEAD:
        DEAD.pop().close()


DEAD = []  # connections of "killed" workers: they never restore or acknowledge


def take(store, queue_name):
    """A worker takes the next message of ``queue_name`` and never acknowledges it (then dies)."""
    conn = Connection(store.settings.redis_url)
    channel = conn.channel()
    channel.do_restore = False  # a killed worker restores nothing
    DEAD.append(conn)
    queue = Queue(queue_name, Exchange(queue_name), queue_name)
    message = queue(channel).get(no_ack=False)
    assert message is not None
    time.sleep(0.01)  # distinct delivery times
    return message.delivery_tag


def test_unacknowledged_messages_of_settled_requeued_or_reclaimed_work_are_removed(ustore):
    store, pub = ustore, Publisher(ustore.settings)
    jobs_q, batch_q = store.settings.interactive_queue, store.settings.batch_queue
    done, queued, reclaimed, live = (store.create(SPEC, title="t", method="auto", owner="ana") for _ in range(4))
    tags = {}
    for rec in (done, queued, reclaimed):
        pub.publish(rec.id)
        tags[rec.id] = take(store, jobs_q)
    _, attempt = store.claim(done.id)
    store.finish(done.id, attempt, "succeeded", "succeeded", "ok", {}, b"x")
    store.claim(reclaimed.id)  # its first worker dies; the job is requeued and taken again
    store.r.hset(store.keys.job(reclaimed.id), "lease", store.redis_time() - 1)
    assert store.requeue(reclaimed.id) == 1
    pub.publish(reclaimed.id)
    second = take(store, jobs_q)
    store.claim(reclaimed.id)
    pub.publish(live.id)  # a live worker runs this one
    live_tag = take(store, jobs_q)
    store.claim(live.id)

    batches = BatchStore(store.r, store.settings)
    batch = batches.create({}, {"kind": "list", "columns": [], "rows": [[]] * 2}, {"values": [], "summaries": []},
                           2, 1, "b", "ana")
    assert batches.next_chunks(batch.id) == [0, 1]
    for chunk in (0, 1):
        pub.publish_chunk(batch.id, chunk)
    chunk_tags = [take(store, batch_q) for _ in (0, 1)]
    _, a0 = batches.claim_chunk(batch.id, 0)
    batches.finish_chunk(batch.id, 0, a0, (1, 0, 0), b"rows")  # chunk 0 done; chunk 1 still running
    batches.claim_chunk(batch.id, 1)

    foreign = Publisher(dataclasses.replace(store.settings, interactive_queue="someone.else." + uuid.uuid4().hex))
    foreign.publish(done.id)
    foreign_tag = take(store, foreign.settings.interactive_queue)

    before = set(store.r.hkeys(messages.UNACKED))
    removed = clear_unacked(store, batches)
    after = set(store.r.hkeys(messages.UNACKED))
    gone = {t.encode() if isinstance(t, str) else t for t in
            (tags[done.id], tags[queued.id], tags[reclaimed.id], chunk_tags[0])}
    kept = {t.encode() if isinstance(t, str) else t for t in (second, live_tag, chunk_tags[1], foreign_tag)}
    assert removed == 4 and gone <= before and not gone & after and kept <= after
    assert not gone & {m for m, _ in store.r.zrange(messages.UNACKED_INDEX, 0, -1, withscores=True)}
    assert clear_unacked(store, batches) == 0  # nothing more to do
    store.r.hdel(messages.UNACKED, foreign_tag)
    store.r.zrem(messages.UNACKED_INDEX, foreign_tag)


def test_messages_name_their_job_or_chunk_and_pickles_are_never_read(ustore):
    pub = Publisher(ustore.settings)
    (rec,) = [ustore.create(SPEC, title="t", method="auto", owner="ana")]
    pub.publish(rec.id)
    pub.publish_chunk(rec.id, 3)
    envelope = ustore.r.lindex(ustore.settings.interactive_queue, -1)
    assert messages.job_id_of(envelope) == rec.id and messages.chunk_of(envelope) is None
    assert messages.chunk_of(ustore.r.lindex(ustore.settings.batch_queue, -1)) == (rec.id, 3)
    pickled = envelope.replace(b'"application/json"', b'"application/x-python-serialize"')
    assert messages.job_id_of(pickled) is None and messages.job_id_of(b"not json") is None


def test_a_settled_calibration_units_unacknowledged_message_is_removed(ustore):
    """A calibration unit taken by a worker that then died: once the unit is settled (here by
    another attempt), its message leaves the unacknowledged set; a running unit's stays."""
    from jobs.calibration_store import CalibrationStore

    store, pub = ustore, Publisher(ustore.settings)
    cals = CalibrationStore(store.r, store.settings)
    rec = cals.create({"spec": 1}, {}, ["k"], starts=4, chunk_size=2, seed=0, title="t", owner="ana")
    pub.publish_calibration(rec.id, 0)
    dead_tag = take(store, store.settings.batch_queue)
    pub.publish_calibration(rec.id, 1)
    live_tag = take(store, store.settings.batch_queue)
    assert messages.calibration_unit_of(messages.unacked_entry(store.r.hget(messages.UNACKED, dead_tag))[0]) == (
        rec.id, 0)
    _, attempt = cals.claim_chunk(rec.id, 0)
    assert cals.finish_chunk(rec.id, 0, attempt, (2, 0, 0), 0, (1.0, 0), b"") == 1
    cals.claim_chunk(rec.id, 1)  # running: its newest message may be its live worker's
    assert clear_unacked(store, BatchStore(store.r, store.settings), calibrations=cals) == 1
    assert store.r.hexists(messages.UNACKED, live_tag) and not store.r.hexists(messages.UNACKED, dead_tag)
