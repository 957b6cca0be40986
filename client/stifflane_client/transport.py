"""HTTP with a bearer key, retries with backoff on 429/503 and lost connections."""
from __future__ import annotations

import os
import random
import time

import requests

from stifflane_client.errors import ApiError, ServiceUnavailable

DEFAULT_URL = "http://127.0.0.1:8750"
RETRY_STATUS = (429, 503)


def retry_delay(attempt: int, retry_after: str | None, base: float = 0.5, cap: float = 30.0) -> float:
    """Seconds to wait before retry ``attempt`` (1, 2, ...): the server's Retry-After when it
    gives seconds, else capped exponential backoff with jitter."""
    if retry_after:
        try:
            return min(max(float(retry_after), 0.0), cap)
        except ValueError:
            pass  # an HTTP date: fall back to backoff
    return min(cap, base * 2 ** (attempt - 1)) * (0.5 + random.random() / 2)


class Transport:
    """One requests.Session bound to a server URL and an optional API key."""

    def __init__(self, url: str | None = None, key: str | None = None, timeout: float = 30.0,
                 retries: int = 5, session: requests.Session | None = None, sleep=time.sleep):
        self.url = (url or os.environ.get("STIFFLANE_URL") or DEFAULT_URL).rstrip("/")
        self.key = key if key is not None else os.environ.get("STIFFLANE_KEY") or None
        self.timeout = timeout
        self.retries = retries
        self.session = session or requests.Session()
        self.sleep = sleep

    def headers(self, extra: dict | None = None) -> dict:
        h = {"User-Agent": "stifflane-client/0.1"}
        if self.key:
            h["Authorization"] = f"Bearer {self.key}"
        h.update(extra or {})
        return h

    def request(self, method: str, path: str, *, ok=(200,), retry_unsafe: bool = False,
                retry_status=RETRY_STATUS, **kwargs) -> requests.Response:
        """Send, retrying 429/503 (always) and connection failures (for GET, or when the
        caller made the request idempotent, e.g. with an Idempotency-Key)."""
        url = path if path.startswith("http") else self.url + path
        kwargs["headers"] = self.headers(kwargs.get("headers"))
        kwargs.setdefault("timeout", self.timeout)
        safe = method.upper() in ("GET", "HEAD") or retry_unsafe
        for attempt in range(1, self.retries + 2):
            try:
                resp = self.session.request(method, url, **kwargs)
            except (requests.ConnectionError, requests.Timeout) as e:
                if not safe or attempt > min(self.retries, 3):  # a down server: fail within seconds
                    raise ServiceUnavailable(f"cannot reach {self.url}: {e}") from e
                self.sleep(retry_delay(attempt, None))
                continue
            if resp.status_code in retry_status and attempt <= self.retries:
                self.sleep(retry_delay(attempt, resp.headers.get("Retry-After")))
                continue
            if resp.status_code in ok:
                return resp
            raise ApiError.from_response(resp)
        raise AssertionError("unreachable")
