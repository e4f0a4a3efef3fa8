"""Tools for people who write drivers: a scripted conversation and an interface contract runner.

Scripted conversation: the driver talks to a fake transport that holds the exchange the
instrument's manual describes. Each request is checked against the script; a wrong command fails
at once with both lines, a caret at the first difference and the conversation so far::

    script = Script.parse('''
        > SOUR:TEMP 35.000
        < OK
        > MEAS:TEMP?
        < 34.998
    ''')
    with ScriptedTransport(script, instrument="blackbody") as link:
        bb = MyBlackbody(link, name="blackbody", settings=SETTINGS)
        bb.set_temperature(35.0)
        assert bb.temperature() == 34.998
    # leaving the block checks that every scripted request was sent

Contract runner: `run_contract(driver, clock)` exercises every method of the driver's interface
against its simulator (or a real instrument on a safe bench) and returns a `ContractReport` of
named checks with the numbers seen; `report.raise_if_failed()` in a test.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

from drivers.clock import Clock, SimClock
from drivers.errors import LimitError
from drivers.interfaces import Blackbody, FrameGrabber, Instrument, MotionStage, TargetWheel
from drivers.recovery import RetryPolicy
from drivers.transport import ResourceInfo, Transport


class ConversationMismatch(AssertionError):
    """The driver said something the script did not expect (or left part of it unsaid)."""


@dataclass(frozen=True)
class Exchange:
    """One scripted step: the request the driver must send and the reply to give (None: none)."""

    request: str
    reply: str | None


@dataclass(frozen=True)
class Script:
    """An ordered conversation."""

    steps: tuple[Exchange, ...]

    @classmethod
    def of(cls, pairs: Iterable[tuple[str, str | None]]) -> Script:
        return cls(tuple(Exchange(req, rep) for req, rep in pairs))

    @classmethod
    def parse(cls, text: str) -> Script:
        """`> request` and `< reply` lines (a request without a `<` line gets no reply);
        blank lines and lines starting with `#` are ignored."""
        steps: list[Exchange] = []
        pending: str | None = None
        for n, raw in enumerate(text.splitlines(), 1):
            line = raw.strip()
            if not line or line.startswith("#"):
                continue
            marker, body = line[0], line[1:].strip()
            if marker == ">":
                if pending is not None:
                    steps.append(Exchange(pending, None))
                pending = body
            elif marker == "<":
                if pending is None:
                    raise ValueError(f"script line {n}: reply {body!r} has no request before it")
                steps.append(Exchange(pending, body))
                pending = None
            else:
                raise ValueError(f"script line {n}: start with '>' (request) or '<' (reply), "
                                 f"not {raw!r}")
        if pending is not None:
            steps.append(Exchange(pending, None))
        return cls(tuple(steps))


def _caret(expected: str, sent: str) -> int:
    for i, (a, b) in enumerate(zip(expected, sent)):
        if a != b:
            return i
    return min(len(expected), len(sent))


class ScriptedTransport(Transport):
    """A Transport that plays a Script; parse errors and retries behave as in the real one."""

    def __init__(self, script: Script | Sequence[tuple[str, str | None]], *,
                 instrument: str = "instrument", clock: Clock | None = None,
                 policy: RetryPolicy | None = None) -> None:
        info = ResourceInfo("script://", "serial", "script", "script")
        super().__init__(info, instrument=instrument, clock=clock or SimClock(), timeout_s=1.0,
                         policy=policy or RetryPolicy(retries=0), events=None,
                         read_termination="\n", write_termination="\n")
        self.script = script if isinstance(script, Script) else Script.of(script)
        self.sent: list[str] = []
        self.closed = False

    def _open_link(self) -> None:
        self.closed = False

    def _close_link(self) -> None:
        self.closed = True

    def _exchange(self, command: str, expect_reply: bool) -> str | None:
        i = len(self.sent)
        steps = self.script.steps
        if i >= len(steps):
            raise ConversationMismatch(self._message(
                f"the driver sent {command!r} after the script ended ({len(steps)} steps)"))
        step = steps[i]
        if command != step.request:
            col = _caret(step.request, command)
            raise ConversationMismatch(self._message(
                f"step {i + 1} of {len(steps)}: the driver sent a different command\n"
                f"  expected: {step.request}\n"
                f"  sent:     {command}\n"
                f"            {' ' * col}^ first difference at column {col + 1}"))
        self.sent.append(command)
        if expect_reply and step.reply is None:
            raise ConversationMismatch(self._message(
                f"step {i + 1}: the driver waits for a reply to {command!r}, the script has none"))
        return step.reply if expect_reply else None

    def _message(self, what: str) -> str:
        lines = [f"{self.instrument}: {what}", "conversation so far:"]
        for n, (req, step) in enumerate(zip(self.sent, self.script.steps), 1):
            lines.append(f"  {n:>3} > {req:<28} < {step.reply if step.reply is not None else ''}")
        if not self.sent:
            lines.append("  (nothing sent yet)")
        return "\n".join(lines)

    def unsent(self) -> tuple[Exchange, ...]:
        return self.script.steps[len(self.sent):]

    def assert_finished(self) -> None:
        """Every scripted request was sent."""
        rest = self.unsent()
        if rest:
            listing = "\n".join(f"  > {s.request}" for s in rest)
            raise ConversationMismatch(self._message(
                f"{len(rest)} scripted request(s) never sent:\n{listing}"))

    def __exit__(self, exc_type: Any, *exc: object) -> None:
        super().__exit__(exc_type, *exc)
        if exc_type is None:
            self.assert_finished()


# --- contract runner ------------------------------------------------------------------------

@dataclass(frozen=True)
class Check:
    """One contract check with what was seen."""

    name: str
    passed: bool
    detail: str


@dataclass
class ContractReport:
    """All checks run against one driver."""

    driver: str
    kind: str
    checks: list[Check] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return all(c.passed for c in self.checks)

    def failures(self) -> list[Check]:
        return [c for c in self.checks if not c.passed]

    def summary(self) -> str:
        lines = [f"{self.driver} ({self.kind}): {sum(c.passed for c in self.checks)}/"
                 f"{len(self.checks)} checks passed"]
        lines += [f"  [{'ok' if c.passed else 'FAIL'}] {c.name}: {c.detail}" for c in self.checks]
        return "\n".join(lines)

    def raise_if_failed(self) -> None:
        if not self.passed:
            raise AssertionError(self.summary())


class _Runner:
    def __init__(self, driver: Instrument, clock: Clock, report: ContractReport) -> None:
        self.driver, self.clock, self.report = driver, clock, report

    def check(self, name: str, fn: Callable[[], tuple[bool, str]]) -> None:
        try:
            ok, detail = fn()
        except Exception as exc:  # a contract check reports every failure, it never stops early
            ok, detail = False, f"raised {type(exc).__name__}: {exc}"
        self.report.checks.append(Check(name, bool(ok), detail))

    def wait(self, done: Callable[[], bool], timeout_s: float, poll_s: float) -> float:
        """Clock seconds until `done()`; raises TimeoutError after `timeout_s`."""
        start = self.clock.now()
        while not done():
            if self.clock.now() - start > timeout_s:
                raise TimeoutError(f"not done after {timeout_s:g} s")
            self.clock.sleep(poll_s)
        return self.clock.now() - start


def _refuses(call: Callable[[], Any]) -> bool:
    try:
        call()
    except (LimitError, KeyError):
        return True
    return False


def _blackbody(r: _Runner, bb: Blackbody, opts: dict[str, float]) -> None:
    lo, hi = bb.setpoint_range("absolute")
    target = opts.get("temperature_c", min(max(30.0, lo), hi))
    tol = opts.get("tolerance_k", 0.05)

    def absolute() -> tuple[bool, str]:
        bb.set_mode("absolute")
        mode = bb.mode()
        return mode == "absolute", f"mode {mode}"

    def setpoint() -> tuple[bool, str]:
        bb.set_temperature(target)
        sp = bb.setpoint()
        return abs(sp - target) < 1e-3, f"set {target}, setpoint {sp}"

    def settles() -> tuple[bool, str]:
        waited = r.wait(bb.is_stable, opts.get("settle_timeout_s", 3600.0), 5.0)
        temp = bb.temperature()
        return abs(temp - target) < tol, f"stable after {waited:.0f} s at {temp:.3f} C " \
                                         f"(tolerance {tol} K)"

    def reference() -> tuple[bool, str]:
        ref, diff, temp = bb.reference_temperature(), bb.difference(), bb.temperature()
        return (math.isfinite(ref) and abs(diff - (temp - ref)) < 5 * tol,
                f"reference {ref:.3f} C, difference {diff:.3f} K")

    def difference() -> tuple[bool, str]:
        bb.set_difference(2.0)
        sp, mode = bb.setpoint(), bb.mode()
        return abs(sp - 2.0) < 1e-3 and mode == "difference", f"setpoint {sp} K in {mode} mode"

    def refuses() -> tuple[bool, str]:
        before = bb.setpoint()
        refused = _refuses(lambda: bb.set_temperature(hi + 10.0))
        after = bb.setpoint()
        return refused and after == before, f"{hi + 10.0} C refused {refused}, setpoint {after}"

    def safe() -> tuple[bool, str]:
        bb.go_safe()
        sp, mode = bb.setpoint(), bb.mode()
        return mode == "absolute" and abs(sp - getattr(bb, "safe_c", sp)) < 1e-3, f"{mode} {sp}"

    for name, fn in (("set_mode/mode absolute", absolute), ("set_temperature/setpoint", setpoint),
                     ("settles at the setpoint", settles), ("reference and difference", reference),
                     ("set_difference", difference), ("refuses out-of-limit setpoint", refuses),
                     ("go_safe", safe)):
        r.check(name, fn)


def _wheel(r: _Runner, wh: TargetWheel, opts: dict[str, float]) -> None:
    names = wh.slot_names()
    timeout = opts.get("move_timeout_s", 120.0)

    def settle() -> float:
        return r.wait(lambda: not wh.is_moving(), timeout, 0.25)

    def count() -> tuple[bool, str]:
        n = wh.slot_count()
        return n >= max(names), f"{n} slots, named {sorted(names)}"

    def select(slot: int) -> tuple[bool, str]:
        wh.select_slot(slot)
        waited = settle()
        now = wh.current_slot()
        return now == slot, f"slot {now} in the beam after {waited:.2f} s"

    def by_name() -> tuple[bool, str]:
        last = max(names)
        got = wh.select(names[last])
        settle()
        now = wh.current_slot()
        return got == last and now == last, f"{names[last]!r} -> slot {now}"

    def refuses() -> tuple[bool, str]:
        refused = _refuses(lambda: wh.select_slot(max(names) + 1))
        return refused, f"slot {max(names) + 1} refused {refused}"

    def home() -> tuple[bool, str]:
        wh.home()
        settle()
        now = wh.current_slot()
        return now is not None, f"slot {now} after homing"

    r.check("slot_count covers the named slots", count)
    for slot in sorted(names)[:3]:
        r.check(f"select slot {slot}", lambda s=slot: select(s))
    r.check("select by name", by_name)
    r.check("refuses a slot that does not exist", refuses)
    r.check("home", home)


def _stage(r: _Runner, st: MotionStage, opts: dict[str, float]) -> None:
    axes = st.axes()
    lims = {a: st.limits(a) for a in axes}
    tol = opts.get("position_tolerance", 0.01)
    timeout = opts.get("move_timeout_s", 120.0)

    def settle() -> float:
        return r.wait(lambda: not st.is_moving(), timeout, 0.1)

    def limits() -> tuple[bool, str]:
        return (bool(axes) and all(lim.minimum < lim.maximum for lim in lims.values()),
                ", ".join(f"{a} {lim.minimum}..{lim.maximum} {lim.unit}" for a, lim in lims.items()))

    def moves() -> tuple[bool, str]:
        # three quarters of the way up each axis's range: inside limits, away from zero
        targets = {a: lim.minimum + 0.75 * (lim.maximum - lim.minimum) for a, lim in lims.items()}
        st.move_to(targets)
        waited = settle()
        pos = st.positions()
        return (all(abs(pos[a] - targets[a]) < tol for a in axes),
                f"{pos} for {targets} after {waited:.2f} s (tolerance {tol})")

    def refuses() -> tuple[bool, str]:
        before = st.positions()
        beyond = {a: lims[a].park for a in axes} | {axes[0]: lims[axes[0]].maximum + 1.0}
        refused = _refuses(lambda: st.move_to(beyond))
        settle()
        pos = st.positions()
        return (refused and all(abs(pos[a] - before[a]) < tol for a in axes),
                f"refused {refused}, positions kept {pos}")

    def stops() -> tuple[bool, str]:
        st.move_to({axes[0]: lims[axes[0]].park})
        st.stop()
        moving = st.is_moving()
        return not moving, f"moving after stop: {moving}"

    def parks() -> tuple[bool, str]:
        st.park()
        settle()
        pos = st.positions()
        return all(abs(pos[a] - lims[a].park) < tol for a in axes), f"{pos}"

    for name, fn in (("axes and limits", limits), ("move_to reaches targets", moves),
                     ("refuses out-of-limit move, moves nothing", refuses), ("stop", stops),
                     ("park", parks)):
        r.check(name, fn)


def _grabber(r: _Runner, gr: FrameGrabber, opts: dict[str, float]) -> None:
    count = int(opts.get("frames", 3))

    def properties() -> tuple[bool, str]:
        shape, depth, rate = gr.shape, gr.bit_depth, gr.frame_rate
        return (len(shape) == 2 and min(shape) > 0 and 1 <= depth <= 32 and rate > 0,
                f"{shape}, {depth} bit, {rate} fps")

    def frames() -> tuple[bool, str]:
        got = list(gr.grab(count))
        counters = [f.counter for f in got]
        shapes = {tuple(f.data.shape) for f in got}
        top = max(float(f.data.max()) for f in got) if got else math.nan
        ok = (len(got) == count and shapes == {tuple(gr.shape)}
              and all(b - a == 1 for a, b in zip(counters, counters[1:]))
              and top < 2 ** gr.bit_depth)
        return ok, f"{len(got)} frames, shapes {shapes}, counters {counters}, max {top}"

    r.check("shape, bit depth, frame rate", properties)
    r.check(f"grab({count}) consecutive frames", frames)


def run_contract(driver: Instrument, clock: Clock, **options: float) -> ContractReport:
    """Exercise the whole interface of `driver`; options tune targets and tolerances
    (temperature_c, tolerance_k, settle_timeout_s, position_tolerance, move_timeout_s, frames).
    Leaves a blackbody at its safe setpoint and a stage parked."""
    kind = ("blackbody" if isinstance(driver, Blackbody) else "wheel"
            if isinstance(driver, TargetWheel) else "stage" if isinstance(driver, MotionStage)
            else "grabber" if isinstance(driver, FrameGrabber) else "unknown")
    report = ContractReport(driver.name, kind)
    runner = _Runner(driver, clock, report)
    def identify() -> tuple[bool, str]:
        ident = driver.identify()
        return bool(ident.strip()), repr(ident)

    runner.check("identify", identify)
    run = {"blackbody": _blackbody, "wheel": _wheel, "stage": _stage,
           "grabber": _grabber}.get(kind)
    if run is None:
        report.checks.append(Check("interface", False, f"{type(driver).__name__} implements "
                                   "none of Blackbody, TargetWheel, MotionStage, FrameGrabber"))
        return report
    run(runner, driver, dict(options))  # type: ignore[arg-type]
    return report
