"""One console call, several listeners: the operator's screen and the live-status file.

The run engine talks to one console object; the command line hands it a tee so the live view for
a remote monitor (station.record.live) follows the same calls without the engine knowing.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Protocol

__all__ = ["ConsoleLike", "ConsoleTee"]


class ConsoleLike(Protocol):
    def start(self, plan_len: int, estimate_s: float, **kw: Any) -> None: ...
    def step(self, index: int, step_id: str, description: str = "", **kw: Any) -> None: ...
    def readings(self, values: Mapping[str, Any]) -> None: ...
    def log(self, level: str | int, text: str) -> None: ...
    def state(self, name: str, cause: str | None = None) -> None: ...
    def stop(self) -> None: ...


class ConsoleTee:
    """Forwards every console call to the screen first, then to the followers; anything else
    (attributes the sequencer may read) comes from the screen."""

    def __init__(self, screen: Any, *followers: ConsoleLike) -> None:
        self.screen = screen
        self.followers = followers

    def _each(self, name: str, *args: Any, **kwargs: Any) -> None:
        getattr(self.screen, name)(*args, **kwargs)
        for follower in self.followers:
            getattr(follower, name)(*args, **kwargs)

    def start(self, plan_len: int, estimate_s: float, **kw: Any) -> None:
        self._each("start", plan_len, estimate_s, **kw)

    def step(self, index: int, step_id: str, description: str = "", **kw: Any) -> None:
        self._each("step", index, step_id, description, **kw)

    def readings(self, values: Mapping[str, Any]) -> None:
        self._each("readings", values)

    def log(self, level: str | int, text: str) -> None:
        self._each("log", level, text)

    def state(self, name: str, cause: str | None = None) -> None:
        self._each("state", name, cause)

    def stop(self) -> None:
        self._each("stop")

    def __enter__(self) -> "ConsoleTee":
        self.screen.__enter__()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def __getattr__(self, name: str) -> Any:
        return getattr(self.screen, name)
