"""Chunk leases live on Redis's clock: a worker with a skewed clock keeps its live chunk."""
import pytest

from jobs.batch_store import BatchStore
from tests.jobs.test_store import SkewedClock

DESIGN = {"kind": "list", "columns": [], "rows": [[]] * 4}
COLUMNS = {"values": [], "summaries": []}


@pytest.fixture
def bstore(store):
    return BatchStore(store.r, store.settings)


@pytest.mark.parametrize("worker_offset,reconciler_offset", [(-60, 0), (0, 60)])
def test_a_chunk_of_a_worker_with_a_skewed_clock_is_not_requeued(bstore, monkeypatch, worker_offset,
                                                                 reconciler_offset):
    import jobs.batch_store

    batch = bstore.create({}, DESIGN, COLUMNS, 4, 2, "skew", "ana")
    assert bstore.next_chunks(batch.id) == [0, 1]
    monkeypatch.setattr(jobs.batch_store, "time", SkewedClock(worker_offset))
    status, attempt = bstore.claim_chunk(batch.id, 0)
    assert status == "claimed" and bstore.heartbeat_chunk(batch.id, 0, attempt) == 0
    monkeypatch.setattr(jobs.batch_store, "time", SkewedClock(reconciler_offset))
    assert bstore.requeue_expired(batch.id) == []  # chunk 0 is live; chunk 1 is not due yet
    assert bstore.claim_chunk(batch.id, 0) == ("running", 0)
    assert bstore.finish_chunk(batch.id, 0, attempt, (2, 0, 0), b"rows") == 1
