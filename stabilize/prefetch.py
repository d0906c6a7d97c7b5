"""Prefetching: read items ahead and write them behind in threads, so decode, warp, encode overlap.

ffmpeg decodes and encodes in processes of its own, and OpenCV's warps release the GIL, so a
thread that keeps the next frames read and one that keeps the encoder fed let the three work
at once. Queues are short, so memory stays a few frames, whatever the clip's length.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from typing import Any, TypeVar

__all__ = ["WriteBehind", "read_ahead"]

T = TypeVar("T")
_DONE = object()


def read_ahead(items: Iterable[T], depth: int = 3) -> Iterator[T]:
    """Iterate ``items`` in a background thread, keeping up to ``depth`` ready.

    Exceptions raised while producing are re-raised in the consumer. Closing the returned
    iterator early stops the producer and closes ``items``. However the consumer stops (an
    interruption included, even one that lands while the thread is being started), it returns
    only once the producer has stopped using ``items``, so the caller may close them at once.
    """
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()
    # The producer starts only under the gate and only if the consumer has not stopped; the
    # consumer stops under it. So either the producer never touches ``items`` or the consumer
    # knows it runs and waits for ``finished``.
    gate = threading.Lock()
    started = threading.Event()
    finished = threading.Event()

    def produce() -> None:
        with gate:
            if stop.is_set():
                return
            started.set()
        try:
            it = iter(items)
            try:
                for item in it:
                    if not _put(q, stop, item):
                        break
            except BaseException as exc:  # handed to the consumer
                _put(q, stop, exc)
                return
            finally:
                close = getattr(it, "close", None)
                if close is not None:
                    close()
            _put(q, stop, _DONE)
        finally:
            finished.set()

    thread = threading.Thread(target=produce, daemon=True, name="read-ahead")
    try:
        thread.start()
        while True:
            item = q.get()
            if item is _DONE:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        with gate:
            stop.set()
            running = started.is_set()
        if running:
            while not finished.wait(0.05):
                _drain(q)
            thread.join()
        _drain(q)


def _drain(q: queue.Queue) -> None:
    """Drop what ``q`` holds, without waiting."""
    while True:
        try:
            q.get_nowait()
        except queue.Empty:
            return


def _put(q: queue.Queue, stop: threading.Event, item: Any) -> bool:
    """Put ``item`` unless the consumer stopped first; returns whether it was put."""
    while not stop.is_set():
        try:
            q.put(item, timeout=0.1)
            return True
        except queue.Full:
            continue
    return False


class WriteBehind:
    """Call ``sink(item)`` for each :meth:`put` item in a background thread, in order.

    :meth:`close` waits for every item to be written and re-raises the first error; once an
    error has happened, :meth:`put` raises it too, so the producer stops early. When the
    producer itself fails (or is interrupted), :meth:`abort` drops what is still queued
    instead: the output is going to be thrown away, and its sink may never take another item.
    """

    def __init__(self, sink: Callable[[Any], None], depth: int = 3) -> None:
        self._sink = sink
        self._q: queue.Queue = queue.Queue(maxsize=depth)
        self._error: BaseException | None = None
        self._aborted = False
        self._thread = threading.Thread(target=self._run, daemon=True, name="write-behind")
        self._thread.start()

    def _run(self) -> None:
        while True:
            item = self._q.get()
            if item is _DONE:
                return
            if self._error is None and not self._aborted:
                try:
                    self._sink(item)
                except BaseException as exc:  # handed to the producer
                    self._error = exc

    def put(self, item: Any) -> None:
        """Queue ``item`` for the sink; raises what the sink raised on an earlier item."""
        if self._error is not None:
            raise self._error
        self._q.put(item)

    def close(self) -> None:
        """Wait until every queued item is written; raises what the sink raised."""
        self._q.put(_DONE)
        self._thread.join()
        if self._error is not None:
            raise self._error

    def abort(self, wait_s: float = 1.0) -> None:
        """Drop every item not yet written and let the thread end; never raises.

        The item being written, if any, is finished or fails on its own (say, once the
        sink's encoder has been stopped): this waits at most ``wait_s`` seconds for that, so
        a sink that no longer takes anything cannot hold the caller up.
        """
        self._aborted = True
        _drain(self._q)
        try:
            self._q.put_nowait(_DONE)
        except queue.Full:  # only if another thread is still putting; the flag stops it
            pass
        self._thread.join(timeout=wait_s)
