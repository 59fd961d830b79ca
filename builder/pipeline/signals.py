"""SIGINT / SIGTERM → a clean, resumable stop.

While a run is active, both signals raise ``Interrupted`` in the main thread —
except inside a ``guard.defer()`` block (the writer's transaction), where the
signal is remembered and raised right after the block, so a Ctrl-C never lands
between the rows of one unit. (A SIGKILL can; the transaction then simply
never commits, which is the same outcome.)
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager

from builder.pipeline.errors import Interrupted


class SignalGuard:
    def __init__(self) -> None:
        self.deferring = 0
        self.pending: int | None = None
        self._old: dict[int, object] = {}

    def _handler(self, signum, _frame) -> None:
        if self.deferring:
            self.pending = signum
            return
        raise Interrupted(signum)

    def install(self) -> SignalGuard:
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                self._old[sig] = signal.signal(sig, self._handler)
        return self

    def uninstall(self) -> None:
        for sig, old in self._old.items():
            signal.signal(sig, old)
        self._old = {}

    @contextmanager
    def defer(self):
        self.deferring += 1
        try:
            yield
        finally:
            self.deferring -= 1
        if not self.deferring and self.pending is not None:
            signum, self.pending = self.pending, None
            raise Interrupted(signum)

    def __enter__(self) -> SignalGuard:
        return self.install()

    def __exit__(self, *exc) -> None:
        self.uninstall()
