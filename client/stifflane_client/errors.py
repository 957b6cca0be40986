"""Exceptions raised by the client. Server errors carry the RFC 9457 problem details."""
from __future__ import annotations


class StifflaneError(Exception):
    """Base class of every error this package raises."""


class ServiceUnavailable(StifflaneError):
    """The server could not be reached (after the retries)."""


class ApiError(StifflaneError):
    """The server answered with an error; the problem document's fields are attributes.

    ``errors`` is a list of {"pointer": "/json/pointer", "detail": "..."} for invalid specs.
    """

    def __init__(self, status: int, title: str = "", detail: str = "", type: str = "",
                 errors: list | None = None, body: dict | None = None):
        self.status = status
        self.title = title or f"HTTP {status}"
        self.detail = detail or ""
        self.type = type or ""
        self.errors = list(errors or [])
        self.body = dict(body or {})
        super().__init__(self._text())

    def _text(self) -> str:
        head = f"{self.status} {self.title}" + (f": {self.detail}" if self.detail else "")
        lines = [head] + [f"  {e.get('pointer', '')}: {e.get('detail', '')}" for e in self.errors]
        return "\n".join(lines)

    @classmethod
    def from_response(cls, resp) -> "ApiError":
        try:
            body = resp.json()
            if not isinstance(body, dict):
                body = {}
        except ValueError:
            body = {}
        kind = AuthError if resp.status_code in (401, 403) else cls
        if resp.status_code == 422 or body.get("errors"):
            kind = InvalidSpec if resp.status_code == 422 else kind
        return kind(resp.status_code, body.get("title", resp.reason or ""),
                    body.get("detail", "" if body else resp.text[:300]), body.get("type", ""),
                    body.get("errors"), body)


class InvalidSpec(ApiError):
    """422: the job spec was refused; ``errors`` locates each problem by JSON pointer."""


class AuthError(ApiError):
    """401/403: a missing, wrong or revoked key (pass key= or set STIFFLANE_KEY)."""


def ending(view: dict) -> str:
    """How a job ended (or where it is), as one plain sentence from its view."""
    job, state = view.get("id") or "", view.get("state") or ""
    message = (view.get("message") or "").strip().rstrip(".")
    if state == "cancelled":
        # the server's cancel messages start with the word itself ("cancelled on request at t=...")
        rest = message[len("cancelled"):].strip() if message.lower().startswith("cancelled") else message
        text = f"job {job} was cancelled" + ((" " if rest[:1].isalpha() else ": ") + rest if rest else "")
    elif state == "failed":
        text = f"job {job} failed" + (f": {message}" if message else
                                      f" ({view.get('outcome')})" if view.get("outcome") else "")
    elif state == "succeeded":
        text = f"job {job} succeeded" + (f": {message}" if message else "")
    else:
        text = f"job {job} is {state or 'in an unknown state'}"
    return text + "."


class JobFailed(StifflaneError):
    """The job failed or was cancelled; ``job`` is its last view, ``result`` what its run
    computed before it stopped (a partial ``Result``), or None when it never ran."""

    def __init__(self, job: dict, result=None):
        self.job = job
        self.result = result
        super().__init__(ending(job))


class CalibrationFailed(StifflaneError):
    """The calibration failed or was cancelled; ``view`` is its last view (``message`` says why)."""

    def __init__(self, view: dict):
        self.view = view
        state, message = view.get("state") or "", (view.get("message") or "").strip()
        super().__init__(f"calibration {view.get('id', '')} {state}" + (f": {message}" if message else ""))


class WaitTimeout(StifflaneError):
    """The job did not finish within the time given to ``wait``."""
