"""The served simulated bench in process: its clock, its marks, its camera over the socket.

References: the bench's own closed-form physics (simulators/blackbody.py: a first-order lag, so
after 5 time constants of a 10 K step the emitter is within 10 K * exp(-5) = 0.067 K of its
setpoint), and exact equality where the protocol promises the same bytes (a capture taken again
under the same key and state is the same frames; another key gives other noise whose frame
difference has the variance of two independent frames, 2 sigma^2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from simulators.camera_socket import SocketFrameGrabber
from simulators.served import ServedClock, noise_index, start_served_bench
from station.engine.bench import camera_truth
from station.inputs.config import load_station


@pytest.fixture(scope="module")
def served():
    station = load_station(None)
    setup = {"bench": dict(station.simulation.get("bench", {})),
             "truth": camera_truth(station),
             "slots": {n: s.target for n, s in station.slots.items()},
             "collimator_focal_mm": station.collimator_focal_mm}
    bench, addresses, close = start_served_bench(setup, seed=7)
    yield bench, addresses
    close()


def test_noise_index_depends_on_key_and_index_only() -> None:
    assert noise_index("s4.capture", 0) == noise_index("s4.capture", 0)
    assert len({noise_index("s4.capture", i) for i in range(100)}) == 100
    assert noise_index("s4.capture", 0) != noise_index("s5.capture", 0)


def test_clock_advances_the_served_physics_and_rewinds_exactly(served) -> None:
    bench, addresses = served
    clock = ServedClock(addresses["control"])
    try:
        with bench.sim.lock:
            bench.sim.blackbody.set("absolute", bench.sim.blackbody.true_c() + 10.0)
        t0 = clock.now()
        clock.mark("test|start")
        tau = bench.sim.blackbody.tau
        clock.sleep(5 * tau + 100.0)  # the slew phase (10 K at 0.1 K/s) plus 5 time constants
        assert clock.now() == pytest.approx(t0 + 5 * tau + 100.0, abs=1e-9)
        error = abs(bench.sim.blackbody.setpoint_c() - bench.sim.blackbody.true_c())
        assert error < 10.0 * math.exp(-5)  # first-order lag, see the module docstring
        before = clock.state()
        assert clock.rewind("test|start")
        assert clock.now() == t0
        assert clock.state()["blackbody_c"] != before["blackbody_c"]
        assert not clock.rewind("test|never-marked")
    finally:
        clock.close()


def test_a_capture_taken_again_under_its_key_is_the_same_capture(served) -> None:
    bench, addresses = served
    camera = SocketFrameGrabber(settings={"resource": addresses["camera"], "frame_rate_hz": 30})
    clock = ServedClock(addresses["control"])
    try:
        assert camera.shape == bench.renderer.shape
        clock.mark("test|before-capture")
        camera.begin_capture("s4.capture")
        first = [f.data.copy() for f in camera.grab(2)]
        last_counter = bench.camera.counter
        assert clock.rewind("test|before-capture")  # the frame counter goes back with it
        camera.begin_capture("s4.capture")
        again = list(camera.grab(2))
        assert again[-1].counter == last_counter
        for a, b in zip(first, again):
            assert np.array_equal(a, b.data)
        assert clock.rewind("test|before-capture")
        camera.begin_capture("s9.capture")
        other = next(iter(camera.grab(1))).data.astype(float)
        difference = other - first[0].astype(float)
        sigma = bench.renderer.truth.temporal_noise_counts
        # two independent frames: var(difference) = 2 sigma^2. Robust estimate: the median of
        # the squares of a zero-mean Gaussian is 0.4549 var (median of chi-square with one
        # degree of freedom, standard statistical tables); 30 % margin for noisy pixels
        assert 0.7 * 2 * sigma**2 < float(np.median(difference**2)) / 0.4549 < 1.3 * 2 * sigma**2
    finally:
        camera.close()
        clock.close()
