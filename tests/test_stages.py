"""The threads around inference: order kept, queues bounded, errors re-raised where they belong."""

from __future__ import annotations

import threading
import time

import pytest

from redact.media.stages import WriteBehind, map_ahead, read_ahead


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


def test_map_ahead_keeps_order_while_calls_overlap():
    """Later items finish first (shorter sleeps), yet results come back in input order, and two
    calls really ran at the same time."""
    running, peak, lock = [0], [0], threading.Lock()

    def slow(i):
        with lock:
            running[0] += 1
            peak[0] = max(peak[0], running[0])
        time.sleep(0.02 if i % 2 == 0 else 0.001)
        with lock:
            running[0] -= 1
        return i * i

    out = list(map_ahead(slow, range(20), workers=2))
    assert [(i, r, e) for i, r, e in out] == [(i, i * i, None) for i in range(20)]
    assert peak[0] == 2


def test_map_ahead_hands_each_error_to_its_own_item():
    def fn(i):
        if i in (3, 7):
            raise ValueError(f"bad {i}")
        return i

    for workers in (1, 2):
        out = list(map_ahead(fn, range(10), workers=workers))
        assert [i for i, _, _ in out] == list(range(10))
        assert {i: str(e) for i, _, e in out if e is not None} == {3: "bad 3", 7: "bad 7"}
        assert [r for i, r, e in out if e is None] == [0, 1, 2, 4, 5, 6, 8, 9]


def test_map_ahead_takes_a_bounded_number_of_items_ahead():
    taken = []

    def items():
        for i in range(1000):
            taken.append(i)
            yield i

    it = map_ahead(lambda i: i, items(), workers=2)
    assert next(it)[0] == 0
    time.sleep(0.1)
    assert len(taken) <= 2 * 2 + 1
    it.close()  # stops early without waiting for the rest


def test_map_ahead_with_one_worker_calls_in_the_callers_thread():
    caller = threading.get_ident()
    seen = [ident for _, ident, _ in map_ahead(lambda i: threading.get_ident(), range(5), workers=1)]
    assert seen == [caller] * 5
