"""Operator requests that reach the sequencer from signal handlers or other threads.

Signal handlers only set flags here; the sequencer loop looks at them between frames and between
polls, so safing always runs to its end (a second Ctrl-C is logged, never obeyed by skipping it).
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager


class RunInterrupted(Exception):
    """Raised inside a step when the operator asked to stop; the sequencer turns it into safing."""


class OperatorRequests:
    """Thread-safe flags: abort (with its cause) and pause."""

    def __init__(self) -> None:
        self._abort = threading.Event()
        self._pause = threading.Event()
        self._wake = threading.Event()
        self.abort_cause = ""
        self.abort_count = 0

    def request_abort(self, cause: str) -> None:
        self.abort_count += 1
        if not self._abort.is_set():
            self.abort_cause = cause
            self._abort.set()
        self._wake.set()

    @property
    def abort_requested(self) -> bool:
        return self._abort.is_set()

    def check(self) -> None:
        """Raise RunInterrupted if an abort is pending (called at every safe point)."""
        if self._abort.is_set():
            raise RunInterrupted(self.abort_cause)

    def request_pause(self) -> None:
        self._pause.set()

    def request_resume(self) -> None:
        self._pause.clear()
        self._wake.set()

    def wait_for_operator(self, seconds: float) -> None:
        """While paused: wait (real time: a person decides) until resumed, aborted or timed out."""
        self._wake.wait(seconds)
        self._wake.clear()

    @property
    def pause_requested(self) -> bool:
        return self._pause.is_set()


@contextmanager
def abort_on_signals(requests: OperatorRequests,
                     notify: Callable[[str], None] | None = None) -> Iterator[None]:
    """Route SIGINT and SIGTERM to an orderly abort, SIGUSR1 to pause and SIGUSR2 to continue,
    for the duration of a run (`kill -USR1 PID` pauses at the next step boundary)."""

    def pause_handler(signum: int, _frame: object) -> None:
        if signum == signal.SIGUSR1:
            requests.request_pause()
            message = "SIGUSR1 received: pausing after the step in progress (SIGUSR2 continues)"
        else:
            requests.request_resume()
            message = "SIGUSR2 received: continuing"
        if notify is not None:
            notify(message)

    def handler(signum: int, _frame: object) -> None:
        name = signal.Signals(signum).name
        if requests.abort_requested:
            message = f"{name} received again: already aborting, safing the bench first"
        else:
            message = f"{name} received: aborting after safing the bench"
        requests.request_abort(f"operator signal {name}")
        if notify is not None:
            notify(message)

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pausing = tuple(getattr(signal, n) for n in ("SIGUSR1", "SIGUSR2") if hasattr(signal, n))
    previous = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, *pausing)}
    for s in previous:
        signal.signal(s, pause_handler if s in pausing else handler)
    try:
        yield
    finally:
        for s, h in previous.items():
            signal.signal(s, h)
