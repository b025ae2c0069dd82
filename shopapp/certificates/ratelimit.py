"""A small sliding-window rate limit for the public verification page.

Per client address, at most ``limit`` requests in any ``window`` seconds. The
counts live in this process only: with several server processes each one counts
on its own (the limit is per process), and a restart forgets them. That is
enough to make reading the register by trying numbers slow; it is not a
defence against many addresses at once.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable

MAX_CLIENTS = 10_000  # addresses tracked at once; the quietest are forgotten first


class SlidingWindowLimit:
    """``hit(client)`` → seconds to wait (0 when the request may go ahead)."""

    def __init__(self, limit: int, window: float = 60.0,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if limit < 1 or window <= 0:
            raise ValueError("a rate limit needs at least 1 request in a positive window")
        self.limit = limit
        self.window = window
        self._clock = clock
        self._hits: dict[str, deque[float]] = {}
        self._lock = threading.Lock()  # each server process answers on several threads

    def hit(self, client: str) -> int:
        now = self._clock()
        with self._lock:
            times = self._hits.pop(client, None) or deque()
            while times and times[0] <= now - self.window:
                times.popleft()
            if len(times) >= self.limit:
                self._hits[client] = times  # re-inserted last: the most recently active
                return max(1, int(times[0] + self.window - now + 0.999))
            times.append(now)
            self._hits[client] = times
            if len(self._hits) > MAX_CLIENTS:
                self._hits.pop(next(iter(self._hits)))
            return 0
