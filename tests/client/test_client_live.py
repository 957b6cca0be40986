"""The client against the live stack: the same calls a user makes."""
import json

import numpy as np
import pytest

from stifflane_client import Client, InvalidSpec, JobFailed, Model, WaitTimeout, job_spec
from tests.conftest import example_path

pytestmark = pytest.mark.e2e

DEMO = example_path("jobs", "tarnwhistle_demo.json")

# y' = -k y with k = 3, y(0) = 2: y(t) = 2 exp(-3 t) (closed form)
DECAY = Model(title="decay", states={"y": 2.0}, parameters={"k": {"value": 3.0}}, ddt={"y": "-k * y"})


@pytest.fixture
def client(stack):
    return Client(stack.base)


def test_a_model_in_python_data_runs_and_matches_its_closed_form(client):
    spec = job_spec(DECAY, (0, 2), times=[0, 0.5, 1, 2], rtol=1e-9, atol=1e-12, label="client decay")
    res = client.run(spec, timeout=180)
    assert res.outcome == "succeeded" and res.state_names == ["y"]
    np.testing.assert_allclose(res["y"], 2 * np.exp(-3 * res.t), rtol=1e-7)
    assert res.report["accepted_steps"] > 0


def test_the_demo_file_gives_arrays_dataframe_and_npz_that_agree(client):
    job = client.submit(DEMO)
    job.wait(timeout=180)
    assert job.state == "succeeded", job.view
    res = job.result()
    assert res.y.shape == (121, 5) and res.state_names == ["S", "H2", "P", "Byp", "T"]
    npz = client.result(job.id, format="npz")
    np.testing.assert_array_equal(npz.y, res.y)
    np.testing.assert_array_equal(npz.derived, res.derived)
    frame = res.to_dataframe()
    assert frame.shape == (121, 10)
    assert [j.id for j in client.jobs(limit=200) if j.id == job.id] == [job.id]


def test_an_invalid_spec_raises_with_the_servers_pointers(client):
    spec = json.loads(DEMO.read_text())
    spec["model"]["ddt"]["H2"] = "kLa * (H2_sat - H2x)"
    with pytest.raises(InvalidSpec) as info:
        client.validate(spec)
    assert info.value.errors[0]["pointer"] == "/model/ddt/H2"
    assert info.value.errors[0]["detail"].startswith("position 16:")
    with pytest.raises(InvalidSpec):
        client.submit(spec)


def test_valid_specs_are_checked_without_submitting(client):
    out = client.validate(DEMO)
    assert out["valid"] is True and out["model"]["counts"]["states"] == 5


def test_resubmitting_with_one_idempotency_key_creates_one_job(client):
    spec = job_spec(DECAY, (0, 1), count=3)
    a = client.submit(spec, idempotency_key="client-test-key-1")
    b = client.submit(spec, idempotency_key="client-test-key-1")
    assert a.id == b.id


def test_cancel_and_wait_timeout(client):
    spec = job_spec(Model(states={"u": 1.0, "v": 0.0}, ddt={"u": "v", "v": "-u"}), (0, 1e7), count=3,
                    rtol=1e-12, atol=1e-14, method="dormand_prince_54", label="client long run",
                    limits={"max_steps": 100_000_000, "max_wall_seconds": 120})
    job = client.submit(spec)
    with pytest.raises(WaitTimeout):
        client.wait(job.id, timeout=0.5)
    job.cancel()
    job.wait(timeout=120)
    assert job.state == "cancelled"
    with pytest.raises(JobFailed):
        client.run(spec | {"limits": {"max_steps": 10, "max_wall_seconds": 10}}, timeout=120)
