"""Fault plan: triggers by command count, clock time and seeded probability are reproducible;
physics faults change what the simulators report."""

from __future__ import annotations

import math

import pytest

from drivers.clock import SimClock
from simulators.bench import SimBench
from simulators.faults import FaultPlan
from simulators.servers import BlackbodyProtocol, StageProtocol


def test_from_mapping_and_triggers():
    plan = FaultPlan.from_mapping({"seed": 4, "wheel": [{"kind": "timeout", "at_command": 3}],
                                   "blackbody": {"kind": "drift", "after_s": 100,
                                                 "rate_k_per_s": 0.01}}, t0=1000.0)
    assert plan.first_wire_fault("wheel", count=2, t=0) is None
    assert plan.first_wire_fault("wheel", count=3, t=0).kind == "timeout"
    assert plan.first_wire_fault("wheel", count=4, t=0) is None        # fires once
    assert not plan.should_fire("blackbody", "drift", t=1099.0)
    rule = plan.fire("blackbody", "drift", t=1100.0)
    assert rule.params == {"rate_k_per_s": 0.01}
    assert plan.counts() == {("wheel", "timeout"): 1, ("blackbody", "drift"): 1}


def test_probability_is_seeded_and_near_its_rate():
    def run(seed):
        plan = FaultPlan.from_mapping({"seed": seed, "grabber": [{"kind": "drop",
                                                                  "probability": 0.05}]})
        return [plan.should_fire("grabber", "drop", count=i) for i in range(4000)]
    a, b = run(11), run(11)
    assert a == b and run(12) != a
    # binomial(4000, 0.05): mean 200, sd sqrt(4000*0.05*0.95) = 13.8; allow 4 sd
    assert abs(sum(a) - 200) < 4 * math.sqrt(4000 * 0.05 * 0.95)


def test_bad_entries_are_refused_with_where_and_what():
    with pytest.raises(ValueError, match=r"faults.stage\[0\]: kind 'melt' unknown"):
        FaultPlan.from_mapping({"stage": [{"kind": "melt", "at_command": 1}]})
    with pytest.raises(ValueError, match="exactly one of"):
        FaultPlan.from_mapping({"wheel": [{"kind": "timeout"}]})


def test_physics_faults_through_the_protocol_handlers():
    clock = SimClock()
    bench = SimBench.from_mapping({"blackbody": {"noise_mk": 0.0},
                                   "faults": {"blackbody": [{"kind": "unsettled", "after_s": 50}],
                                              "stage": [{"kind": "hard_limit", "at_command": 1,
                                                         "axis": "el"}]}}, clock)
    bb, st = BlackbodyProtocol(bench), StageProtocol(bench)
    clock.sleep(40.0)
    assert bb("STAT:STAB?").text == "1"      # resting at its start setpoint for 40 s
    clock.sleep(20.0)
    assert bb("STAT:STAB?").text == "0"      # the controller hunts from t = 50 s on
    assert st("MOVE el 10").text == "OK"
    clock.sleep(10.0)
    assert st("AXIS:STAT? el").text == "HARDLIMIT"
    assert float(st("POS? el").text) == pytest.approx(50.0)
    assert st("MOVE el 0").text.startswith("ERR 202")
    # wire faults: timeout gives no reply, disconnect closes, garbled is not text
    bench.faults.add("blackbody", "timeout", at_command=bb.count + 1)
    assert bb("MEAS:TEMP?").text is None
    bench.faults.add("blackbody", "garbled", at_command=bb.count + 1)
    raw = bb("*IDN?").raw
    assert raw.endswith(b"\n") and all(c >= 0x80 for c in raw[:-1])


def test_a_plan_handed_to_the_bench_counts_time_from_the_bench_start():
    clock = SimClock()
    plan = FaultPlan(seed=2)
    plan.add("blackbody", "drift", after_s=30.0, params={"rate_k_per_s": 0.01})
    bench = SimBench.from_mapping({"blackbody": {"noise_mk": 0.0}}, clock, faults=plan)
    assert plan.t0 == clock.now()
    bb = BlackbodyProtocol(bench)
    clock.sleep(20.0)
    assert float(bb("MEAS:TEMP?").text) == pytest.approx(22.0, abs=1e-4)
    clock.sleep(30.0)  # drifting since t = 30 s at 10 mK/s -> +0.2 K at t = 50 s
    assert float(bb("MEAS:TEMP?").text) == pytest.approx(22.2, abs=1e-4)
