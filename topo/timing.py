"""Per-phase wall-clock timing for benchmarks: ``with timer("solve"): ...``.

>>> seconds = {}
>>> timer = Timer(seconds)
>>> with timer("solve"):
...     pass
>>> list(seconds)
['solve']
"""

from __future__ import annotations

import time
from contextlib import contextmanager


class Timer:
    """Adds the seconds spent in each ``with timer(phase):`` block to a dict, or
    does nothing when no dict is given (the loop always times; only benchmarks ask)."""

    def __init__(self, seconds: dict | None = None):
        self.seconds = seconds

    @contextmanager
    def __call__(self, phase: str):
        if self.seconds is None:
            yield
            return
        start = time.perf_counter()
        try:
            yield
        finally:
            self.seconds[phase] = self.seconds.get(phase, 0.0) + time.perf_counter() - start
