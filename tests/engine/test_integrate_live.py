"""integrate(live=...): a view of what a running integration has reached, for partial results.

Oracle: the harmonic oscillator u' = v, v' = -u from (1, 0) is (cos t, -sin t); the final
Solution of the same run is the reference for what a snapshot holds.
"""
import numpy as np
import pytest

from engine.integrate import CANCELLED, SolverOptions, integrate
from tests.engine import kernels as K

OSC = {"states": {"u": 1.0, "v": 0.0}, "ddt": {"u": "v", "v": "-u"},
       "derived": {"energy": "u^2 + v^2"},
       "events": [{"name": "u_down", "when": "u", "direction": "falling"}]}


def run_with_snapshots(max_rows, snapshots_wanted=3, diagnostics="full"):
    """A long run kept until ``snapshots_wanted`` views were taken, then cancelled."""
    m = K.model(OSC)
    span = 2.0e6
    t_out = np.linspace(0, span, 200_001)
    taken = []

    def live(reached):
        t, y, aux = reached.outputs(max_rows)
        taken.append({"t": t, "y": y, "aux": aux, "t_reached": reached.t, "method": reached.method,
                      "steps": reached.accepted_steps, "events": reached.events(),
                      "history": reached.step_history()})

    def monitor(fraction):
        return len(taken) >= snapshots_wanted

    o = SolverOptions(method="dormand_prince_54", rtol=1e-10, atol=1e-12, max_steps=10**9,
                      event_directions=m.event_directions, event_terminal=m.event_terminal,
                      diagnostics=diagnostics)
    sol = integrate(m.kernel, m.p, m.y0, (0.0, span), t_out, o, monitor=monitor, live=live)
    return sol, taken


def test_snapshots_hold_the_outputs_reached_so_far_thinned_to_the_bound():
    sol, taken = run_with_snapshots(max_rows=50)
    assert sol.outcome == CANCELLED and len(taken) == 3
    for snap in taken:
        t, y = snap["t"], snap["y"]
        assert 1 <= len(t) <= 50 and t[0] == 0.0 and np.all(np.diff(t) > 0)
        assert t[-1] <= snap["t_reached"] <= sol.t_reached
        # the global error grows along the orbit (how far a run gets depends on the machine's
        # speed): a loose sanity bound here; the exact check is against the final result below
        np.testing.assert_allclose(y[:, 0], np.cos(t), atol=1e-3)
        np.testing.assert_allclose(snap["aux"][:, 0], np.sum(y ** 2, axis=1), rtol=1e-12)  # energy = u^2 + v^2
        # every row is a row of the final result (the same run, copied then)
        rows = np.searchsorted(sol.t, t)
        np.testing.assert_array_equal(sol.y[rows], y)
        assert snap["method"] == "dormand_prince_54" and snap["steps"] > 0
        ev_t, ev_i, ev_y = snap["events"]
        assert len(ev_t) == len(ev_i) == len(ev_y) and np.all(ev_t <= snap["t_reached"])
        np.testing.assert_allclose(ev_t, np.pi / 2 + 2 * np.pi * np.arange(len(ev_t)), atol=1e-3)
        assert set(snap["history"]) >= {"t", "h", "method"} and len(snap["history"]["t"]) > 0
    later, earlier = taken[-1], taken[0]
    assert later["t_reached"] > earlier["t_reached"] and later["steps"] > earlier["steps"]
    assert len(sol.t) > 50  # the final result itself is never thinned


def test_a_snapshot_is_a_copy_not_a_view_of_the_run():
    sol, taken = run_with_snapshots(max_rows=10_000, snapshots_wanted=2)
    first, second = taken
    assert len(second["t"]) > len(first["t"])
    np.testing.assert_array_equal(second["t"][:len(first["t"])], first["t"])
    # the run's arrays went back to the pool: the snapshots own their values
    for snap in taken:
        assert not np.shares_memory(snap["y"], sol.y) and not np.shares_memory(snap["t"], sol.t)
        np.testing.assert_allclose(snap["y"][:, 0], np.cos(snap["t"]), atol=1e-3)


def test_lean_runs_have_no_step_history_in_their_snapshots():
    _, taken = run_with_snapshots(max_rows=10, snapshots_wanted=1, diagnostics="counts")
    assert taken[0]["history"] is None


@pytest.mark.parametrize("with_monitor", [False, True])
def test_callers_without_live_or_with_only_live_still_work(with_monitor):
    m = K.model({"states": {"y": 1.0}, "ddt": {"y": "-y"}})
    calls = []
    sol = integrate(m.kernel, m.p, m.y0, (0.0, 1.0), np.linspace(0, 1, 5), SolverOptions(),
                    monitor=(lambda f: calls.append(f) or False) if with_monitor else None)
    np.testing.assert_allclose(sol.y[:, 0], np.exp(-sol.t), rtol=1e-5)
    sol2 = integrate(m.kernel, m.p, m.y0, (0.0, 1.0), np.linspace(0, 1, 5), SolverOptions(),
                     live=lambda reached: None)
    np.testing.assert_array_equal(sol.y, sol2.y)
