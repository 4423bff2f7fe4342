"""Per-caller request rate limit: one token bucket per key, in memory.

Each caller (an API key's digest, or a client address for requests with a wrong key) may send
``burst`` requests at once; its bucket then refills at ``rate`` tokens per second. A request
finding the bucket empty is refused with the seconds until the next token. The buckets live in
the service process (a restart empties them); the least recently seen callers are dropped
beyond ``max_callers``. No HTTP here.
"""

from __future__ import annotations

import math
import threading
import time
from collections import OrderedDict
from collections.abc import Callable


class RateLimiter:
    """Token buckets by caller.

    Examples
    --------
    >>> clock = iter([0.0, 0.0, 0.0, 0.5]).__next__
    >>> limit = RateLimiter(rate=2.0, burst=2, clock=clock)
    >>> limit.take("k"), limit.take("k"), limit.take("k"), limit.take("k")
    (0.0, 0.0, 0.5, 0.0)
    """

    def __init__(self, rate: float, burst: int, max_callers: int = 10_000,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.rate = float(rate)
        self.burst = max(1, int(burst))
        self.max_callers = max_callers
        self._clock = clock
        self._buckets: OrderedDict[str, tuple[float, float]] = OrderedDict()
        self._lock = threading.Lock()  # sync routes run in a thread pool

    @property
    def enabled(self) -> bool:
        return self.rate > 0

    def take(self, caller: str) -> float:
        """Spend one of ``caller``'s tokens: 0.0 when there was one, else the seconds to wait
        for the next (nothing is spent then)."""
        if not self.enabled:
            return 0.0
        with self._lock:
            now = self._clock()
            tokens, seen = self._buckets.pop(caller, (float(self.burst), now))
            tokens = min(float(self.burst), tokens + (now - seen) * self.rate)
            wait = 0.0
            if tokens >= 1.0:
                tokens -= 1.0
            else:
                wait = (1.0 - tokens) / self.rate
            self._buckets[caller] = (tokens, now)
            while len(self._buckets) > self.max_callers:
                self._buckets.popitem(last=False)
            return wait


def retry_after(wait_s: float) -> str:
    """A Retry-After value (whole seconds, at least 1) for a wait.

    >>> retry_after(0.2), retry_after(1.5)
    ('1', '2')
    """
    return str(max(1, math.ceil(wait_s)))
