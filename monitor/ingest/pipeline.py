"""Reading ahead: parse and validate the next chunk while the current one is being stored.

Parsing (Arrow) and SQLite's statement execution release the GIL, so on a machine with
two cores reading and writing overlap. At most ``depth`` chunks wait, which keeps memory
bounded; an error in the reader reaches the consumer unchanged.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterable, Iterator
from typing import TypeVar

T = TypeVar("T")
_END = object()


def prefetch(items: Iterable[T], depth: int = 1) -> Iterator[T]:
    """Iterate over ``items``, produced by a worker thread up to ``depth`` items ahead."""
    slots: queue.Queue[tuple[object, object]] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def offer(kind: object, value: object) -> bool:
        while not stop.is_set():
            try:
                slots.put((kind, value), timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for item in items:
                if not offer(None, item):
                    return
            offer(_END, None)
        except BaseException as exc:  # handed to the consumer, which re-raises it
            offer(exc, None)

    worker = threading.Thread(target=work, name="fitwatch-reader", daemon=True)
    worker.start()
    try:
        while True:
            kind, value = slots.get()
            if kind is _END:
                return
            if isinstance(kind, BaseException):
                raise kind
            yield value  # type: ignore[misc]
    finally:
        stop.set()
        worker.join()
