"""One job from HTTP to result on real processes: gunicorn API, Celery worker, Redis."""
import io
import random
import time

import numpy as np
import pytest
import redis
import requests
from scipy.linalg import expm

pytestmark = pytest.mark.e2e

# A linear system y' = A y with eigenvalues -1, -10 and -1e4 (chosen here; stiff ratio 1e4).
# Oracle: y(t) = expm(A t) y0 (scipy.linalg.expm).
EIG = np.array([-1.0, -10.0, -1.0e4])
V = np.array([[1.0, 1.0, 0.0], [0.0, 1.0, 1.0], [1.0, 0.0, 1.0]])
A = V @ np.diag(EIG) @ np.linalg.inv(V)
Y0 = np.array([1.0, 0.5, 0.25])
NAMES = ["x", "y", "z"]


def linear_spec(rtol=1e-8, atol=1e-12, times=None, method="auto"):
    ddt = {}
    for i, name in enumerate(NAMES):
        terms = [f"({float(A[i, j])!r})*{NAMES[j]}" for j in range(3)]
        ddt[name] = " + ".join(terms)
    return {
        "label": "linear 3x3 (e2e)",
        "model": {"title": "linear test system", "states": dict(zip(NAMES, Y0.tolist())), "ddt": ddt},
        "span": [0.0, 2.0],
        "output": {"times": times or [0.0, 0.001, 0.01, 0.1, 0.5, 1.0, 2.0]},
        "tolerance": {"rtol": rtol, "atol": atol},
        "method": method,
    }


def oscillator_span(seconds: float) -> float:
    """The span over which LONG takes about ``seconds`` on this machine (measured here)."""
    from engine.integrate import SolverOptions, integrate
    from engine.model import prepare

    m = prepare(LONG["model"])
    started = time.perf_counter()
    integrate(m.kernel, m.p, m.y0, (0.0, 2000.0), np.array([0.0, 2000.0]),
              SolverOptions(method="dormand_prince_54", rtol=1e-12, atol=1e-14, max_steps=10**8))
    return 2000.0 * seconds / max(time.perf_counter() - started, 1e-3)


# A harmonic oscillator over many periods at tight tolerance: a deliberately long job.
# It runs on the interpreter, as oscillator_span measures it.
LONG = {
    "label": "long oscillator (e2e)",
    "model": {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"}},
    "span": [0.0, 1.0e7], "output": {"count": 3}, "tolerance": {"rtol": 1e-12, "atol": 1e-14},
    "method": "dormand_prince_54", "limits": {"max_steps": 100_000_000, "max_wall_seconds": 120},
    "machine_code": "never",
}


def test_a_job_runs_from_submit_to_result_and_matches_expm(stack):
    job_id = stack.submit(linear_spec())
    view = stack.wait(job_id)
    assert view["state"] == "succeeded", view
    assert view["progress"] == 1.0 and view["digest"] is not None
    result = requests.get(f"{stack.base}/v1/jobs/{job_id}/result", timeout=10).json()
    t = np.array(result["times"])
    y = np.column_stack([result["states"][n] for n in NAMES])
    exact = np.array([expm(A * ti) @ Y0 for ti in t])
    err = np.abs(y - exact) / (1e-12 + 1e-8 * np.abs(exact))
    assert err.max() < 10  # within 10x of the requested tolerance (mixed error units)


def test_results_come_as_csv_and_npz_by_negotiation(stack):
    job_id = stack.submit(linear_spec())
    stack.wait(job_id)
    url = f"{stack.base}/v1/jobs/{job_id}/result"
    csv = requests.get(url, headers={"Accept": "text/csv"}, timeout=10)
    assert csv.headers["Content-Type"].startswith("text/csv")
    caution, header, *rows = csv.text.strip().splitlines()
    assert caution.startswith("# caution: Numerical results are approximations")
    assert header.split(",")[:4] == ["t", *NAMES] and len(rows) == 7
    npz = requests.get(url + "?format=npz", timeout=10)
    data = np.load(io.BytesIO(npz.content), allow_pickle=False)
    assert data["y"].shape == (7, 3) and list(data["state_names"]) == NAMES
    assert str(data["caution"]).startswith("Numerical results are approximations")


def test_a_running_job_stops_within_two_seconds_of_cancel(stack):
    job_id = stack.submit(LONG)
    stack.wait(job_id, states=("running",), timeout=60)
    time.sleep(0.5)
    asked = time.time()
    r = requests.post(f"{stack.base}/v1/jobs/{job_id}/cancel", timeout=10)
    assert r.status_code == 202 and r.json()["cancel_requested"]
    view = stack.wait(job_id, timeout=10)
    assert view["state"] == "cancelled"
    took = time.time() - asked
    print(f"figure: cancel of a running job took effect in {took:.2f} s (target 2 s)")
    # the 2 s target is a figure, printed above; this bound only catches a cancel that is
    # ignored, with room for a loaded 2-core CI machine
    assert took < 15


def test_a_job_asking_for_machine_code_gets_it_and_the_same_answer(stack):
    spec = dict(linear_spec(), machine_code="always")
    view = stack.wait(stack.submit(spec))
    assert view["state"] == "succeeded", view
    assert view["digest"]["machine_code"]["used"] is True
    result = requests.get(f"{stack.base}/v1/jobs/{view['id']}/result", timeout=10).json()
    t = np.array(result["times"])
    y = np.column_stack([result["states"][n] for n in NAMES])
    exact = np.array([expm(A * ti) @ Y0 for ti in t])  # oracle: scipy.linalg.expm
    assert (np.abs(y - exact) / (1e-12 + 1e-8 * np.abs(exact))).max() < 10
    r = requests.post(f"{stack.base}/v1/jobs", json=dict(spec, machine_code="sometimes"), timeout=10)
    assert r.status_code == 422 and "machine_code" in r.text


def test_a_long_job_moves_to_machine_code_midway(stack):
    # about 2.5 s on the interpreter: past engine.integrate.TIER_UP_SECONDS (1 s); the
    # first calibration call also loads compiled code, so the second one is the measure
    oscillator_span(1.0)
    # a frequency this host has not compiled before (machine code is kept on disk), so the
    # run starts on the interpreter: u' = (1 + e) v, v' = -u, exact u = cos(sqrt(1 + e) t)
    e = random.randint(1, 10**6) * 1e-12
    model = {"title": "long oscillator (tier-up e2e)", "states": {"u": 1.0, "v": 0.0},
             "ddt": {"u": f"{1 + e!r}*v", "v": "-u"}}
    spec = dict(LONG, span=[0.0, oscillator_span(2.5)], machine_code="auto",
                label="long oscillator, tier-up (e2e)", model=model)
    view = stack.wait(stack.submit(spec), timeout=120)
    assert view["state"] == "succeeded", view
    mc = view["digest"]["machine_code"]
    assert mc["used"] is True and "compiled after" in mc["reason"], mc
    result = requests.get(f"{stack.base}/v1/jobs/{view['id']}/result", timeout=10).json()
    t_end = result["times"][-1]
    assert abs(result["states"]["u"][-1] - np.cos(np.sqrt(1 + e) * t_end)) < 1e-6


def test_a_bad_spec_is_refused_and_never_queued(stack):
    before = requests.get(f"{stack.base}/v1/jobs?limit=200", timeout=10).json()["items"]
    spec = linear_spec()
    spec["model"]["ddt"]["x"] = "__import__('os').system('id')"
    r = requests.post(f"{stack.base}/v1/jobs", json=spec, timeout=10)
    assert r.status_code == 422 and r.headers["Content-Type"] == "application/problem+json"
    after = requests.get(f"{stack.base}/v1/jobs?limit=200", timeout=10).json()["items"]
    assert len(after) == len(before)


def test_kill_9_of_the_worker_mid_job_then_restart_finishes_the_job_once(stack):
    spec = dict(LONG, span=[0.0, oscillator_span(3.0)], label="killed mid-run (e2e)")
    job_id = stack.submit(spec)
    stack.wait(job_id, states=("running",), timeout=60)
    stack.kill_worker()
    stack.start_worker()
    view = stack.wait(job_id, timeout=120)
    assert view["state"] == "succeeded", view
    assert view["attempt"] == 2
    r = requests.get(f"{stack.base}/v1/jobs/{job_id}/result?format=json", timeout=10)
    assert r.ok
    # exactly one terminal write (the fenced finish counts its writes)
    db = redis.Redis.from_url(stack.env["REDIS_URL"])
    assert int(db.hget(f"{stack.env['STIFFLANE_KEY_PREFIX']}:job:{job_id}", "writes")) == 1


def test_events_located_in_a_job_come_back_with_the_result(stack):
    # first-order decay a' = -k a, a(0) = 1: a falls through 0.5 at t = ln 2 / k (analytic)
    k = 3.0
    spec = {"model": {"states": {"a": 1.0}, "parameters": {"k": k}, "ddt": {"a": "-k*a"},
                      "events": [{"name": "half_gone", "when": "a - 0.5", "direction": "falling"}]},
            "span": [0.0, 2.0], "output": {"count": 5}, "tolerance": {"rtol": 1e-8, "atol": 1e-12}}
    job_id = stack.submit(spec)
    assert stack.wait(job_id)["state"] == "succeeded"
    events = requests.get(f"{stack.base}/v1/jobs/{job_id}/result", timeout=10).json()["events"]
    assert [e["name"] for e in events] == ["half_gone"]
    assert abs(events[0]["t"] - np.log(2) / k) < 1e-6
