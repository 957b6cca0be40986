"""The /v1/batches contract through Flask's test client, with chunks run in-process on real Redis."""
import dataclasses
import io
import json
import time
import uuid

import numpy as np
import pytest

from jobs import accounts
from jobs.batch_store import BatchStore
from worker.run_batch import reconcile_batches, run_chunk

# y' = -k y + a y^2: pure decay for a = 0; for a > k (y0 = 1) the solution blows up at
# t = ln(a / (a - k)) / k, inside the span for a = 10, k = 1 (t ~ 0.105): that member fails.
MODEL = {"title": "decay with optional blow-up", "states": {"y": 1.0},
         "parameters": {"k": 1.0, "a": 0.0}, "ddt": {"y": "-k*y + a*y^2"}}
BASE = {"model": MODEL, "span": [0.0, 2.0], "output": {"count": 5},
        "tolerance": {"rtol": 1e-8, "atol": 1e-12}}
SUMS = [{"kind": "final", "of": "y"}, {"kind": "integral", "of": "y"},
        {"kind": "crossing", "of": "y", "level": 0.5, "when": "below", "name": "half_life"}]
PROBLEM = "application/problem+json"


@pytest.fixture
def bsettings(settings):
    return dataclasses.replace(settings, batch_queue=f"stifflane.test.b.{uuid.uuid4().hex[:8]}",
                               max_batch_members=1000, lease_seconds=1.0,
                               batch_stale_seconds=1)


@pytest.fixture
def bapp(bsettings, store):
    from service import create_app

    return create_app(bsettings, store=store)


@pytest.fixture
def bclient(bapp):
    return bapp.test_client()


@pytest.fixture
def bstore(bsettings, store):
    return BatchStore(store.r, bsettings)


def submit(client, body, **kw):
    return client.post("/v1/batches", data=json.dumps(body), content_type="application/json", **kw)


def grid_batch(k_values, chunk_size=4, **extra):
    return {"label": "decay grid", "base": BASE, "grid": {"parameters": {"k": k_values}},
            "summaries": SUMS, "chunk_size": chunk_size, **extra}


def drain(bstore, batch_id, published=None):
    """Run every published chunk in-process, as a worker would, until none is left."""
    queue = list(published if published is not None else range(bstore.get(batch_id).n_chunks))
    ran = []
    while queue:
        chunk = queue.pop(0)
        ran.append((chunk, run_chunk(bstore, lambda b, c: queue.append(c), batch_id, chunk)))
    return ran


def test_submit_answers_202_and_writes_no_key_per_member(bclient, bstore):
    r = submit(bclient, grid_batch({"from": 0.1, "to": 10, "count": 1000, "spacing": "log"}, 50))
    assert r.status_code == 202, r.get_json()
    body = r.get_json()
    assert body["members"] == 1000 and r.headers["Location"] == f"/v1/batches/{body['id']}"
    view = bclient.get(f"/v1/batches/{body['id']}").get_json()
    assert view["state"] == "queued" and view["chunks"] == 20
    assert view["progress"]["total"] == 1000 and view["progress"]["remaining"] == 1000
    assert view["columns"] == {"values": ["k"], "summaries": ["final_y", "integral_y", "half_life"]}
    keys = bstore.r.keys(bstore.keys.prefix + ":batch*")
    assert len(keys) <= 5  # record, leases, owner index, active set, active owners


def test_a_grid_batch_runs_to_a_complete_table_that_matches_the_analytic_solution(bclient, bstore):
    ks = [0.5, 1.0, 2.0, 4.0, 8.0]
    batch_id = submit(bclient, grid_batch(ks, chunk_size=2)).get_json()["id"]
    drain(bstore, batch_id)
    view = bclient.get(f"/v1/batches/{batch_id}").get_json()
    assert view["state"] == "succeeded" and view["progress"]["succeeded"] == 5
    assert view["progress"]["eta_seconds"] == 0.0
    table = bclient.get(f"/v1/batches/{batch_id}/table").get_json()
    assert table["complete"] and table["rows"] == 5
    cols = table["columns"]
    k = np.array(cols["values"]["k"])
    assert k.tolist() == ks and cols["index"] == list(range(5))
    # analytic: y = exp(-k t); integral (1 - exp(-2k))/k; y = 0.5 at ln 2 / k
    assert np.allclose(cols["summaries"]["final_y"], np.exp(-2 * k), rtol=1e-6)
    assert np.allclose(cols["summaries"]["integral_y"], (1 - np.exp(-2 * k)) / k, rtol=1e-4)
    half = np.array([np.nan if v is None else v for v in cols["summaries"]["half_life"]])
    want = np.where(np.log(2) / k <= 2.0, np.log(2) / k, np.nan)
    assert np.allclose(half, want, rtol=1e-3, equal_nan=True)  # k = 0.5 never halves in the span
    assert set(cols["outcome"]) == {"succeeded"}
    assert int(bstore.r.hget(bstore.keys.batch(batch_id), "writes")) == 3  # one write per chunk


def test_a_failing_member_is_a_row_with_its_outcome_and_the_rest_complete(bclient, bstore):
    body = {"base": BASE, "members": [{"parameters": {"a": 0.0}}, {"parameters": {"a": 10.0}},
                                      {"parameters": {"k": 3.0}}], "summaries": SUMS}
    batch_id = submit(bclient, body).get_json()["id"]
    drain(bstore, batch_id)
    view = bclient.get(f"/v1/batches/{batch_id}").get_json()
    assert view["state"] == "succeeded"
    assert (view["progress"]["succeeded"], view["progress"]["failed"]) == (2, 1)
    cols = bclient.get(f"/v1/batches/{batch_id}/table").get_json()["columns"]
    assert cols["outcome"][0] == cols["outcome"][2] == "succeeded"
    assert cols["outcome"][1] in ("step_underflow", "non_finite", "newton_failure") and cols["message"][1]
    assert cols["summaries"]["final_y"][1] is None
    # a list member keeps the base value of what it does not set
    assert cols["values"]["a"] == [0.0, 10.0, None] and cols["values"]["k"] == [None, None, 3.0]
    stats = bclient.get(f"/v1/batches/{batch_id}/statistics").get_json()
    assert stats["outcomes"]["succeeded"] == 2 and stats["summaries"]["final_y"]["count"] == 2


def test_exports_as_csv_and_npz(bclient, bstore):
    batch_id = submit(bclient, grid_batch([1.0, 2.0, 3.0], trajectories=True)).get_json()["id"]
    drain(bstore, batch_id)
    csv = bclient.get(f"/v1/batches/{batch_id}/table?format=csv")
    lines = csv.get_data(as_text=True).splitlines()
    assert lines[0].startswith("# caution: Numerical results are approximations")
    assert lines[1] == "index,k,final_y,integral_y,half_life,outcome,message" and len(lines) == 5
    npz = np.load(io.BytesIO(bclient.get(f"/v1/batches/{batch_id}/table?format=npz").data))
    assert str(npz["caution"]).startswith("Numerical results are approximations")
    assert npz["summaries"].shape == (3, 3) and npz["trajectories"].shape == (3, 5, 1)
    assert np.allclose(npz["trajectories"][:, :, 0], np.exp(-np.outer([1, 2, 3], npz["times"])), rtol=1e-6)
    assert bclient.get(f"/v1/batches/{batch_id}/table?format=xml").status_code == 406


def test_statistics_of_a_latin_hypercube_sample(bclient, bstore):
    body = {"base": BASE, "summaries": SUMS, "chunk_size": 25,
            "sample": {"count": 100, "seed": 11, "method": "latin_hypercube",
                       "parameters": {"k": {"distribution": "uniform", "low": 1.0, "high": 2.0}}}}
    batch_id = submit(bclient, body).get_json()["id"]
    drain(bstore, batch_id)
    table = bclient.get(f"/v1/batches/{batch_id}/table").get_json()["columns"]
    k = np.array(table["values"]["k"])
    assert sorted(np.floor((k - 1.0) * 100).astype(int).tolist()) == list(range(100))  # one per stratum
    final = np.array(table["summaries"]["final_y"])
    s = bclient.get(f"/v1/batches/{batch_id}/statistics").get_json()["summaries"]["final_y"]
    assert s["count"] == 100 and s["mean"] == pytest.approx(final.mean())
    assert s["std"] == pytest.approx(final.std(ddof=1))
    assert s["q05"] == pytest.approx(np.percentile(final, 5)) and s["q50"] == pytest.approx(np.median(final))


def test_a_partial_table_while_running_then_cancel(bclient, bstore):
    batch_id = submit(bclient, grid_batch([1.0 + i for i in range(12)], chunk_size=3)).get_json()["id"]
    assert run_chunk(bstore, lambda b, c: None, batch_id, 0) == "done"
    table = bclient.get(f"/v1/batches/{batch_id}/table")
    assert table.headers["X-Batch-Complete"] == "false"
    assert table.get_json()["columns"]["index"] == [0, 1, 2]
    r = bclient.post(f"/v1/batches/{batch_id}/cancel")
    assert r.status_code == 202 and r.get_json()["state"] == "cancelled"
    # a chunk message still in the queue never starts
    assert run_chunk(bstore, lambda b, c: None, batch_id, 1) == "cancelled"
    cols = bclient.get(f"/v1/batches/{batch_id}/table").get_json()["columns"]
    assert cols["index"] == list(range(12))
    assert cols["outcome"][:3] == ["succeeded"] * 3 and set(cols["outcome"][3:]) == {"cancelled"}
    p = bclient.get(f"/v1/batches/{batch_id}").get_json()["progress"]
    assert (p["succeeded"], p["cancelled"], p["remaining"]) == (3, 9, 0)


def test_a_lost_worker_chunk_is_requeued_fenced_and_counted_once(bclient, bstore):
    batch_id = submit(bclient, grid_batch([1.0, 2.0, 3.0, 4.0], chunk_size=2)).get_json()["id"]
    status, first = bstore.claim_chunk(batch_id, 0)  # a worker claims chunk 0, then dies
    assert status == "claimed"
    time.sleep(1.2)  # its lease (1 s in these settings) expires
    republished = []
    reconcile_batches(bstore, lambda b, c: republished.append(c))
    # chunk 0 lost its worker; chunk 1, published but unclaimed for longer than
    # batch_stale_seconds, may sit in a dead worker's prefetch: both are published again
    assert sorted(republished) == [0, 1]
    drain(bstore, batch_id, published=[1, *republished])  # with chunk 1's first message: a duplicate
    assert bstore.finish_chunk(batch_id, 0, first, (2, 0, 0), b"late") == 0  # the dead attempt is fenced
    view = bclient.get(f"/v1/batches/{batch_id}").get_json()
    assert view["state"] == "succeeded" and view["progress"]["succeeded"] == 4
    assert bclient.get(f"/v1/batches/{batch_id}/table").get_json()["columns"]["index"] == [0, 1, 2, 3]


@pytest.mark.parametrize("body, pointer", [
    ({"base": BASE, "grid": {"parameters": {"kk": [1.0]}}, "summaries": SUMS}, "/grid/parameters/kk"),
    ({"base": BASE, "grid": {"initial": {"y": [1.0, "x"]}}, "summaries": SUMS}, "/grid/initial/y/1"),
    ({"base": BASE, "members": [{"parameters": {"k": 1}}], "summaries": [{"kind": "max", "of": "z"}]},
     "/summaries/0/of"),
    ({"base": BASE, "sample": {"count": 5, "seed": 1, "parameters": {
        "k": {"distribution": "log_uniform", "low": -1.0, "high": 1.0}}}, "summaries": SUMS},
     "/sample/parameters/k/low"),
    ({"base": BASE, "grid": {"parameters": {"k": {"from": 1, "to": 2, "count": 2000}}}, "summaries": SUMS},
     "/grid"),
    ({"base": BASE, "summaries": SUMS}, "/"),
    ({"base": {**BASE, "span": [0.0, -1.0]}, "members": [{}], "summaries": SUMS}, "/base/span"),
    ({"base": BASE, "members": [{}], "summaries": [{"kind": "at", "of": "y", "time": 5.0}]},
     "/summaries/0/time"),
])
def test_invalid_batches_are_422_problems_with_json_pointers(bclient, body, pointer):
    r = submit(bclient, body)
    assert r.status_code == 422 and r.mimetype == PROBLEM
    assert pointer in {e["pointer"] for e in r.get_json()["errors"]}, r.get_json()


def test_non_finite_numbers_are_refused(bclient):
    r = bclient.post("/v1/batches", data='{"base": {}, "members": [{"parameters": {"k": NaN}}]}',
                     content_type="application/json")
    assert r.status_code == 400 and r.mimetype == PROBLEM


def test_other_owners_get_404_and_lists_hold_only_ones_own(bsettings, store):
    from service import create_app

    app = create_app(dataclasses.replace(bsettings, auth_mode="keys", rate_limit=1000), store=store)
    _, ana = accounts.create_key(store.r, store.keys, "ana")
    _, ben = accounts.create_key(store.r, store.keys, "ben")
    c = app.test_client()
    hana, hben = {"Authorization": f"Bearer {ana}"}, {"Authorization": f"Bearer {ben}"}
    batch_id = submit(c, grid_batch([1.0]), headers=hana).get_json()["id"]
    for path in ("", "/table", "/statistics", "/spec"):
        assert c.get(f"/v1/batches/{batch_id}{path}", headers=hben).status_code == 404
        assert c.get(f"/v1/batches/{batch_id}{path}", headers=hana).status_code == 200
    assert c.post(f"/v1/batches/{batch_id}/cancel", headers=hben).status_code == 404
    assert [b["id"] for b in c.get("/v1/batches", headers=hana).get_json()["items"]] == [batch_id]
    assert c.get("/v1/batches", headers=hben).get_json()["items"] == []


def test_lists_page_newest_first_with_a_cursor(bclient):
    ids = [submit(bclient, grid_batch([1.0])).get_json()["id"] for _ in range(3)]
    first = bclient.get("/v1/batches?limit=2").get_json()
    assert [b["id"] for b in first["items"]] == ids[::-1][:2] and first["next_cursor"] == ids[1]
    second = bclient.get(f"/v1/batches?limit=2&cursor={first['next_cursor']}").get_json()
    assert [b["id"] for b in second["items"]] == [ids[0]] and second["next_cursor"] is None
    assert bclient.get("/v1/batches?limit=0").status_code == 400


def test_trajectories_beyond_the_cap_are_refused(bsettings, store):
    from service import create_app

    app = create_app(dataclasses.replace(bsettings, max_batch_trajectory_values=100), store=store)
    r = submit(app.test_client(), grid_batch([float(k) for k in range(1, 30)], trajectories=True))
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/trajectories"]


def test_an_owners_batches_share_one_window_of_chunks_in_flight(bclient, bstore):
    window = bstore.settings.batch_chunks_in_flight
    first = submit(bclient, grid_batch([1.0] * 40, chunk_size=1)).get_json()["id"]
    assert bstore.r.hget(bstore.keys.batch(first), "published") == str(window).encode()
    second = submit(bclient, grid_batch([1.0] * 40, chunk_size=1)).get_json()["id"]
    assert bstore.r.hget(bstore.keys.batch(second), "published") == str(window // 2).encode()
    # another owner's batch gets a whole window of its own
    other = bstore.create({}, {"kind": "list", "columns": [], "rows": [[]] * 40}, {"values": [], "summaries": []},
                          40, 1, "other owner", "zed")
    assert len(bstore.next_chunks(other.id)) == window
    # the first batch publishes no more until its in-flight chunks drop below the owner's share
    assert bstore.next_chunks(first) == []


def test_the_label_submitted_comes_back_as_label_in_every_view(bclient):
    """The batch views use the job spec's word for the free text a client gives: `label`."""
    batch_id = submit(bclient, grid_batch([1.0, 2.0])).get_json()["id"]
    view = bclient.get(f"/v1/batches/{batch_id}").get_json()
    assert view["label"] == "decay grid" and "title" not in view
    (listed,) = [b for b in bclient.get("/v1/batches").get_json()["items"] if b["id"] == batch_id]
    assert listed["label"] == "decay grid" and "title" not in listed
    unlabelled = dict(grid_batch([1.0]))
    del unlabelled["label"]
    other = submit(bclient, unlabelled).get_json()["id"]
    assert bclient.get(f"/v1/batches/{other}").get_json()["label"] == MODEL["title"]  # as for jobs
    r = submit(bclient, dict(grid_batch([1.0]), title="a second name"))
    assert r.status_code == 422 and r.get_json()["errors"][0]["pointer"] == "/title"


def test_the_openapi_batch_view_names_label_not_title(bclient):
    props = bclient.get("/v1/openapi.json").get_json()["components"]["schemas"]["BatchView"]["properties"]
    assert "label" in props and "title" not in props
