"""The workflow's stop of Snakemake's rate-limit timer relies on a private Snakemake name, so it
must degrade to doing nothing when that name changes or looks different.  Reference: the Python
standard library's threading.Timer (a cancelled timer never calls its function; Timer.finished
is set by cancel())."""
from __future__ import annotations

import threading

import figkit.workflow
from figkit.workflow import stop_rate_timers

# Snakemake's private callback name (its own spelling), as figkit looks for it
RATE_TIMER_NAME = getattr(figkit.workflow, "RATE_TIMER_NAME", "_schedule_reevalutation")


class _Odd:
    """A callable whose __qualname__ is not text (as a wrapped callable's may be)."""

    def __init__(self):
        self.__qualname__ = None

    def __call__(self):
        pass


def _timer(fn) -> threading.Timer:
    t = threading.Timer(30.0, fn)
    t.daemon = True
    t.start()
    return t


def test_stops_only_the_named_timer():
    def named():
        pass
    named.__qualname__ = f"Scheduler.{RATE_TIMER_NAME}"

    def other():
        pass
    ours, theirs = _timer(named), _timer(other)
    try:
        assert stop_rate_timers() == 1
        assert ours.finished.is_set() and not theirs.finished.is_set()
    finally:
        theirs.cancel()
        for t in (ours, theirs):     # a cancelled timer's thread ends soon after: wait for it
            t.join(5)


def test_no_op_when_the_private_name_is_missing_or_odd():
    def renamed():
        pass
    renamed.__qualname__ = "Scheduler.some_future_name"
    timers = [_timer(renamed), _timer(_Odd())]
    try:
        assert stop_rate_timers() == 0          # nothing raised, nothing stopped
        assert not any(t.finished.is_set() for t in timers)
    finally:
        for t in timers:
            t.cancel()
            t.join(5)
