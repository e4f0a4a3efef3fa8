"""A fast simulated station for fault, interruption and soak tests.

Same instruments as the built-in simulated bench, but a blackbody that settles in seconds, a
two-slot wheel and short transport timeouts, so failures show up quickly in simulated time.
"""

from __future__ import annotations

from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
TRUTH = REPO / "station" / "data" / "demo_camera_truth.yaml"


def fast_station_yaml(name: str, *, timeout_s: float, recovery: bool = True) -> str:
    """Station file text; `recovery` adds a bounded retry policy to every instrument."""
    retry = "\n    recovery: {retries: 3, backoff_s: 0.2}" if recovery else ""
    return f"""\
station: {name}
lab: Demo bay, invented
collimator: {{focal_length_mm: 500.0}}
instruments:
  blackbody:
    driver: scpi-blackbody
    resource: sim+visa
    timeout_s: {timeout_s}{retry}
    limits: {{min_c: 0.0, max_c: 100.0, min_difference_k: -20.0, max_difference_k: 60.0}}
    safe_c: 22.0
  wheel:
    driver: scpi-wheel
    resource: sim+serial
    timeout_s: {timeout_s}{retry}
    slots:
      1: {{name: open, target: {{kind: open_aperture}}}}
      2: {{name: pinhole_grid, target: {{kind: pinhole_grid, rows: 11, cols: 15, pitch_mm: 12.0,
           diameter_mm: 1.0}}}}
  stage:
    driver: scpi-stage
    resource: sim+visa
    timeout_s: {timeout_s}{retry}
    axes:
      az: {{min: -40.0, max: 40.0, park: 0.0, unit: deg}}
      el: {{min: -30.0, max: 30.0, park: 0.0, unit: deg}}
  camera: {{driver: sim-camera, resource: sim}}
simulation:
  camera_truth: {TRUTH}
  bench:
    blackbody: {{start_c: 22.0, reference_c: 22.0, time_constant_s: 5.0, slew_k_per_s: 5.0,
                 noise_mk: 2.0, reference_drift_k_per_h: 0.0}}
    wheel: {{slots: 2, seconds_per_slot: 1.5, start_slot: 1}}
"""
