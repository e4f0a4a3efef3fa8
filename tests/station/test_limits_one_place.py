"""One answer to "is this setpoint allowed": recipe check, preflight and step handler agree.

The station's limits (station/data/sim_station.yaml) are the reference: the same refusal text
comes from StationLimits whether the recipe is checked or a handler is handed a step directly
(a resumed or hand-built plan), and the handler sends nothing.
"""

from __future__ import annotations

from types import SimpleNamespace

import pytest

from drivers.errors import LimitError
from sequences.plansteps import BlackbodyStep, MoveStep
from sequences.yamlsource import SourceRef
from station.engine.steps import run_blackbody, run_move
from station.inputs.config import load_station

AT = SourceRef("hand.yaml", 3, 5)


class Recorder:
    """Stands in for every instrument: records each call, so 'nothing was sent' is checkable."""

    def __init__(self) -> None:
        self.calls: list[str] = []

    def __getattr__(self, name: str):
        return lambda *a, **k: self.calls.append(name)


@pytest.fixture
def ctx():
    station = load_station(None)
    bench = SimpleNamespace(blackbody=Recorder(), stage=Recorder())
    return SimpleNamespace(station=station, bench=bench)


def test_handler_refuses_a_blackbody_setpoint_outside_the_station_limits(ctx) -> None:
    high = ctx.station.blackbody_limits.max_difference_k + 5.0
    step = BlackbodyStep("s1.blackbody", AT, {}, mode="difference", setpoint=high)
    with pytest.raises(LimitError) as info:
        run_blackbody(step, ctx)
    expected = ctx.station.limits.setpoint_problem("difference", high)
    assert expected is not None and expected.message in str(info.value)
    assert "nothing was sent" in str(info.value)
    assert ctx.bench.blackbody.calls == []


def test_handler_refuses_a_stage_position_outside_the_soft_limits(ctx) -> None:
    az = ctx.station.axes["az"]
    step = MoveStep("s2.move", AT, {}, position={"el": 0.0, "az": az.maximum + 1.0})
    with pytest.raises(LimitError, match=r"az = 41 is outside the soft limits -40 \.\. 40"):
        run_move(step, ctx)
    assert ctx.bench.stage.calls == []


def test_limits_answer_edges_inclusively_and_unknown_axes_by_name(ctx) -> None:
    limits = ctx.station.limits
    lim = ctx.station.blackbody_limits
    assert limits.setpoint_problem("absolute", lim.max_c) is None
    assert limits.setpoint_problem("absolute", lim.max_c + 1e-9) is not None
    assert limits.position_problem("roll", 0.0).message == "the stage has no axis 'roll'"
