"""Read-ahead and write-behind threads: order, errors, early close."""

import threading

import pytest

from stabilize.prefetch import WriteBehind, read_ahead


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

    def endless():
        try:
            i = 0
            while True:
                yield i
                i += 1
        finally:
            closed.set()

    it = read_ahead(endless(), depth=2)
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
