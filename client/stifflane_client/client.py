"""``Client``: submit, watch, fetch, list and cancel jobs over the /v1 API."""
from __future__ import annotations

import time
import uuid
from pathlib import Path
from typing import Iterator

import requests

from stifflane_client.batches import BatchesMixin
from stifflane_client.calibrations import CalibrationsMixin
from stifflane_client.errors import ApiError, JobFailed
from stifflane_client.progress import poll_until_done
from stifflane_client.results import Result
from stifflane_client.spec import load_spec
from stifflane_client.transport import Transport

TERMINAL = ("succeeded", "failed", "cancelled")
FORMATS = ("json", "csv", "npz")


class Job:
    """The last seen view of one job (``view`` holds the server's JSON) plus shortcuts."""

    def __init__(self, client: "Client", view: dict):
        self.client = client
        self.view = view

    def __getattr__(self, name):
        try:
            return self.__dict__["view"][name]
        except KeyError:
            raise AttributeError(name) from None

    def __repr__(self):
        return f"<Job {self.view.get('id')} {self.view.get('state')} {self.view.get('progress', 0):.0%}>"

    @property
    def done(self) -> bool:
        return self.view.get("state") in TERMINAL

    def refresh(self) -> "Job":
        self.view = self.client.job(self.view["id"]).view
        return self

    def wait(self, timeout: float | None = None, progress: bool = False) -> "Job":
        self.view = self.client.wait(self.view["id"], timeout=timeout, progress=progress).view
        return self

    def result(self) -> Result:
        return self.client.result(self.view["id"])

    def cancel(self) -> "Job":
        self.view = self.client.cancel(self.view["id"]).view
        return self


class Client(BatchesMixin, CalibrationsMixin):
    """``Client(url=None, key=None)``: url defaults to $STIFFLANE_URL or http://127.0.0.1:8750,
    key to $STIFFLANE_KEY (sent as ``Authorization: Bearer <key>``)."""

    def __init__(self, url: str | None = None, key: str | None = None, timeout: float = 30.0,
                 retries: int = 5, session: requests.Session | None = None, sleep=time.sleep):
        self.http = Transport(url, key, timeout, retries, session, sleep)
        self._etags: dict[str, tuple[str, dict]] = {}

    @property
    def url(self) -> str:
        return self.http.url

    # --- jobs
    def submit(self, spec, idempotency_key: str | None = None) -> Job:
        """Submit a spec (dict, JSON file path or JSON text). One Idempotency-Key per call,
        reused on every retry, so a lost answer never creates the job twice."""
        body = load_spec(spec)
        key = idempotency_key or str(uuid.uuid4())
        resp = self.http.request("POST", "/v1/jobs", json=body, ok=(200, 201, 202),
                                 headers={"Idempotency-Key": key}, retry_unsafe=True,
                                 retry_status=(409, 429, 503))  # 409: first try still in flight
        return Job(self, resp.json())

    def validate(self, spec) -> dict:
        """Check a spec without submitting it: the model summary, or InvalidSpec raised."""
        return self.http.request("POST", "/v1/spec-checks", json=load_spec(spec),
                                 retry_unsafe=True).json()

    def job(self, job_id: str) -> Job:
        """The job's current view; asks with If-None-Match so unchanged polls cost a 304."""
        cached = self._etags.get(job_id)
        headers = {"If-None-Match": cached[0]} if cached else {}
        resp = self.http.request("GET", f"/v1/jobs/{job_id}", ok=(200, 304), headers=headers)
        if resp.status_code == 304 and cached:
            return Job(self, cached[1])
        view = resp.json()
        if resp.headers.get("ETag"):
            self._etags[job_id] = (resp.headers["ETag"], view)
        return Job(self, view)

    def jobs(self, state: str | None = None, limit: int = 50, pages: int | None = None) -> Iterator[Job]:
        """Jobs, newest first, following the Link rel=next cursor (at most ``pages`` pages)."""
        params = {"limit": limit, **({"state": state} if state else {})}
        url, n = "/v1/jobs", 0
        while url and (pages is None or n < pages):
            resp = self.http.request("GET", url, params=params)
            for view in resp.json().get("items", []):
                yield Job(self, view)
            nxt = resp.links.get("next", {}).get("url")
            url, params, n = nxt, None, n + 1

    def cancel(self, job_id: str) -> Job:
        resp = self.http.request("POST", f"/v1/jobs/{job_id}/cancel", ok=(200, 202), retry_unsafe=True)
        return Job(self, resp.json())

    def spec(self, job_id: str) -> dict:
        return self.http.request("GET", f"/v1/jobs/{job_id}/spec").json()

    def wait(self, job_id: str, timeout: float | None = None, progress: bool = False,
             poll: float = 0.25, max_poll: float = 2.0, on_update=None) -> Job:
        """Poll until the job is succeeded, failed or cancelled; returns its last view."""
        return poll_until_done(
            lambda: self.job(job_id),
            lambda job: (float(job.view.get("progress") or 0.0), job.view.get("state", "")),
            f"job {job_id}", timeout, progress, poll, max_poll, on_update)

    def run(self, spec, timeout: float | None = None, progress: bool = False) -> Result:
        """Submit, wait and fetch the result; raises JobFailed when the job failed or was
        cancelled (its ``result`` is then the partial result, if the run computed one)."""
        job = self.wait(self.submit(spec).view["id"], timeout=timeout, progress=progress)
        if job.view["state"] != "succeeded":
            raise JobFailed(job.view, self.partial_result(job.view["id"]))
        return self.result(job.view["id"])

    # --- results
    def result(self, job_id: str, format: str = "json") -> Result:
        """The result as arrays: "json" (with the stiffness report) or "npz" (arrays only).

        Whole for a succeeded job; for a failed or cancelled job what its run computed, and
        for a running one its latest snapshot (``Result.partial`` True, ``t_reached``). A job
        with nothing to show (queued, just started, or ended before its run) raises ApiError 409."""
        if format == "npz":
            return Result.from_npz(job_id, self.result_bytes(job_id, "npz"))
        return Result.from_json(self.http.request("GET", f"/v1/jobs/{job_id}/result").json())

    def partial_result(self, job_id: str) -> Result | None:
        """The result so far, or None while there is none (409)."""
        try:
            return self.result(job_id)
        except ApiError as e:
            if e.status == 409:
                return None
            raise

    def result_bytes(self, job_id: str, format: str = "json") -> bytes:
        if format not in FORMATS:
            raise ValueError(f"format must be one of {', '.join(FORMATS)}")
        return self.http.request("GET", f"/v1/jobs/{job_id}/result", params={"format": format}).content

    def download(self, job_id: str, path, format: str | None = None) -> Path:
        """Save the result to ``path``; the format follows the suffix unless given."""
        path = Path(path)
        fmt = format or (path.suffix.lstrip(".").lower() or "json")
        path.write_bytes(self.result_bytes(job_id, fmt))
        return path

    def health(self) -> dict:
        return self.http.request("GET", "/v1/health", ok=(200, 503), retry_status=(429,)).json()
