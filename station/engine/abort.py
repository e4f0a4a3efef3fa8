"""Operator requests that reach the sequencer from signal handlers or other threads.

Why the handlers do no I/O: a Python signal handler runs in the main thread between two bytecodes,
which may be in the middle of a buffered write to the event log. A handler that logged would
re-enter that write (`RuntimeError: reentrant call inside <_io.BufferedWriter ...>`) and fault the
run it was meant to stop. So a handler only assigns plain attributes and appends its message to a
deque (both atomic under the interpreter lock, no lock of ours taken); the sequencer loop calls
`check()` or `deliver_notices()` at its safe points, and only then are the messages logged.
Safing always runs to its end: a second Ctrl-C is reported, never obeyed by skipping it.

Example::

    requests = OperatorRequests()
    with abort_on_signals(requests, notify=lambda text: log("warning", text)):
        ...                     # the loop calls requests.check() between frames and polls
"""

from __future__ import annotations

import signal
import threading
import time
from collections import deque
from collections.abc import Callable, Iterator
from contextlib import contextmanager

PAUSE_POLL_S = 0.05
"""Real seconds between looks at the flags while paused (a person is deciding; no hurry)."""


class RunInterrupted(Exception):
    """Raised inside a step when the operator asked to stop; the sequencer turns it into safing."""


class OperatorRequests:
    """Abort and pause flags, set from signal handlers or other threads without taking a lock.

    `notices` holds messages for the operator that the handlers could not print; the loop hands
    them to `listener` (set by `abort_on_signals`) in `deliver_notices`.
    """

    def __init__(self) -> None:
        self._abort = False
        self._pause = False
        self.abort_cause = ""
        self.abort_count = 0
        self.notices: deque[str] = deque()
        self.listener: Callable[[str], None] | None = None

    # -- called from signal handlers: plain assignments and deque appends only ---------------------
    def request_abort(self, cause: str) -> None:
        self.abort_count += 1
        if not self._abort:
            self.abort_cause = cause
            self._abort = True

    def request_pause(self) -> None:
        self._pause = True

    def request_resume(self) -> None:
        self._pause = False

    def notice(self, text: str) -> None:
        """Queue a message for the operator; printed by the loop, never by the caller."""
        self.notices.append(text)

    # -- called from the sequencer loop ------------------------------------------------------------
    @property
    def abort_requested(self) -> bool:
        return self._abort

    @property
    def pause_requested(self) -> bool:
        return self._pause

    def deliver_notices(self) -> None:
        """Hand queued messages to the listener (the run's log); call only from the loop."""
        while self.notices:
            text = self.notices.popleft()
            if self.listener is not None:
                self.listener(text)

    def check(self) -> None:
        """Deliver notices, then raise RunInterrupted if an abort is pending (every safe point)."""
        self.deliver_notices()
        if self._abort:
            raise RunInterrupted(self.abort_cause)

    def wait_for_operator(self, seconds: float) -> None:
        """While paused: wait (real time: a person decides) until resumed, aborted or timed out."""
        end = time.monotonic() + max(seconds, 0.0)
        while self._pause and not self._abort:
            left = end - time.monotonic()
            if left <= 0:
                break
            time.sleep(min(PAUSE_POLL_S, left))
        self.deliver_notices()


def signal_message(signum: int, already_aborting: bool) -> str:
    """What the operator is told about a signal (queued by the handler, printed by the loop)."""
    name = signal.Signals(signum).name
    if signum == getattr(signal, "SIGUSR1", None):
        return "SIGUSR1 received: pausing after the step in progress (SIGUSR2 continues)"
    if signum == getattr(signal, "SIGUSR2", None):
        return "SIGUSR2 received: continuing"
    if already_aborting:
        return f"{name} received again: already aborting, safing the bench first"
    return f"{name} received: aborting after safing the bench"


@contextmanager
def abort_on_signals(requests: OperatorRequests,
                     notify: Callable[[str], None] | None = None) -> Iterator[None]:
    """Route SIGINT and SIGTERM to an orderly abort, SIGUSR1 to pause and SIGUSR2 to continue,
    for the duration of a run (`kill -USR1 PID` pauses at the next step boundary).

    `notify` receives the messages about the signals, from the loop (see the module docstring).
    """
    pausing = tuple(getattr(signal, n) for n in ("SIGUSR1", "SIGUSR2") if hasattr(signal, n))

    def pause_handler(signum: int, _frame: object) -> None:
        if signum == pausing[0]:
            requests.request_pause()
        else:
            requests.request_resume()
        requests.notice(signal_message(signum, False))

    def handler(signum: int, _frame: object) -> None:
        requests.notice(signal_message(signum, requests.abort_requested))
        requests.request_abort(f"operator signal {signal.Signals(signum).name}")

    previous_listener = requests.listener
    if notify is not None:
        requests.listener = notify
    if threading.current_thread() is not threading.main_thread():
        try:
            yield
        finally:
            requests.listener = previous_listener
        return
    previous = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, *pausing)}
    for s in previous:
        signal.signal(s, pause_handler if s in pausing else handler)
    try:
        yield
    finally:
        for s, h in previous.items():
            signal.signal(s, h)
        requests.deliver_notices()
        requests.listener = previous_listener
