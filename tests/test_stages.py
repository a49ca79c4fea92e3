"""The threads around inference: order kept, queues bounded, errors re-raised where they belong."""

from __future__ import annotations

import threading
import time

import pytest

from redact.stages import WriteBehind, read_ahead


def test_read_ahead_keeps_order_and_bounds_the_queue():
    produced = []

    def items():
        for i in range(50):
            produced.append(i)
            yield i

    it = read_ahead(items(), depth=3)
    assert next(it) == 0
    time.sleep(0.2)  # give the producer time to run ahead as far as it may
    assert len(produced) <= 1 + 3 + 1  # consumed + queued + one blocked in put
    assert list(it) == list(range(1, 50))


def test_read_ahead_reraises_the_producer_error_after_the_good_items():
    def items():
        yield 1
        yield 2
        raise ValueError("decoder broke")

    got = []
    with pytest.raises(ValueError, match="decoder broke"):
        for x in read_ahead(items(), depth=2):
            got.append(x)
    assert got == [1, 2]


def test_read_ahead_stops_its_thread_when_the_consumer_stops():
    before = threading.active_count()
    it = read_ahead(iter(range(10_000)), depth=2)
    next(it)
    it.close()
    assert threading.active_count() == before


def test_write_behind_calls_in_order_and_reraises():
    seen = []
    with WriteBehind(lambda x: seen.append(x), depth=2) as w:
        for i in range(20):
            w.submit(i)
    assert seen == list(range(20))

    def sink(x):
        if x == 3:
            raise OSError("disk full")

    w = WriteBehind(sink, depth=2)
    with pytest.raises(OSError, match="disk full"):
        for i in range(100):
            w.submit(i)
            time.sleep(0.001)
        w.close()
