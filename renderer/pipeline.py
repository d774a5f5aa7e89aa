"""Overlapping file I/O with computation.

Decoding the stem and encoding the output are done by libsndfile, which runs without
Python's GIL, and so do the FFTs; with a reader thread and a writer thread, reading,
convolving and writing proceed at the same time on separate cores, and a render costs
about the largest of the three instead of their sum. Queues are short, so memory stays
a few blocks whatever the stem's length.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from types import TracebackType
from typing import Any

#: Blocks held between a thread and the main loop. Two is enough to keep both sides busy;
#: more only holds memory.
QUEUE_DEPTH = 2

_DONE = object()


class _Failure:
    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


def prefetch(items: Iterable[Any], depth: int = QUEUE_DEPTH) -> Iterator[Any]:
    """Iterate ``items`` in a background thread, ``depth`` items ahead of the consumer.

    An exception raised by ``items`` is raised again in the consumer. When the consumer
    stops early (an exception, a cancel) the thread is stopped too.
    """
    q: queue.Queue[Any] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item: Any) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def run() -> None:
        try:
            for item in items:
                if not put(item):
                    return
            put(_DONE)
        except BaseException as exc:  # handed to the consumer, raised there
            put(_Failure(exc))

    thread = threading.Thread(target=run, name="earfold-prefetch", daemon=True)
    thread.start()
    try:
        while True:
            item = q.get()
            if item is _DONE:
                return
            if isinstance(item, _Failure):
                raise item.exc
            yield item
    finally:
        stop.set()
        thread.join()


class BackgroundWriter:
    """Call ``write(block)`` for each submitted block in a background thread.

    Use as a context manager; leaving it waits for every block to be written and raises
    any error the writer raised. An error is also raised at the next :meth:`submit`.
    """

    def __init__(self, write: Callable[[Any], None], depth: int = QUEUE_DEPTH) -> None:
        self._write = write
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=depth)
        self._error: BaseException | None = None
        self._abandoned = threading.Event()
        self._thread = threading.Thread(target=self._run, name="earfold-writer", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            item = self._queue.get()
            if item is _DONE:
                return
            if self._error is None and not self._abandoned.is_set():
                try:
                    self._write(item)
                except BaseException as exc:
                    self._error = exc

    def submit(self, block: Any) -> None:
        """Hand ``block`` to the writer thread (waits while the queue is full)."""
        if self._error is not None:
            raise self._error
        self._queue.put(block)

    def close(self) -> None:
        """Wait for every block to be written; raise the writer's error, if any."""
        self._queue.put(_DONE)
        self._thread.join()
        if self._error is not None:
            raise self._error

    def __enter__(self) -> BackgroundWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None:
            self.close()
        else:  # already failing: the thread writes nothing more and stops; the first error stays
            self._abandoned.set()
            while self._thread.is_alive():
                try:
                    self._queue.put(_DONE, timeout=0.1)
                    break
                except queue.Full:  # the thread is finishing the block it holds
                    continue
            self._thread.join()
