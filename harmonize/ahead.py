"""Produce the items of an iterator on a background thread, a fixed number ahead of their use.

A build reads and reshapes the next batch of a source while it assembles the current one.
Both are mostly Arrow and numpy work, which run without Python's global lock, so on two cores
the two overlap. Items arrive in order; an error raised while producing one is raised where
that item would have been taken; when the consumer stops early (an error of its own, or it
closes the generator) the producer stops too and closes its iterator (and so its files).
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator
from typing import TypeVar

T = TypeVar("T")

_WAIT = 0.05  # seconds between looks at the stop flag while the queue is full


class _End:
    """The last message: the iterator is exhausted, or `error` ended it."""

    def __init__(self, error: BaseException | None = None) -> None:
        self.error = error


def ahead(items: Iterator[T], depth: int = 1, name: str = "harmonize-ahead") -> Iterator[T]:
    """The items of `items` in order, produced on a thread at most `depth` items ahead."""
    if depth < 1:
        raise ValueError("depth must be at least 1")
    waiting: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(message: object) -> bool:
        while not stop.is_set():
            try:
                waiting.put(message, timeout=_WAIT)
                return True
            except queue.Full:
                continue
        return False

    def produce() -> None:
        try:
            for item in items:
                if not put(item):
                    return
            put(_End())
        except BaseException as error:  # noqa: BLE001 - handed to the consumer, raised there
            put(_End(error))
        finally:
            close = getattr(items, "close", None)
            if close is not None:
                close()

    thread = threading.Thread(target=produce, name=name, daemon=True)
    thread.start()
    try:
        while True:
            message = waiting.get()
            if isinstance(message, _End):
                if message.error is not None:
                    raise message.error
                return
            yield message
    finally:
        stop.set()
        thread.join()
