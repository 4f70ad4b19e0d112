"""A status line that appears only when work takes more than a moment."""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable, Iterator

from rich.console import Console

DELAY_SECONDS = 0.4


@contextlib.contextmanager
def delayed_status(console: Console, first: str = "Working") -> Iterator[Callable[[str], None]]:
    """Yield a callback taking step messages; a spinner shows them once DELAY_SECONDS pass."""
    message = [first]
    status = console.status(first, spinner="dots")
    started = threading.Event()
    lock = threading.Lock()

    def start() -> None:
        with lock:
            if not started.is_set() and console.is_terminal:
                status.update(message[0])
                status.start()
                started.set()

    timer = threading.Timer(DELAY_SECONDS, start)
    timer.daemon = True
    timer.start()

    def update(text: str) -> None:
        with lock:
            message[0] = text
            if started.is_set():
                status.update(text)

    try:
        yield update
    finally:
        timer.cancel()
        with lock:
            if started.is_set():
                status.stop()
            started.set()  # a late timer must not start the spinner after the work ended
