"""`harmonize.ahead`: items produced on a thread, in order, errors where they belong."""

from __future__ import annotations

import threading
import time

import pytest

from harmonize.ahead import ahead


def test_items_arrive_in_order_and_all_of_them():
    assert list(ahead(iter(range(1000)), depth=3)) == list(range(1000))


def test_an_empty_iterator_gives_nothing():
    assert list(ahead(iter([]))) == []


def test_producer_stays_at_most_depth_items_ahead():
    produced = []

    def items():
        for i in range(20):
            produced.append(i)
            yield i

    for taken in ahead(items(), depth=2):
        time.sleep(0.01)  # a slow consumer: the producer would run away if unbounded
        # taken + 1 items used or handed over, 2 waiting, 1 made and waiting to be put
        assert len(produced) <= taken + 1 + 2 + 1


def test_error_is_raised_where_its_item_would_have_been_taken():
    def items():
        yield "a"
        yield "b"
        raise ValueError("row 3 is bad")

    got = []
    with pytest.raises(ValueError, match="row 3 is bad"):
        for item in ahead(items()):
            got.append(item)
    assert got == ["a", "b"]


def test_stopping_early_stops_the_producer_and_closes_its_iterator():
    closed = threading.Event()

    def items():
        try:
            yield from range(10_000)
        finally:
            closed.set()

    stream = ahead(items(), depth=1, name="test-ahead")
    assert next(stream) == 0
    stream.close()  # what a failing consumer's `for` loop does
    assert closed.wait(5)
    assert not any(t.name == "test-ahead" and t.is_alive() for t in threading.enumerate())


def test_depth_must_be_positive():
    with pytest.raises(ValueError, match="depth"):
        list(ahead(iter([1]), depth=0))
