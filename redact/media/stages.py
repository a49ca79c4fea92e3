"""Overlap decoding, inference and encoding: one thread each side of the model, bounded queues.

onnxruntime, OpenCV and FFmpeg release the GIL while they work, so decoding the next frames and
encoding the previous ones run beside inference, and several frames can be inferred at once
(`map_ahead`). Queues are bounded, so memory does not grow with clip length; an error on either
side stops both and is re-raised in the caller's thread.

Stopping: `read_ahead` and `map_ahead` are generators whose threads are stopped and joined when
they are closed. Close them (contextlib.closing) before closing what they read from: a decoder
thread still inside FFmpeg when its container is closed can crash the process. Closing the outer
`map_ahead` also closes the iterator it was given.
"""

from __future__ import annotations

import queue
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

T = TypeVar("T")
R = TypeVar("R")
_END = object()

#: Bytes of frames one queue between two threads may hold. Common practice: a few HD frames; a
#: 7680×4320 RGB frame alone is 100 MB, so at that size every queue shrinks to one frame.
QUEUE_BYTES = 64 * 2**20


def depth_for(frame_bytes: int, default: int) -> int:
    """How many frames of `frame_bytes` one queue may hold: `default`, or fewer so the queue holds
    at most QUEUE_BYTES (never fewer than 1). Memory then stays bounded at any frame size."""
    return max(1, min(int(default), QUEUE_BYTES // max(1, int(frame_bytes))))


class _Failure:
    def __init__(self, error: BaseException):
        self.error = error


def read_ahead(items: Iterable[T], depth: int = 4) -> Iterator[T]:
    """Iterate `items` in a background thread, keeping at most `depth` items ready."""
    q: queue.Queue = queue.Queue(maxsize=max(1, depth))
    stop = threading.Event()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        source = iter(items)
        try:
            for item in source:
                if not put(item):
                    return
        except BaseException as e:  # handed to the consumer, which re-raises it
            put(_Failure(e))
            return
        finally:
            _close(source)  # here, in this thread, while whatever it reads from is still open
        put(_END)

    thread = threading.Thread(target=work, name="redact-decode", daemon=True)
    thread.start()
    try:
        while True:
            item = q.get()
            if item is _END:
                return
            if isinstance(item, _Failure):
                raise item.error
            yield item
    finally:
        stop.set()
        thread.join()


def map_ahead(fn: Callable[[T], R], items: Iterable[T],
              workers: int = 1, ahead: int | None = None) -> Iterator[tuple[T, R | None, Exception | None]]:
    """Yield (item, fn(item), None) in the order of `items`, with up to `workers` calls running at
    once in a thread pool; a call that raises gives (item, None, error) instead, so the caller can
    fail closed on that one item. workers=1 calls fn in the caller's thread, one item at a time.

    At most `ahead` items (default 2×workers, never fewer than workers) are taken from `items`
    ahead of the one being yielded (bounded memory). fn must be safe to call from several threads
    at once when workers > 1.
    """
    limit = max(workers, 2 * workers if ahead is None else int(ahead))

    def call(item):
        try:
            return fn(item), None
        except Exception as e:  # handed to the caller with its item
            return None, e

    source = iter(items)
    try:
        if workers <= 1:
            for item in source:
                yield (item, *call(item))
            return
        with ThreadPoolExecutor(max_workers=workers, thread_name_prefix="redact-infer") as pool:
            pending: deque = deque()
            try:
                for item in source:
                    pending.append((item, pool.submit(call, item)))
                    if len(pending) >= limit:
                        head, fut = pending.popleft()
                        yield (head, *fut.result())
                while pending:
                    head, fut = pending.popleft()
                    yield (head, *fut.result())
            finally:
                for _, fut in pending:
                    fut.cancel()
    finally:  # the pool has joined its threads; now stop what feeds it (e.g. a read_ahead thread)
        _close(source)


def _close(iterator) -> None:
    """Close a generator (running its cleanup: joining threads, closing files); others are left."""
    close = getattr(iterator, "close", None)
    if close is not None:
        close()


class WriteBehind:
    """Call `sink(*args)` in a background thread, at most `depth` calls queued.

    `submit` re-raises an error from an earlier call; `close` waits for the queue to drain and
    re-raises any error. Use as a context manager.
    """

    def __init__(self, sink: Callable[..., None], depth: int = 4):
        self._sink = sink
        self._q: queue.Queue = queue.Queue(maxsize=max(1, depth))
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._work, name="redact-encode", daemon=True)
        self._thread.start()

    def _work(self) -> None:
        while True:
            args = self._q.get()
            if args is _END:
                return
            if self._error is None:
                try:
                    self._sink(*args)
                except BaseException as e:
                    self._error = e

    def submit(self, *args) -> None:
        if self._error is not None:
            raise self._error
        self._q.put(args)

    def close(self) -> None:
        if self._thread.is_alive():
            self._q.put(_END)
            self._thread.join()
        if self._error is not None:
            raise self._error

    def __enter__(self) -> WriteBehind:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:  # stop quietly: the caller's error is the one to report
            self._error = self._error or exc
            self._q.put(_END)
            self._thread.join()
