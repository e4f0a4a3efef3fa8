"""Malformed recipes: each must give its own message, on the line where the mistake is written.

The expected line of each case is where the offending text sits in the fixture (counted by eye and
re-checked below against the text itself for the cases that name a token). YAML syntax errors are
located by PyYAML, the reference parser.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from sequences.recipe import load_recipe
from sequences.yamlsource import SourceError

BAD = Path(__file__).parent / "bad_recipes"

# (fixture, fragment of the message or hint, line of the problem)
CASES = [
    ("syntax_error.yaml", "YAML syntax error", None),  # line from PyYAML, checked separately
    ("top_level_list.yaml", "top level of a recipe must be a mapping", 1),
    ("missing_steps.yaml", "missing 'steps'", 1),
    ("unknown_step.yaml", "unknown step 'captur'", 4),
    ("unknown_step.yaml", "did you mean 'capture'?", 4),
    ("unknown_option.yaml", "unknown option 'frams' for capture", 6),
    ("unknown_option.yaml", "did you mean 'frames'?", 6),
    ("wrong_type_frames.yaml", "frames must be a whole number, not 'lots'", 5),
    ("frames_zero.yaml", "frames must be at least 1", 5),
    ("keep_bad.yaml", "keep must be one of average, stack, both, not 'median'", 6),
    ("unknown_reference.yaml", "unknown reference ${frame}", 7),
    ("unknown_reference.yaml", "did you mean 'frames'?", 7),
    ("capture_before_defined.yaml", "capture 'grid' is used before it is defined", 4),
    ("capture_before_defined.yaml", "it is defined at line 5", 4),
    ("duplicate_capture.yaml", "capture name 'flat' is already used", 5),
    ("duplicate_capture.yaml", "first defined at line 3", 5),
    ("target_not_on_wheel.yaml", "target 'crosshair' is not on the wheel", 4),
    ("target_not_on_wheel.yaml", "the wheel holds: open, pinhole, pinhole_grid, slanted_edge", 4),
    ("blackbody_out_of_limits.yaml", "blackbody difference 60 K is outside the station's limits "
                                     "-10 .. 40 K", 9),
    ("unknown_axis.yaml", "the stage has no axis 'roll'", 5),
    ("unknown_axis.yaml", "known axes: az, el", 5),
    ("position_out_of_limits.yaml", "az = 50.5 is outside the soft limits -45 .. 45", 5),
    ("scan_step_zero.yaml", "scan step of 'az' must not be 0", 6),
    ("scan_step_wrong_sign.yaml", "scan step -5 of 'el' goes away from 'to'", 5),
    ("scan_step_wrong_sign.yaml", "use step 5", 5),
    ("empty_sweep.yaml", "sweep values must not be empty", 5),
    ("unknown_analysis.yaml", "unknown analysis 'distorsion'", 5),
    ("unknown_analysis.yaml", "did you mean 'distortion'?", 5),
    ("step_options_not_indented.yaml", "a step has exactly one key", 4),
    ("step_options_not_indented.yaml", "indent the options under 'capture:'", 4),
    ("missing_option.yaml", "blackbody is missing its 'value' option", 3),
    ("timeout_shorter_than_hold.yaml", "timeout 30 s is not longer than its hold time 60 s", 7),
    ("loop_variable_hides_parameter.yaml", "loop variable 'd' hides a parameter", 5),
    ("duplicate_key.yaml", "key 'frames' appears twice", 6),
    ("capture_name_path.yaml", "capture name '../../etc/flat' contains a path separator", 4),
]


def problems_of(name: str, facts) -> list:
    with pytest.raises(SourceError) as info:
        load_recipe(BAD / name, facts=facts)
    return info.value.problems


@pytest.mark.parametrize("name, fragment, line", CASES)
def test_each_bad_recipe_names_its_mistake_and_line(name, fragment, line, facts) -> None:
    problems = problems_of(name, facts)
    matching = [p for p in problems if fragment in str(p)]
    assert matching, f"{name}: no problem mentions {fragment!r}; got:\n" + \
        "\n".join(map(str, problems))
    if line is None:  # YAML syntax: the reference parser decides the line
        with pytest.raises(yaml.MarkedYAMLError) as ref:
            yaml.safe_load((BAD / name).read_text())
        line = ref.value.problem_mark.line + 1
    assert matching[0].where.line == line
    assert matching[0].where.file == str(BAD / name)
    assert str(matching[0]).startswith(f"{BAD / name}:{line}:")


def test_at_least_fourteen_fixtures_each_used() -> None:
    used = {c[0] for c in CASES}
    on_disk = {p.name for p in BAD.glob("*.yaml")}
    assert used == on_disk
    assert len(on_disk) >= 14


def test_token_lines_agree_with_the_text() -> None:
    # Independent check of the hand-counted lines: the line holding the offending token.
    for name, token, line in [("unknown_step.yaml", "captur:", 4),
                              ("wrong_type_frames.yaml", "lots", 5),
                              ("unknown_analysis.yaml", "distorsion", 5),
                              ("position_out_of_limits.yaml", "50.5", 5)]:
        lines = (BAD / name).read_text().splitlines()
        assert token in lines[line - 1]


def test_station_checks_skipped_without_facts() -> None:
    # A recipe-only check accepts a target the station does not have.
    recipe = load_recipe(BAD / "target_not_on_wheel.yaml", facts=None)
    assert recipe.name == "missing-target"


ALL_AT_ONCE = """\
recipe: many-mistakes
steps:
  - captur: {name: a, frames: 1}
  - capture: {name: b, frames: 0}
  - target: crosshair
  - move: {az: 99}
  - analyze: {analysis: sitf, captures: [nothing_here]}
"""


def test_all_errors_reported_at_once(facts) -> None:
    with pytest.raises(SourceError) as info:
        load_recipe("many.yaml", facts=facts, text=ALL_AT_ONCE)
    lines = [p.where.line for p in info.value.problems]
    assert lines == [3, 4, 5, 6, 7]
    assert len(str(info.value).splitlines()) == 5


GOOD = """\
recipe: flat-pair
parameters:
  frames: 16
  difference: 5.0
  label: flat
steps:
  - blackbody: {mode: difference, value: "${difference}"}
  - capture: {name: flat, frames: "${frames}"}
"""


def test_override_of_undeclared_parameter_points_at_parameters(facts) -> None:
    with pytest.raises(SourceError) as info:
        load_recipe("good.yaml", overrides={"frame": 32}, facts=facts, text=GOOD)
    (p,) = info.value.problems
    assert "override of 'frame': the recipe declares no such parameter" in p.message
    assert "did you mean 'frames'?" in p.hint
    assert p.where.line == 3  # the parameters mapping


@pytest.mark.parametrize("value", ["lots", 2.5, True, [1]])
def test_override_of_wrong_type_points_at_default(facts, value) -> None:
    with pytest.raises(SourceError) as info:
        load_recipe("good.yaml", overrides={"frames": value}, facts=facts, text=GOOD)
    (p,) = info.value.problems
    assert "is not a whole number like its default 16" in p.message
    assert p.where.line == 3


def test_override_typed_from_text_and_int_promoted_to_float(facts) -> None:
    recipe = load_recipe("good.yaml", overrides={"frames": "32", "difference": 7}, facts=facts,
                         text=GOOD)
    assert recipe.parameters["frames"] == 32 and isinstance(recipe.parameters["frames"], int)
    assert recipe.parameters["difference"] == 7.0
    assert isinstance(recipe.parameters["difference"], float)
    assert recipe.defaults["frames"] == 16
