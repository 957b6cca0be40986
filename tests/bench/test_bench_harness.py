"""The harness records every solver, including the ones that cannot run (bench/run.py)."""
import time

import numpy as np

from bench import peers as P, problems as PR, run, timing


def _ok(problem, rtol, cap):
    return {"status": "ok", "y": np.array(PR.prepare_problem(problem).y0), "message": "",
            "steps": 1, "nfev": 2}


def _boom(problem, rtol, cap):
    raise RuntimeError("solver crashed")


def _slow(problem, rtol, cap):
    return {"status": "timeout", "y": None, "message": f"no result within {cap:g} s"}


def test_missing_crashing_and_timed_out_peers_are_records_with_a_reason(monkeypatch):
    problem = PR.build("arenstorf")  # periodic: the start state is the reference
    monkeypatch.setattr(run, "reference", lambda p, log: {"y": PR.ARENSTORF_Y0, "method": "x",
                                                          "rtol": 0.0})
    peers = [P.Peer("engine/auto", "engine", _ok),
             P.Peer("cvode+numba", "cvode", _ok, available=False, reason="ImportError: sksundae"),
             P.Peer("odeint+numba", "odeint", _boom),
             P.Peer("solve_ivp/RK45", "solve_ivp", _slow)]
    recs, _ = run.run_problem(problem, (1e-4, 1e-6), peers, cap=1.0, budget=0.01, reps=2,
                              log=lambda m: None)
    by = {(r["solver"], r["rtol"]): r for r in recs}
    assert len(recs) == 8
    assert by[("engine/auto", 1e-4)]["status"] == "ok" and by[("engine/auto", 1e-4)]["digits"] == 16
    assert by[("cvode+numba", 1e-6)]["status"] == "unavailable"
    assert "sksundae" in by[("cvode+numba", 1e-6)]["message"]
    assert by[("odeint+numba", 1e-4)]["status"] == "failed"
    assert "solver crashed" in by[("odeint+numba", 1e-4)]["message"]
    assert by[("solve_ivp/RK45", 1e-6)]["status"] == "timeout"
    assert "not run" in by[("solve_ivp/RK45", 1e-6)]["message"]  # skipped after the first


def test_explicit_only_problems_skip_the_jacobian_variants_with_a_reason():
    peer = P.Peer("solve_ivp/Radau+jac", "solve_ivp", _ok)
    assert "no Jacobian" in P.applicable(peer, PR.build("lorenz"))
    assert P.applicable(peer, PR.build("hires")) == ""


def test_timing_keeps_the_median_of_repeats_after_a_warm_up():
    calls = []

    def call():
        calls.append(1)
        time.sleep(0.03)  # slower than MIN_SAMPLED / 2: max_repeats decides
        return {"status": "ok"}
    res = timing.measure(call, budget=10.0, max_repeats=3, jit=True)
    assert len(calls) == 4 and res["repeats"] == 3 and res["seconds"] >= 0.03


def test_fast_runs_repeat_until_enough_time_is_sampled():
    durations = []

    def call():
        t0 = time.perf_counter()
        time.sleep(0.001)
        durations.append(time.perf_counter() - t0)
        return {"status": "ok"}
    res = timing.measure(call, budget=10.0, max_repeats=3, jit=True)
    sampled = sum(durations[1:])  # after the warm-up
    assert 3 < res["repeats"] <= timing.MAX_FAST_REPEATS
    assert sampled >= timing.MIN_SAMPLED * 0.9
