"""Background reading and writing: order kept, errors raised in the caller, early stop."""

from __future__ import annotations

import threading

import pytest

from earfold.renderer.pipeline import BackgroundWriter, prefetch


def test_prefetch_keeps_order_and_items():
    assert list(prefetch(iter(range(100)))) == list(range(100))


def test_prefetch_raises_the_producers_error_in_the_consumer():
    def items():
        yield 1
        raise OSError("disk went away")

    got = []
    with pytest.raises(OSError, match="disk went away"):
        for x in prefetch(items()):
            got.append(x)
    assert got == [1]


def test_prefetch_stops_its_thread_when_the_consumer_stops_early():
    before = threading.active_count()
    for x in prefetch(iter(range(10_000))):
        if x == 3:
            break
    assert threading.active_count() == before


def test_background_writer_writes_everything_in_order():
    out = []
    with BackgroundWriter(out.append) as w:
        for i in range(50):
            w.submit(i)
    assert out == list(range(50))


def test_background_writer_raises_the_write_error():
    def write(item):
        if item == 2:
            raise ValueError("NaN in block")

    with pytest.raises(ValueError, match="NaN in block"):
        with BackgroundWriter(write) as w:
            for i in range(5):
                w.submit(i)
