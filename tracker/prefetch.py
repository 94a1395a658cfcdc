"""Decoding ahead of detection: :func:`prefetched` produces a stream's items in a worker thread (FFmpeg
releases the interpreter lock while it decodes), a bounded number ahead of the consumer."""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator
from typing import TypeVar

#: Decoded frames the decoding thread may run ahead of detection.
PREFETCH_DEPTH = 8

_T = TypeVar("_T")


class _Failure:
    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


_END = object()


def prefetched(items: Iterator[_T], depth: int = PREFETCH_DEPTH) -> Iterator[_T]:
    """The items of ``items``, produced by a worker thread up to ``depth`` ahead of the consumer.

    Memory holds at most ``depth`` items in flight. An exception in the worker is raised here, at the point
    of the stream where it happened; when the consumer stops early the worker stops and closes ``items``.
    """
    q: queue.Queue[object] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(x: object) -> bool:
        while not stop.is_set():
            try:
                q.put(x, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for x in items:
                if not put(x):
                    break
            else:
                put(_END)
        except BaseException as exc:  # handed to the consumer
            put(_Failure(exc))
        finally:
            close = getattr(items, "close", None)
            if close is not None:
                close()

    worker = threading.Thread(target=work, name="hopscope-decode", daemon=True)
    worker.start()
    try:
        while True:
            x = q.get()
            if x is _END:
                return
            if isinstance(x, _Failure):
                raise x.exc
            yield x  # type: ignore[misc]
    finally:
        stop.set()
        while True:
            try:
                q.get_nowait()
            except queue.Empty:
                break
        worker.join(timeout=5.0)
