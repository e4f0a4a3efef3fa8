"""Expansion: loop unrolling, references, ids, capture instances and scan grids.

Scan grids are checked against numpy (meshgrid/arange, the reference for regular grids); the
serpentine order against the definition of a boustrophedon path (common practice for raster
scanning): every position visited once, consecutive positions one grid step apart in one axis.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from sequences.library import find_recipe
from sequences.plan import expand, grid, instance_name
from sequences.recipe import load_recipe

NESTED = """\
recipe: nested
parameters:
  diffs: [2, 5]
  frames: 8
steps:
  - target: pinhole
  - sweep:
      over: diff
      values: "${diffs}"
      steps:
        - blackbody: {mode: difference, value: "${diff}"}
        - scan:
            axes: {az: {from: -10, to: 10, step: 10}, el: [-5, 5]}
            order: serpentine
            steps:
              - capture: {name: spot, frames: "${frames}"}
              - note: "spot at ${az},${el} for ${diff} K"
  - analyze: {analysis: distortion, captures: [spot]}
  - analyze: {analysis: sitf, captures: ["spot[diff=5,az=0,el=5]"]}
"""


def test_nested_sweep_and_scan_unroll_fully(facts) -> None:
    plan = expand(load_recipe("nested.yaml", facts=facts, text=NESTED))
    kinds = [s.kind for s in plan.steps]
    # 1 target + 2 x (1 blackbody + 6 x (move, capture, note)) + 2 analyze
    assert len(plan.steps) == 1 + 2 * (1 + 6 * 3) + 2
    assert kinds.count("capture") == 12 and plan.frames_total == 12 * 8
    assert len(set(s.id for s in plan.steps)) == len(plan.steps)
    assert plan.captures[0] == "spot[diff=2,az=-10,el=-5]"
    assert plan.groups["spot"] == plan.captures
    first_analyze = plan.steps[-2]
    assert first_analyze.instances == tuple(plan.captures)
    assert plan.steps[-1].instances == ("spot[diff=5,az=0,el=5]",)


def test_ids_are_structural_and_stable_when_values_change(facts) -> None:
    a = expand(load_recipe("nested.yaml", facts=facts, text=NESTED))
    b = expand(load_recipe("nested.yaml", overrides={"diffs": [5, 9], "frames": 3}, facts=facts,
                           text=NESTED))
    assert [s.id for s in a.steps] == [s.id for s in b.steps]
    assert a.steps[1].id == "s2.sweep[1].s1.blackbody"
    assert a.steps[2].id == "s2.sweep[1].s2.scan[1].move"
    assert a.steps[3].id == "s2.sweep[1].s2.scan[1].s1.capture"
    assert b.steps[1].setpoint == 5.0
    assert b.step("s2.sweep[2].s1.blackbody").setpoint == 9.0


def test_references_keep_type_whole_and_interpolate_inside_text(facts) -> None:
    plan = expand(load_recipe("nested.yaml", facts=facts, text=NESTED))
    capture = next(s for s in plan.steps if s.kind == "capture")
    assert capture.frames == 8 and isinstance(capture.frames, int)
    note = next(s for s in plan.steps if s.kind == "note")
    assert note.text == "spot at -10,-5 for 2 K"
    assert note.context == {"diff": 2, "az": -10, "el": -5}
    assert note.source.line == 17


def test_scan_range_matches_numpy_arange_and_raster_matches_meshgrid() -> None:
    from sequences.plan import _Expander  # the range arithmetic lives in the expander
    walker = _Expander(None, [], {})
    values = walker.axis_values("az", {"from": -20, "to": 20, "step": 5}, None, {})
    assert values == list(np.arange(-20, 21, 5))  # numpy: reference regular grid
    fractional = walker.axis_values("el", {"from": 0.0, "to": 1.0, "step": 0.1}, None, {})
    np.testing.assert_allclose(fractional, np.linspace(0.0, 1.0, 11), atol=1e-12)
    assert len(fractional) == 11  # the end point 1.0 is reached despite 0.1's binary error
    axes = {"az": [-1.0, 0.0, 1.0], "el": [-2.0, 2.0], "roll": [0.0, 3.0]}
    raster = grid(axes, "raster")
    mesh = np.meshgrid(*axes.values(), indexing="ij")  # first axis slowest, like ours
    expected = np.stack([m.ravel() for m in mesh], axis=1)
    np.testing.assert_array_equal([[p[a] for a in axes] for p in raster], expected)


@pytest.mark.parametrize("shape", [(3, 2), (4, 5), (2, 3, 4)])
def test_serpentine_is_a_boustrophedon_path(shape) -> None:
    axes = {f"a{i}": [float(v) for v in range(n)] for i, n in enumerate(shape)}
    path = grid(axes, "serpentine")
    points = [tuple(p[a] for a in axes) for p in path]
    assert sorted(points) == sorted(itertools.product(*axes.values()))  # each position once
    for p, q in zip(points, points[1:]):
        steps = [abs(x - y) for x, y in zip(p, q)]
        assert sorted(steps) == [0.0] * (len(shape) - 1) + [1.0]


def test_scan_moves_stage_before_inner_steps(facts) -> None:
    plan = expand(load_recipe("nested.yaml", facts=facts, text=NESTED))
    for i, step in enumerate(plan.steps):
        if step.kind == "capture":
            move = plan.steps[i - 1]
            assert move.kind == "move"
            assert move.position == {"az": step.context["az"], "el": step.context["el"]}


def test_instance_names() -> None:
    assert instance_name("grid", {}) == "grid"
    assert instance_name("spot", {"az": -20.0, "el": 2.5}) == "spot[az=-20,el=2.5]"


@pytest.mark.parametrize("name, steps, captures", [
    ("distortion-grid", 6, 1), ("distortion-scan", 2 + 9 * 9 * 2 + 2, 81),
    ("sitf-sweep", 2 + 3 * 2 + 2, 3), ("overnight-soak", None, 5 + 21 * 11),
])
def test_builtin_recipes_validate_against_the_bench(name, steps, captures, facts) -> None:
    plan = expand(load_recipe(find_recipe(name), facts=facts))
    assert plan.recipe == name
    if steps is not None:
        assert len(plan.steps) == steps
    assert len(plan.captures) == captures


def test_plan_step_lookup_names_missing_id(facts) -> None:
    plan = expand(load_recipe(find_recipe("distortion-grid"), facts=facts))
    assert plan.step("s5.capture").name == "grid"
    with pytest.raises(KeyError, match="no step with id 's9.capture'"):
        plan.step("s9.capture")
