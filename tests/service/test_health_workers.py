"""/v1/health tells how many processes each live worker runs (its concurrency)."""
import pytest
import requests


@pytest.mark.e2e
def test_health_reports_each_workers_concurrency(stack):
    workers = requests.get(stack.base + "/v1/health", timeout=10).json()["workers"]
    assert workers, "the stack's worker has reported in (Stack waits for it)"
    assert [w["concurrency"] for w in workers] == [1] * len(workers)  # tests/stack.py starts them with -c 1
