"""Read-ahead and write-behind threads: order, errors, early close."""

import threading

import pytest

from stabilize.prefetch import WriteBehind, read_ahead


def _endless(closed: threading.Event):
    """0, 1, 2, … for ever; sets ``closed`` when closed."""
    try:
        i = 0
        while True:
            yield i
            i += 1
    finally:
        closed.set()


def test_read_ahead_keeps_order_and_closes_its_source():
    closed = threading.Event()

    def source():
        try:
            yield from range(100)
        finally:
            closed.set()

    assert list(read_ahead(source(), depth=2)) == list(range(100))
    assert closed.wait(1.0)


def test_read_ahead_passes_errors_and_stops_early():
    def broken():
        yield 1
        raise ValueError("bad frame")

    it = read_ahead(broken())
    assert next(it) == 1
    with pytest.raises(ValueError, match="bad frame"):
        next(it)

    closed = threading.Event()

    it = read_ahead(_endless(closed), depth=2)
    assert [next(it) for _ in range(5)] == [0, 1, 2, 3, 4]
    it.close()
    assert closed.wait(1.0)


def test_write_behind_writes_in_order_and_reports_errors():
    got = []
    w = WriteBehind(got.append, depth=2)
    for i in range(50):
        w.put(i)
    w.close()
    assert got == list(range(50))

    def sink(item):
        if item == 3:
            raise OSError("disk full")

    w = WriteBehind(sink, depth=1)
    with pytest.raises(OSError, match="disk full"):
        for i in range(100):
            w.put(i)
        w.close()


def test_read_ahead_interrupted_while_starting_still_stops_its_producer(monkeypatch):
    """An interruption that lands while the thread is being started (the thread runs, the
    consumer never reached its loop) must still stop the producer and close the source
    before the consumer unwinds, so the caller can close the source itself at once."""
    import stabilize.prefetch as prefetch

    class StartThenInterrupted(threading.Thread):
        def start(self):
            super().start()
            raise KeyboardInterrupt

    monkeypatch.setattr(prefetch.threading, "Thread", StartThenInterrupted)
    closed = threading.Event()

    source = _endless(closed)
    it = read_ahead(source, depth=2)
    with pytest.raises(KeyboardInterrupt):
        next(it)
    # Closed by the producer before the consumer returned, not left running in its thread.
    assert closed.is_set()
    source.close()  # would raise "generator already executing" if the producer still ran


def test_write_behind_abort_drops_the_queue_without_waiting_on_a_stuck_sink():
    release = threading.Event()
    written = []

    def sink(item):
        release.wait(10.0)  # an encoder that takes nothing more
        written.append(item)

    w = WriteBehind(sink, depth=3)
    for i in range(4):  # one being written, three queued
        w.put(i)
    w.abort(wait_s=0.2)  # returns although the sink is stuck
    release.set()
    w._thread.join(5.0)
    assert not w._thread.is_alive()
    assert written == [0]  # the queued items were dropped, not written
