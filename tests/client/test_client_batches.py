"""Batches through the client on the live stack: submit, wait, table as arrays, statistics."""
import numpy as np
import pytest

from stifflane_client import Client
from tests.client.batch_specs import BLOWUP, exact_final

pytestmark = pytest.mark.e2e


def test_a_batch_runs_and_its_failed_member_is_data(stack):
    client = Client(stack.base)
    b = client.submit_batch(BLOWUP)
    done = client.wait_batch(b.id, timeout=180)
    assert done.state == "succeeded" and done.progress["total"] == 4
    table = client.batch_table(b.id)
    assert list(table.index) == [0, 1, 2, 3] and table.complete
    ok = np.array([o == "succeeded" for o in table.outcome])
    assert ok.tolist() == [True, True, True, False]
    k = table["k"]
    np.testing.assert_allclose(table["final_y"][ok], [exact_final(v) for v in k[ok]], rtol=1e-6)
    (index, outcome, message), = table.failed()
    assert index == 3 and outcome != "succeeded" and message
    frame = table.to_dataframe()
    assert list(frame.columns[:3]) == ["k", "final_y", "max_y"]
    stats = client.batch_statistics(b.id)
    assert stats["summaries"]["final_y"]["count"] == 3
    assert b.id in [x.id for x in client.batches(limit=50)]
