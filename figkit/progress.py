"""What a long figure job is doing, on one line that updates: on a terminal only.

A figure job that takes more than DELAY_S seconds shows its stage (reading N rows, binning,
drawing, writing PDF/PNG/SVG, ...) on standard error as ``figkit: <id>: <stage>``, rewritten in
place (carriage return) and cleared when the job ends.  When standard error is not a terminal
(a log file, a pipe, CI) nothing is written at all, so logs stay clean.
"""
from __future__ import annotations

import sys
import threading
import time
from contextlib import contextmanager

DELAY_S = 2.0        # shorter jobs show nothing: the line would only flicker


class Progress:
    """One job's progress line.  ``stage(text)`` says what it does now; ``close()`` clears it."""

    def __init__(self, label: str | None, stream=None):
        self.stream = stream if stream is not None else sys.stderr
        try:
            self.on = bool(self.stream.isatty())
        except (AttributeError, ValueError):      # no isatty, or a closed stream
            self.on = False
        self.label, self.text, self.width, self.shown = label, "", 0, False
        self.start = time.monotonic()
        self._lock = threading.Lock()
        self._timer = None
        if self.on:            # a stage that starts early and lasts long still shows at DELAY_S
            self._timer = threading.Timer(DELAY_S, self._show)
            self._timer.daemon = True
            self._timer.start()

    def stage(self, text: str) -> None:
        self.text = text
        if self.on and (self.shown or time.monotonic() - self.start >= DELAY_S):
            self._show()

    def _show(self) -> None:
        with self._lock:
            if not self.on or not self.text:
                return
            line = f"figkit: {self.label}: {self.text}" if self.label else f"figkit: {self.text}"
            try:
                self.stream.write("\r" + line + " " * max(0, self.width - len(line)))
                self.stream.flush()
            except (OSError, ValueError):
                self.on = False
                return
            self.width, self.shown = len(line), True

    def close(self) -> None:
        if self._timer is not None:
            self._timer.cancel()
        with self._lock:
            if self.on and self.shown:
                try:
                    self.stream.write("\r" + " " * self.width + "\r")
                    self.stream.flush()
                except (OSError, ValueError):
                    pass
            self.on = False


_current: Progress | None = None


@contextmanager
def job(label: str | None, stream=None):
    """The progress line of one figure job; :func:`stage` calls inside it go to this line."""
    global _current
    outer, _current = _current, Progress(label, stream)
    try:
        yield _current
    finally:
        _current.close()
        _current = outer


def stage(text: str) -> None:
    """Say what the current job does now (nothing outside a job, or off a terminal)."""
    if _current is not None:
        _current.stage(text)


def current() -> Progress | None:
    return _current
