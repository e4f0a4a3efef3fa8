"""The run's state table, written out in one place.

States and the triggers that move between them. Every way out of a run except `complete` passes
through `safing` (blackbody to its safe setpoint, stage parked) before it reaches `aborted` or
`faulted`. The table is data; the sequencer loop (station/engine/sequencer.py) fires the triggers and runs
the steps outside any callback (transitions holds its lock through callbacks, see FIELD-NOTES).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from transitions import Machine

STATES = ["idle", "preflight", "running", "held", "paused", "safing",
          "complete", "aborted", "faulted"]
END_STATES = frozenset({"complete", "aborted", "faulted"})
ACTIVE = ["preflight", "running", "held", "paused"]

# trigger, source(s), destination. Trigger names never clash with RunStatus attributes.
TRANSITIONS: list[dict[str, object]] = [
    {"trigger": "start_preflight", "source": "idle", "dest": "preflight"},
    {"trigger": "preflight_passed", "source": "preflight", "dest": "running"},
    {"trigger": "guard_failed", "source": "running", "dest": "held"},
    {"trigger": "guard_recovered", "source": "held", "dest": "running"},
    {"trigger": "operator_pause", "source": "running", "dest": "paused"},
    {"trigger": "operator_resume", "source": "paused", "dest": "running"},
    {"trigger": "plan_finished", "source": "running", "dest": "complete"},
    {"trigger": "request_abort", "source": ACTIVE, "dest": "safing"},
    {"trigger": "request_fault", "source": ACTIVE, "dest": "safing"},
    {"trigger": "safe_after_abort", "source": "safing", "dest": "aborted"},
    {"trigger": "safe_after_fault", "source": "safing", "dest": "faulted"},
]


@dataclass
class RunStatus:
    """The machine's model: current state plus why it got there."""

    on_change: Callable[[str, str, str, str], None] | None = None
    cause: str = ""
    history: list[tuple[str, str, str]] = field(default_factory=list)
    state: str = "idle"

    def record_transition(self, event) -> None:  # called by transitions with send_event=True
        cause = str(event.kwargs.get("cause", ""))
        self.cause = cause
        source = event.transition.source
        self.history.append((source, self.state, cause))
        if self.on_change is not None:
            self.on_change(source, self.state, event.event.name, cause)

    @property
    def finished(self) -> bool:
        return self.state in END_STATES


def build_machine(status: RunStatus) -> Machine:
    """Attach the state table to `status`; invalid triggers raise (MachineError)."""
    return Machine(model=status, states=STATES, transitions=TRANSITIONS, initial="idle",
                   send_event=True, after_state_change="record_transition",
                   auto_transitions=False, ignore_invalid_triggers=False)


def mermaid_diagram() -> str:
    """The state table as a mermaid diagram (for the contributor guide)."""
    lines = ["stateDiagram-v2", "    [*] --> idle"]
    for t in TRANSITIONS:
        sources = t["source"] if isinstance(t["source"], list) else [t["source"]]
        for s in sources:
            lines.append(f"    {s} --> {t['dest']}: {t['trigger']}")
    for end in sorted(END_STATES):
        lines.append(f"    {end} --> [*]")
    return "\n".join(lines)
