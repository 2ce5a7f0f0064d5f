"""Progress of the long steps (reading the log, fitting, bootstrap bands, writing) on a terminal.

Stages mark their work with ``with step("fitting the hazard models"):``; nothing is shown unless
the command line switched a display on with ``shown_on(sys.stderr)``, and that display is only
switched on when the stream is a terminal: piped or redirected, a successful run writes nothing
on stderr (tests/test_bad_input.py checks it)."""

from __future__ import annotations

import contextlib
import threading
import time
from collections.abc import Iterator
from contextvars import ContextVar
from typing import TextIO

_SPIN = "◐◓◑◒"


class TerminalProgress:
    """One line per step: a spinner and the seconds so far, then the step's time when done."""

    def __init__(self, stream: TextIO, interval: float = 0.25) -> None:
        self.stream = stream
        self.interval = interval
        self._lock = threading.Lock()

    def _write(self, text: str) -> None:
        with self._lock:
            self.stream.write(text)
            self.stream.flush()

    @contextlib.contextmanager
    def step(self, label: str) -> Iterator[None]:
        t0 = time.perf_counter()
        stop = threading.Event()

        def tick() -> None:
            n = 0
            while not stop.wait(self.interval):
                n += 1
                spent = time.perf_counter() - t0
                self._write(f"\r\033[K  {_SPIN[n % 4]} {label} … {spent:.0f} s")

        self._write(f"\r\033[K  {_SPIN[0]} {label} …")
        ticker = threading.Thread(target=tick, daemon=True)
        ticker.start()
        ok = False
        try:
            yield
            ok = True
        finally:
            stop.set()
            ticker.join()
            spent = time.perf_counter() - t0
            mark = "✓" if ok else "✗"
            self._write(f"\r\033[K  {mark} {label} ({spent:.1f} s)\n")


_display: ContextVar[TerminalProgress | None] = ContextVar("churnlife_progress", default=None)


@contextlib.contextmanager
def step(label: str) -> Iterator[None]:
    """Mark a long step; shown only while a display is switched on."""
    display = _display.get()
    if display is None:
        yield
        return
    with display.step(label):
        yield


@contextlib.contextmanager
def shown_on(stream: TextIO, enabled: bool = True) -> Iterator[bool]:
    """Show steps on ``stream`` while inside, if ``enabled`` and ``stream`` is a terminal;
    yields whether they are shown."""
    isatty = getattr(stream, "isatty", None)
    if not enabled or isatty is None or not isatty():
        yield False
        return
    token = _display.set(TerminalProgress(stream))
    try:
        yield True
    finally:
        _display.reset(token)
