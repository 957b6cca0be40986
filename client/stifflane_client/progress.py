"""A progress bar: tqdm when installed, else a plain line on stderr, or nothing."""
from __future__ import annotations

import sys
import time
from typing import Callable, TypeVar

from stifflane_client.errors import WaitTimeout

T = TypeVar("T")


class _Plain:
    def __init__(self, desc: str, stream):
        self.desc, self.stream, self.last = desc, stream, -1

    def update_to(self, fraction: float, state: str):
        pct = int(round(100 * fraction))
        if pct != self.last:
            self.last = pct
            self.stream.write(f"\r{self.desc} {state:9s} {pct:3d}%")
            self.stream.flush()

    def close(self):
        self.stream.write("\n")
        self.stream.flush()


class _Tqdm:
    def __init__(self, desc: str, stream):
        from tqdm import tqdm

        self.bar = tqdm(total=1000, desc=desc, file=stream, unit="‰", leave=True,
                        bar_format="{desc} {percentage:3.0f}%|{bar}| {elapsed} {postfix}")

    def update_to(self, fraction: float, state: str):
        self.bar.n = int(round(1000 * fraction))
        self.bar.set_postfix_str(state, refresh=False)
        self.bar.refresh()

    def close(self):
        self.bar.close()


class _Silent:
    def update_to(self, fraction: float, state: str):
        pass

    def close(self):
        pass


def progress_bar(desc: str, enabled=True, stream=None):
    """An object with update_to(fraction, state) and close()."""
    if not enabled:
        return _Silent()
    stream = stream or sys.stderr
    try:
        return _Tqdm(desc, stream)
    except ImportError:
        return _Plain(desc, stream)


def poll_until_done(fetch: Callable[[], T], describe: Callable[[T], tuple[float, str]], label: str,
                    timeout: float | None, progress: bool, poll: float, max_poll: float,
                    on_update: Callable[[T], None] | None = None) -> T:
    """Fetch until ``.done``, backing off from ``poll`` to ``max_poll`` seconds; raise
    WaitTimeout after ``timeout``. ``describe`` gives the bar's fraction and text."""
    bar = progress_bar(label, enabled=progress)
    deadline = None if timeout is None else time.monotonic() + timeout
    delay = poll
    try:
        while True:
            item = fetch()
            bar.update_to(*describe(item))
            if on_update:
                on_update(item)
            if item.done:
                return item
            if deadline is not None and time.monotonic() > deadline:
                raise WaitTimeout(f"{label} still {item.view.get('state')} after {timeout} s")
            time.sleep(delay)
            delay = min(max_poll, delay * 1.5)
    finally:
        bar.close()
