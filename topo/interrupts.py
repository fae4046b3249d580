"""Ctrl-C (SIGINT) and SIGTERM during the design loop.

The first signal asks the loop to stop at the end of the iteration in progress, so
that the checkpoint it saves holds a whole iteration (optimizer, responses and
solver state agree with the design) and a resumed run reaches the design of an
uninterrupted one; the same signal again stops at once (the last checkpoint stays).
Outside the main thread (a Dask worker) signals cannot be caught and nothing changes.
"""

from __future__ import annotations

import signal
import sys
import threading

SIGNALS = (signal.SIGINT, signal.SIGTERM)


class Interrupts:
    def __init__(self):
        self.pending: int | None = None
        self._old: dict = {}

    def __enter__(self) -> Interrupts:
        if threading.current_thread() is threading.main_thread():
            for s in SIGNALS:
                self._old[s] = signal.signal(s, self._handle)
        return self

    def __exit__(self, *exc) -> None:
        for s, old in self._old.items():
            signal.signal(s, old)
        self._old.clear()

    def _handle(self, signum, frame) -> None:
        if self.pending == signum:  # the same signal twice (SIGINT then SIGTERM is one stop)
            raise KeyboardInterrupt
        self.pending = signum
        print(
            f"{signal.Signals(signum).name}: stopping after this iteration "
            "(the checkpoint is saved); send it again to stop at once",
            file=sys.stderr,
            flush=True,
        )

    def check(self) -> None:
        """Raise KeyboardInterrupt when a signal came since the last check."""
        if self.pending is not None:
            raise KeyboardInterrupt


def terminate_as_interrupt():
    """SIGTERM raises KeyboardInterrupt, as Ctrl-C does (main thread only); returns
    the function that puts the former handler back."""
    if threading.current_thread() is not threading.main_thread():
        return lambda: None

    def _raise(signum, frame):
        raise KeyboardInterrupt

    old = signal.signal(signal.SIGTERM, _raise)
    return lambda: signal.signal(signal.SIGTERM, old)
