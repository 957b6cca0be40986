"""The /v1/calibrations contract through Flask's test client, with the starts and the summary
run in-process (as a worker runs them) on real Redis."""
import csv
import dataclasses
import io
import json
import uuid

import pytest

from jobs import accounts
from jobs.calibration_store import CalibrationStore
from tests.service.calibration_specs import K_TRUE, blowup_spec, decay_csv, decay_spec
from worker.run_calibration import reconcile_calibrations, run_unit


@pytest.fixture
def csettings(settings):
    return dataclasses.replace(settings, batch_queue=f"stifflane.test.c.{uuid.uuid4().hex[:8]}", lease_seconds=1.0,
                               batch_stale_seconds=1, calibration_chunk_size=2)


@pytest.fixture
def capp(csettings, store):
    from service import create_app

    return create_app(csettings, store=store)


@pytest.fixture
def cclient(capp):
    return capp.test_client()


@pytest.fixture
def cstore(csettings, store):
    return CalibrationStore(store.r, csettings)


def submit(client, body, **kw):
    return client.post("/v1/calibrations", data=json.dumps(body), content_type="application/json", **kw)


def drain(cstore, cal_id, units=None):
    """Run every published unit in-process, as a worker would, until none is left."""
    queue = list(units if units is not None else range(cstore.get(cal_id).n_chunks))
    ran = []
    while queue:
        unit = queue.pop(0)
        ran.append((unit, run_unit(cstore, lambda c, u: queue.append(u), cal_id, unit)))
    return ran


def test_submit_answers_202_with_a_view_and_writes_no_key_per_start(cclient, cstore):
    r = submit(cclient, decay_spec(starts=50))
    assert r.status_code == 202, r.get_json()
    body = r.get_json()
    assert body["starts"] == 50 and r.headers["Location"] == f"/v1/calibrations/{body['id']}"
    assert body["data"]["rows"] == 7 and body["data"]["points"] == 7 and body["data"]["skipped_cells"] == 0
    view = cclient.get(body["links"]["self"]).get_json()
    assert view["state"] == "queued" and view["stage"] == "starts" and view["chunks"] == 25
    assert view["progress"]["total"] == 50 and view["progress"]["remaining"] == 50
    assert view["progress"]["best_sum_of_squares"] is None and view["unknowns"] == ["k"]
    assert len(cstore.r.keys(cstore.keys.prefix + ":calibration*")) <= 5  # record, leases, indexes


def test_a_first_order_decay_is_fitted_to_its_closed_form(cclient, cstore):
    """Data from k = 0.3 without noise: the estimate is 0.3 to 6 digits."""
    cal_id = submit(cclient, decay_spec()).get_json()["id"]
    drain(cstore, cal_id)
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "succeeded" and view["stage"] == "done", view
    p = view["progress"]
    assert (p["done"], p["failed"], p["remaining"], p["fraction"]) == (4, 0, 0, 1.0)
    assert p["best_sum_of_squares"] < 1e-8 and p["eta_seconds"] == 0.0
    res = cclient.get(f"/v1/calibrations/{cal_id}/result").get_json()
    (k,) = res["unknowns"]
    assert k["name"] == "k" and k["estimate"] == pytest.approx(K_TRUE, rel=1e-6)
    assert k["ci95"][0] <= k["estimate"] <= k["ci95"][1] and k["at_bound"] is False
    assert len(res["starts"]) == 4
    ssq = [s["sum_of_squares"] for s in res["starts"]]
    assert ssq == sorted(ssq) and res["sum_of_squares"] == pytest.approx(min(ssq), abs=1e-8)
    assert res["points"] == 7 and res["dof"] == 6 and "qualified person" in res["caution"]
    (exp,) = res["experiments"]
    assert exp["name"] == "run1" and len(exp["fitted"]["A"]) == 7 and len(exp["residuals"]["A"]) == 7
    assert int(cstore.r.hget(cstore.keys.calibration(cal_id), "writes")) == 3  # 2 chunks + the summary


def test_the_estimate_as_csv_tables_starts_with_the_caution(cclient, cstore):
    cal_id = submit(cclient, decay_spec()).get_json()["id"]
    drain(cstore, cal_id)
    tables = {}
    for which in ("parameters", "starts", "residuals", "correlation"):
        r = cclient.get(f"/v1/calibrations/{cal_id}/result?format=csv&table={which}")
        assert r.status_code == 200 and r.mimetype == "text/csv"
        text = r.get_data(as_text=True)
        assert text.startswith("# caution: ") and "qualified person" in text.splitlines()[0]
        tables[which] = list(csv.DictReader(io.StringIO(text.split("\n", 1)[1])))
    (row,) = tables["parameters"]
    assert row["name"] == "k" and float(row["estimate"]) == pytest.approx(K_TRUE, rel=1e-6)
    assert float(row["ci95_low"]) < float(row["ci95_high"]) and row["at_bound"] == "false"
    assert len(tables["starts"]) == 4 and {"x0_k", "x_k", "status"} <= set(tables["starts"][0])
    assert len(tables["residuals"]) == 7 and tables["residuals"][0]["experiment"] == "run1"
    assert tables["correlation"][0]["k"] in ("1.0", "")
    accept = cclient.get(f"/v1/calibrations/{cal_id}/result", headers={"Accept": "text/csv"})
    assert accept.mimetype == "text/csv"
    assert cclient.get(f"/v1/calibrations/{cal_id}/result?table=fitted").status_code == 400


def test_csv_data_with_empty_cells_are_skipped_and_counted(cclient, cstore):
    spec = decay_spec()
    spec["experiments"] = [{"name": "run1", "span": [0.0, 10.0], "csv": decay_csv(skip=2)}]
    r = submit(cclient, spec)
    assert r.status_code == 202, r.get_json()
    assert r.get_json()["data"]["skipped_cells"] == 2 and r.get_json()["data"]["points"] == 5
    cal_id = r.get_json()["id"]
    drain(cstore, cal_id)
    res = cclient.get(f"/v1/calibrations/{cal_id}/result").get_json()
    assert res["unknowns"][0]["estimate"] == pytest.approx(K_TRUE, rel=1e-6) and res["points"] == 5
    assert cclient.get(f"/v1/calibrations/{cal_id}/spec").get_json()["experiments"][0]["csv"] == decay_csv(skip=2)


def test_progress_shows_starts_done_and_the_best_sum_of_squares_so_far(cclient, cstore):
    cal_id = submit(cclient, decay_spec(starts=6)).get_json()["id"]
    assert run_unit(cstore, lambda c, u: None, cal_id, 0) == "done"
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "running" and view["stage"] == "starts"
    p = view["progress"]
    assert (p["done"] + p["failed"], p["remaining"], p["total"]) == (2, 4, 6)
    assert p["best_sum_of_squares"] is not None and p["best_start"] in (0, 1)
    r = cclient.get(f"/v1/calibrations/{cal_id}/result")
    assert r.status_code == 409 and r.get_json()["state"] == "running"


def test_cancel_settles_waiting_starts_and_a_running_chunk_stops_at_its_next_start(cclient, cstore):
    cal_id = submit(cclient, decay_spec(starts=6)).get_json()["id"]
    status, attempt = cstore.claim_chunk(cal_id, 0)  # a worker holds chunk 0
    assert status == "claimed"
    r = cclient.post(f"/v1/calibrations/{cal_id}/cancel")
    assert r.status_code == 202 and r.get_json()["cancel_requested"] is True
    assert r.get_json()["state"] == "running"  # chunk 0 still runs
    assert cstore.heartbeat_chunk(cal_id, 0, attempt) == 1  # the worker learns of the cancel
    assert cstore.finish_chunk(cal_id, 0, attempt, (1, 0, 1), 0, (0.5, 0), b"x\x9c\x03\x00\x00\x00\x00\x01") == 2
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "cancelled" and view["stage"] == "done"
    assert (view["progress"]["done"], view["progress"]["cancelled"]) == (1, 5)
    r = cclient.get(f"/v1/calibrations/{cal_id}/result")
    assert r.status_code == 409 and r.get_json()["state"] == "cancelled"
    assert drain(cstore, cal_id, [1, 2, 3]) == [(1, "cancelled"), (2, "cancelled"), (3, "done")]
    assert cclient.post(f"/v1/calibrations/{cal_id}/cancel").status_code == 202  # again: no change


def test_cancel_of_a_finished_or_summarising_calibration_is_409(cclient, cstore):
    cal_id = submit(cclient, decay_spec(starts=2)).get_json()["id"]
    assert run_unit(cstore, lambda c, u: None, cal_id, 0) == "done"  # every start in: the summary is due
    r = cclient.post(f"/v1/calibrations/{cal_id}/cancel")
    assert r.status_code == 409 and r.get_json()["type"].endswith("/summarising")
    assert cclient.get(f"/v1/calibrations/{cal_id}").get_json()["stage"] == "summary"
    assert run_unit(cstore, lambda c, u: None, cal_id, 1) == "written"
    r = cclient.post(f"/v1/calibrations/{cal_id}/cancel")
    assert r.status_code == 409 and r.get_json()["state"] == "succeeded"


def test_a_start_whose_solves_fail_is_counted_not_a_crash(cclient, cstore):
    """k >= 1 blows the solution up inside the span: those solves fail, are penalised and
    counted; the calibration still finds k = 0.5 from the other starts."""
    cal_id = submit(cclient, blowup_spec()).get_json()["id"]
    drain(cstore, cal_id)
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "succeeded", view
    res = cclient.get(f"/v1/calibrations/{cal_id}/result").get_json()
    failed_solves = sum(s["failed_solves"] for s in res["starts"])
    assert failed_solves >= 1 and view["progress"]["failed_solves"] == failed_solves
    assert res["unknowns"][0]["estimate"] == pytest.approx(0.5, rel=1e-5)
    assert len(res["starts"]) == 4


def test_when_every_start_fails_the_calibration_fails_with_a_message(cclient, cstore, monkeypatch):
    from calibration import fit

    def broken(problem, index, x0):
        raise RuntimeError("no convergence at all")

    monkeypatch.setattr(fit, "run_start", broken)
    cal_id = submit(cclient, decay_spec(starts=2)).get_json()["id"]
    drain(cstore, cal_id)
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "failed" and view["progress"]["failed"] == 2
    assert "every one of the 2 starts failed" in view["message"] and "no convergence" in view["message"]
    r = cclient.get(f"/v1/calibrations/{cal_id}/result")
    assert r.status_code == 409 and "no convergence" in r.get_json()["detail"]


def test_a_lost_worker_unit_is_requeued_fenced_and_counted_once(cclient, cstore):
    cal_id = submit(cclient, decay_spec(starts=2)).get_json()["id"]
    status, stale_attempt = cstore.claim_chunk(cal_id, 0)
    assert status == "claimed"
    import time

    time.sleep(1.2)  # the lease (1 s in these settings) runs out: the worker is gone
    published = []
    reconcile_calibrations(cstore, lambda c, u: published.append(u))
    assert published == [0]
    drain(cstore, cal_id, published)
    assert cstore.finish_chunk(cal_id, 0, stale_attempt, (2, 0, 0), 0, None, b"") == 0  # fenced out
    view = cclient.get(f"/v1/calibrations/{cal_id}").get_json()
    assert view["state"] == "succeeded" and view["progress"]["done"] == 2
    assert int(cstore.r.hget(cstore.keys.calibration(cal_id), "writes")) == 2


def test_the_same_idempotency_key_returns_the_first_calibration(cclient):
    h = {"Idempotency-Key": "cal-1"}
    first, again = submit(cclient, decay_spec(), headers=h), submit(cclient, decay_spec(), headers=h)
    assert first.status_code == again.status_code == 202
    assert first.get_json()["id"] == again.get_json()["id"] and again.headers["Idempotent-Replayed"] == "true"
    other = submit(cclient, decay_spec(starts=3), headers=h)
    assert other.status_code == 422 and other.get_json()["type"].endswith("/idempotency-mismatch")
    assert len(cclient.get("/v1/calibrations").get_json()["items"]) == 1


def test_list_pages_newest_first_with_a_next_link(cclient):
    ids = [submit(cclient, decay_spec(label=f"c{i}")).get_json()["id"] for i in range(5)]
    seen, url = [], "/v1/calibrations?limit=2"
    while url:
        r = cclient.get(url)
        assert r.status_code == 200
        seen += [v["id"] for v in r.get_json()["items"]]
        link = r.headers.get("Link")
        url = link[1:link.index(">")] if link else None
        assert (r.get_json()["next_cursor"] is None) == (link is None)
    assert seen == ids[::-1]
    assert cclient.get("/v1/calibrations?limit=0").status_code == 400


def test_a_quota_limits_active_calibrations_per_owner(csettings, store):
    from service import create_app

    c = create_app(dataclasses.replace(csettings, max_active_calibrations=1), store=store).test_client()
    assert submit(c, decay_spec()).status_code == 202
    r = submit(c, decay_spec())
    assert r.status_code == 429 and r.headers["Retry-After"]


@pytest.fixture
def secured(csettings, store):
    from service import create_app

    app = create_app(dataclasses.replace(csettings, auth_mode="keys"), store=store)
    keys = {}
    for owner in ("ana", "ben"):
        _, key = accounts.create_key(store.r, store.keys, owner)
        keys[owner] = {"Authorization": f"Bearer {key}"}
    return app, keys


def test_every_calibration_endpoint_is_404_for_another_owner(secured, csettings, store):
    """Walks the URL map: no endpoint that names a calibration serves it to a second key."""
    app, who = secured
    c = app.test_client()
    cal_id = submit(c, decay_spec(), headers=who["ana"]).get_json()["id"]
    drain(CalibrationStore(store.r, csettings), cal_id)
    probed = 0
    for rule in app.url_map.iter_rules():
        if "calibration_id" not in rule.arguments:
            continue
        path = rule.rule.replace("<calibration_id>", cal_id)
        for method in sorted(rule.methods - {"HEAD", "OPTIONS"}):
            r = c.open(path, method=method, headers=who["ben"])
            text = r.get_data(as_text=True)
            assert r.status_code == 404, (method, path, r.status_code)
            assert "decay" not in text and '"state"' not in text, (method, path)
            probed += 1
    assert probed == 4
    assert c.get("/v1/calibrations", headers=who["ben"]).get_json()["items"] == []
    assert c.get(f"/v1/calibrations/{cal_id}/result", headers=who["ana"]).status_code == 200
    assert c.get("/v1/calibrations", headers={}).status_code == 401
