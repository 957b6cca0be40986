"""A live stack for tests: nginx in front of the gunicorn API (as `stifflane up` runs it),
and Celery worker processes, on a given Redis."""
from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

import requests

from cli import front
from cli.main import worker_command
from tests.conftest import ROOT, free_port


class Stack:
    def __init__(self, redis_url: str):
        tag = uuid.uuid4().hex[:8]
        self.env = dict(os.environ, REDIS_URL=redis_url, STIFFLANE_KEY_PREFIX=f"e{tag}",
                        STIFFLANE_INTERACTIVE_QUEUE=f"stifflane.e2e.{tag}", STIFFLANE_LEASE_SECONDS="3",
                        STIFFLANE_BATCH_QUEUE=f"stifflane.e2e.{tag}.batches", STIFFLANE_BATCH_STALE_SECONDS="8",
                        STIFFLANE_AUTH_MODE="off",
                        PYTHONPATH=str(ROOT))
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.logs = ROOT / "var" / "test-logs"
        self.logs.mkdir(parents=True, exist_ok=True)
        if front.nginx_binary() is None:
            raise RuntimeError(front.INSTALL_HINT)
        self.front_dir = Path(tempfile.mkdtemp(prefix="stifflane-front-"))  # short: a unix socket lives there
        (_, self.api), (_, self.front) = front.start_api("127.0.0.1", self.port, self._spawn, workers=1,
                                                        front_dir=self.front_dir)
        self.worker = None
        self._wait_api()
        self.start_worker()

    def _spawn(self, name: str, cmd: list[str]) -> subprocess.Popen:
        log = open(self.logs / f"{name}-{self.port}.log", "ab")
        return subprocess.Popen(cmd, env=self.env, cwd=ROOT, stdout=log, stderr=subprocess.STDOUT,
                                start_new_session=True)

    def _wait_api(self):
        deadline = time.time() + 30
        while time.time() < deadline:
            try:
                if requests.get(self.base + "/v1/health", timeout=5).status_code == 200:
                    return
            except requests.RequestException:
                time.sleep(0.2)
        raise RuntimeError("API did not start; see var/test-logs")

    def start_worker(self, concurrency: int = 1):
        self.worker = self._spawn("worker", worker_command(
            concurrency, self.env["STIFFLANE_INTERACTIVE_QUEUE"] + "," + self.env["STIFFLANE_BATCH_QUEUE"]))
        deadline = time.time() + 60
        while time.time() < deadline:  # ready once it has written its heartbeat
            if requests.get(self.base + "/v1/health", timeout=2).json()["workers"]:
                return
            time.sleep(0.2)
        raise RuntimeError("worker did not report in; see var/test-logs")

    def kill_worker(self):
        """kill -9 of the worker's whole process group (main process and children)."""
        os.killpg(self.worker.pid, signal.SIGKILL)
        self.worker.wait(10)

    def stop(self):
        for p in (self.worker, self.front, self.api):
            if p and p.poll() is None:
                os.killpg(p.pid, signal.SIGTERM)
                try:
                    p.wait(15)
                except subprocess.TimeoutExpired:
                    os.killpg(p.pid, signal.SIGKILL)
        shutil.rmtree(self.front_dir, ignore_errors=True)

    # --- client helpers
    def submit(self, spec: dict) -> str:
        r = requests.post(self.base + "/v1/jobs", json=spec, timeout=10)
        assert r.status_code == 202, r.text
        return r.json()["id"]

    def job(self, job_id: str) -> dict:
        return requests.get(f"{self.base}/v1/jobs/{job_id}", timeout=10).json()

    def wait(self, job_id: str, states=("succeeded", "failed", "cancelled"), timeout=90.0) -> dict:
        deadline = time.time() + timeout
        while time.time() < deadline:
            view = self.job(job_id)
            if view["state"] in states:
                return view
            time.sleep(0.1)
        raise AssertionError(f"job {job_id} still {view['state']} after {timeout} s")
