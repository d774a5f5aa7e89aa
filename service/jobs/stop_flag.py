"""A stop request that a signal handler may make: :class:`StopFlag`.

Python runs a signal handler in the main thread between two bytecodes, wherever that
thread is, also inside ``threading.Event.wait`` or ``Event.set`` while it holds the
event's internal lock, or inside an earlier handler that holds it. A handler that calls
``Event.set()`` then waits for a lock its own thread holds, for ever: a worker whose
server was killed received its stop signal two or more times in a row and hung that way,
leaving itself and its warm render process behind.

:meth:`StopFlag.ask` only sets an attribute, which is safe anywhere. The event that other
threads wait on is set by the next :meth:`~StopFlag.is_set` or :meth:`~StopFlag.wait` of
any thread, and :meth:`~StopFlag.wait` sleeps in slices of :data:`WAKE_S`, so a loop
waiting on the flag sees a request within that time.
"""

from __future__ import annotations

import threading
import time

__all__ = ["WAKE_S", "StopFlag"]

#: Longest time between a request made by a signal handler and a waiting loop seeing it (s).
WAKE_S = 0.05


class StopFlag:
    """``threading.Event``'s ``set``/``is_set``/``wait``, plus :meth:`ask` for handlers.

    Examples
    --------
    >>> flag = StopFlag()
    >>> flag.is_set(), flag.wait(0.01)
    (False, False)
    >>> flag.ask()  # as a signal handler does
    >>> flag.is_set(), flag.wait(10.0)
    (True, True)
    """

    def __init__(self) -> None:
        self._asked = False
        self._event = threading.Event()

    def ask(self) -> None:
        """Request the stop; safe in a signal handler (takes no lock)."""
        self._asked = True

    def set(self) -> None:
        """Request the stop and wake waiting threads at once (not from a signal handler)."""
        self._asked = True
        self._event.set()

    def is_set(self) -> bool:
        """True once the stop was requested, by :meth:`ask` or :meth:`set`."""
        if self._asked and not self._event.is_set():
            self._event.set()
        return self._event.is_set()

    def wait(self, timeout: float) -> bool:
        """Wait up to ``timeout`` seconds for the request; True if it was made."""
        deadline = time.monotonic() + timeout
        while not self.is_set():
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                return False
            self._event.wait(min(remaining, WAKE_S))
        return True
