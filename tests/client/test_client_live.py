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


# y' = k y^2, y(0) = 1 (k = 1): y = 1 / (1 - t) leaves every bound at t = 1, so a run over
# [0, 2] fails there (step size underflow)
BLOW_UP = Model(title="blow-up", states={"y": {"initial": 1.0, "unit": "mol/L"}},
                parameters={"k": {"value": 1.0, "unit": "L/(mol*s)"}}, ddt={"y": "k * y^2"})


def test_a_failed_jobs_partial_result_comes_as_arrays_with_units(client):
    # before: result() raised ApiError 409 and JobFailed carried nothing to inspect
    spec = job_spec(BLOW_UP, (0, 2), count=21, label="client blow-up")
    with pytest.raises(JobFailed) as info:
        client.run(spec, timeout=180)
    failed = info.value
    assert str(failed).startswith(f"job {failed.job['id']} failed: the step size fell")
    res = failed.result
    assert res is not None and res.partial and res.state == "failed" and res.outcome == "step_underflow"
    assert res.t_reached == pytest.approx(1.0, abs=1e-3) and res.t_end == 2.0
    assert len(res.t) == 11 and res.t.max() <= res.t_reached
    np.testing.assert_allclose(res["y"][:10], 1 / (1 - res.t[:10]), rtol=1e-4)
    assert res.units == {"y": "mol/L", "k": "L/(mol*s)"} and res.unit("y") == "mol/L"
    npz = client.result(failed.job["id"], format="npz")
    assert npz.partial and npz.t_reached == pytest.approx(res.t_reached)
    assert npz.units == {"y": "mol/L"} and npz.outcome == "step_underflow"
    np.testing.assert_array_equal(npz.y, res.y)


def test_a_succeeded_result_is_whole_with_its_units(client):
    res = client.run(job_spec(BLOW_UP, (0, 0.5), count=6), timeout=180)
    assert not res.partial and res.state == "succeeded" and res.t_reached == pytest.approx(0.5)
    assert res.unit("y") == "mol/L" and res.unit("k") == "L/(mol*s)"
