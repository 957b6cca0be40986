"""The slow-client probe: sockets that send a request head at once and then trickle its body.

Used by tests/e2e/test_front.py and runnable by hand against any stack:
    python -m tests.e2e.slow_clients http://127.0.0.1:8750 [clients] [seconds] [source addresses]
It prints how long /v1/health took while the trickle went on.
"""
from __future__ import annotations

import socket
import sys
import threading
import time
import urllib.error
import urllib.request
from urllib.parse import urlsplit


class Trickle:
    """``clients`` connections, each POSTing a body one byte per ``interval`` seconds."""

    def __init__(self, base: str, clients: int = 10, body_bytes: int = 1000, interval: float = 1.0,
                 sources: int = 1):
        parts = urlsplit(base)
        self.addr = (parts.hostname, parts.port or 80)
        self.clients, self.body_bytes, self.interval = clients, body_bytes, interval
        self.sources = sources  # > 1: spread the clients over 127.0.0.2, 127.0.0.3, ... (loopback only)
        self.stop = threading.Event()
        self.socks: list[socket.socket] = []
        self.threads: list[threading.Thread] = []

    def _run(self, sock: socket.socket):
        try:
            for _ in range(self.body_bytes):
                if self.stop.wait(self.interval):
                    return
                sock.sendall(b" ")
        except OSError:  # the front timed us out or closed us: that is allowed
            return

    def __enter__(self):
        head = (f"POST /v1/jobs HTTP/1.1\r\nHost: {self.addr[0]}\r\nContent-Type: application/json\r\n"
                f"Content-Length: {self.body_bytes}\r\n\r\n").encode()
        for k in range(self.clients):
            source = (f"127.0.0.{2 + k % self.sources}", 0) if self.sources > 1 else None
            s = socket.create_connection(self.addr, timeout=10, source_address=source)
            s.sendall(head + b"{")
            self.socks.append(s)
            t = threading.Thread(target=self._run, args=(s,), daemon=True)
            t.start()
            self.threads.append(t)
        return self

    def __exit__(self, *exc):
        self.stop.set()
        for s in self.socks:
            try:
                s.close()
            except OSError:
                pass
        for t in self.threads:
            t.join(5)


def health_seconds(base: str, timeout: float) -> float | None:
    """Seconds /v1/health took to answer, or None if it did not answer within ``timeout``."""
    started = time.perf_counter()
    try:
        with urllib.request.urlopen(base + "/v1/health", timeout=timeout) as resp:
            resp.read()
    except (urllib.error.URLError, OSError):
        return None
    return time.perf_counter() - started


def probe(base: str, clients: int = 10, timeout: float = 30.0, settle: float = 2.0,
          sources: int = 1) -> float | None:
    with Trickle(base, clients, sources=sources):
        time.sleep(settle)  # let every slow request reach whatever reads it
        return health_seconds(base, timeout)


if __name__ == "__main__":
    base = sys.argv[1]
    clients = int(sys.argv[2]) if len(sys.argv) > 2 else 10
    timeout = float(sys.argv[3]) if len(sys.argv) > 3 else 30.0
    sources = int(sys.argv[4]) if len(sys.argv) > 4 else 1
    print(f"idle: /v1/health in {health_seconds(base, timeout)} s")
    took = probe(base, clients, timeout, sources=sources)
    print(f"{clients} slow clients: /v1/health " + (f"in {took:.3f} s" if took is not None
                                                       else f"no answer within {timeout} s"))
