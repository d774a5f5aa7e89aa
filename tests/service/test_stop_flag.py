"""A stop request made from signal handlers, many in a row, never deadlocks its waiter.

A worker stopped by its server's death got the stop signal several times at once; its
handler set a ``threading.Event``, and the second signal, arriving while the first
handler held the event's lock, waited for that lock for ever.
"""

from __future__ import annotations

import os
import signal
import threading
import time

import pytest

from earfold.service.jobs.stop_flag import WAKE_S, StopFlag


@pytest.mark.skipif(not hasattr(signal, "SIGUSR2"), reason="needs SIGUSR2")
def test_a_burst_of_signals_stops_the_waiting_loop():
    flag = StopFlag()
    calls = []

    def handler(signum, frame):
        calls.append(signum)
        flag.ask()

    previous = signal.signal(signal.SIGUSR2, handler)
    try:

        def burst():
            time.sleep(0.05)
            for _ in range(300):
                os.kill(os.getpid(), signal.SIGUSR2)

        sender = threading.Thread(target=burst)
        sender.start()
        start = time.monotonic()
        assert flag.wait(20.0)
        waited = time.monotonic() - start
        sender.join(10)
        # a handler that ran while the main thread was inside the flag's own wait or
        # is_set, or inside another handler, left it usable
        assert flag.is_set() and flag.wait(0.0)
    finally:
        signal.signal(signal.SIGUSR2, previous)
    assert calls and waited < 5.0


def test_ask_is_seen_by_other_threads_within_the_wake_interval():
    flag = StopFlag()
    seen = threading.Event()

    def waiter():
        if flag.wait(10.0):
            seen.set()

    thread = threading.Thread(target=waiter)
    thread.start()
    time.sleep(0.05)
    asked = time.monotonic()
    flag.ask()
    assert seen.wait(5.0)
    thread.join(5)
    assert time.monotonic() - asked < 10 * WAKE_S + 1.0
    assert not StopFlag().wait(0.01)


def test_a_request_made_while_the_flags_lock_is_held_returns_at_once():
    # What a handler meets when it runs inside Event.set/Event.wait of its own thread
    # (CPython runs handlers between bytecodes, locks held): ask() must not need the lock.
    flag = StopFlag()
    done = threading.Event()

    def handler_inside_the_lock():
        with flag._event._cond:  # the thread is "inside" the event's own method
            flag.ask()
        done.set()

    thread = threading.Thread(target=handler_inside_the_lock, daemon=True)
    thread.start()
    assert done.wait(5.0), "ask() waited for the lock its own thread held"
    assert flag.is_set()
