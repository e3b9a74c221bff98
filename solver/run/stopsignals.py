"""Stop requests from a batch system: SIGTERM or SIGUSR1 end a run at the next step boundary.

The handler only notes the signal; the run loop polls the note on every rank
at each step boundary (a collective maximum, so a signal that reached a single
rank stops them all), writes a checkpoint and exits with code 4, "stopped
early, restart me". Further signals while it does so change nothing; only
SIGKILL cuts the checkpoint short, and then the previous one is still whole.
"""
from __future__ import annotations

import signal
import threading

STOP_SIGNALS = (signal.SIGTERM, signal.SIGUSR1)


class StopRequests:
    """Install with :meth:`install`, poll :attr:`received`, undo with :meth:`restore`."""

    def __init__(self):
        self.received = 0
        self._previous = {}

    def install(self) -> "StopRequests":
        # Python only lets the main thread set handlers; elsewhere (a test
        # harness thread) the run simply cannot be stopped by signal
        if threading.current_thread() is threading.main_thread():
            for sig in STOP_SIGNALS:
                self._previous[sig] = signal.signal(sig, self._note)
        return self

    def _note(self, signum, frame):
        if not self.received:
            self.received = int(signum)

    def restore(self) -> None:
        for sig, handler in self._previous.items():
            signal.signal(sig, handler)
        self._previous = {}


def signal_name(signum: int) -> str:
    try:
        return signal.Signals(int(signum)).name
    except ValueError:
        return f"signal {int(signum)}"
