"""Bad input through `nightbench check`: exit code 2 and a message naming file, line and the fix.

The recipe-level rules are tested in tests/sequences; here every case goes through the command
line (station.cli.main.main, in process) against the built-in simulated station, so station limits,
the wheel's slots and the stage's axes come from station/data/sim_station.yaml. The expected line
of each case is found in the recipe text itself (the line holding the marker), and for YAML syntax
errors from PyYAML, the reference parser.
"""

from __future__ import annotations


import pytest
import yaml

from station.cli import exitcodes
from station.cli.main import main
from station.inputs.config import BUILTIN_DIR

STATION = yaml.safe_load((BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8"))
BB_LIMITS = STATION["instruments"]["blackbody"]["limits"]
AZ = STATION["instruments"]["stage"]["axes"]["az"]

HEAD = "recipe: bad\nparameters:\n  frames: 4\nsteps:\n  - target: open\n"

# (case id, recipe body after HEAD, marker on the offending line, expected message fragment)
CASES = [
    ("unknown-step", "  - captur: {name: flat, frames: 4}\n", "captur",
     "unknown step 'captur'. did you mean 'capture'?"),
    ("target-not-on-wheel", "  - target: crosshair\n", "crosshair",
     "target 'crosshair' is not on the wheel. the wheel holds: blank, open, pinhole"),
    ("difference-above-station-limit",
     f"  - blackbody: {{mode: difference, value: {BB_LIMITS['max_difference_k'] + 15:g}}}\n",
     "difference", f"blackbody difference {BB_LIMITS['max_difference_k'] + 15:g} K is outside the "
     f"station's limits {BB_LIMITS['min_difference_k']:g} .. {BB_LIMITS['max_difference_k']:g} K"),
    ("absolute-above-station-limit",
     f"  - blackbody: {{mode: absolute, value: {BB_LIMITS['max_c'] + 20:g}}}\n", "absolute",
     f"blackbody absolute {BB_LIMITS['max_c'] + 20:g} C is outside the station's limits "
     f"{BB_LIMITS['min_c']:g} .. {BB_LIMITS['max_c']:g} C"),
    ("stage-outside-soft-limits", f"  - move: {{az: {AZ['max'] + 10:g}, el: 0}}\n", "move",
     f"az = {AZ['max'] + 10:g} is outside the soft limits {AZ['min']:g} .. {AZ['max']:g}"),
    ("unknown-axis", "  - move: {roll: 1.0}\n", "roll", "the stage has no axis 'roll'"),
    ("frames-wrong-type", "  - capture: {name: flat, frames: lots}\n", "lots",
     "frames must be a whole number, not 'lots'"),
    ("keep-unknown", "  - capture: {name: flat, frames: 4, keep: median}\n", "median",
     "keep must be one of average, stack, both, not 'median'"),
    ("unknown-reference", "  - capture: {name: flat, frames: \"${frame}\"}\n", "${frame}",
     "unknown reference ${frame}"),
    ("capture-used-before-defined",
     "  - analyze: {analysis: sitf, captures: [flat]}\n  - capture: {name: flat, frames: 4}\n",
     "analyze", "capture 'flat' is used before it is defined"),
    ("unknown-analysis", "  - capture: {name: g, frames: 4}\n"
     "  - analyze: {analysis: distorsion, captures: [g]}\n", "distorsion",
     "unknown analysis 'distorsion'"),
    ("timeout-shorter-than-hold",
     "  - blackbody: {mode: difference, value: 2, hold: 60, timeout: 30}\n", "timeout",
     "timeout 30 s is not longer than its hold time 60 s"),
    ("duplicate-capture-name", "  - capture: {name: flat, frames: 4}\n"
     "  - note: between\n  - capture: {name: flat, frames: 8}\n", "frames: 8",
     "capture name 'flat' is already used"),
    ("empty-sweep", "  - sweep:\n      over: d\n      values: []\n      steps:\n"
     "        - note: never\n", "values", "sweep values must not be empty"),
    # the analysis registry's checks (station/analyses): options, targets, poses
    ("misspelt-analysis-option", "  - target: pinhole_grid\n  - capture: {name: g, frames: 4}\n"
     "  - analyze: {analysis: distortion, captures: [g], options: {mod: scan}}\n", "mod: scan",
     "unknown option 'mod' for analysis distortion. did you mean 'mode'?"),
    ("option-naming-a-folder", "  - target: pinhole_grid\n  - capture: {name: g, frames: 4}\n"
     "  - analyze: {analysis: distortion, captures: [g],\n"
     "              options: {mode: grid, results_dir: /tmp/elsewhere}}\n", "results_dir",
     "option 'results_dir' of distortion names a place on disk"),
    ("grid-analysis-on-pinhole", "  - target: pinhole\n  - capture: {name: spot, frames: 4}\n"
     "  - analyze: {analysis: distortion, captures: [spot], options: {mode: grid}}\n",
     "analyze", "distortion (grid mode) needs a pinhole_grid target in the beam; capture 'spot' "
     "(line 7) has 'pinhole' (single_pinhole)"),
    ("scan-analysis-without-angular-axes",
     "  - target: pinhole\n  - sweep:\n      over: d\n      values: [1, 2, 3, 4, 5, 6]\n"
     "      steps:\n        - capture: {name: spot, frames: 4}\n"
     "  - analyze: {analysis: distortion, captures: [spot], options: {mode: scan}}\n",
     "analyze", "distortion (scan mode) needs each capture taken at a stage pose with angular "
     "axes az and el; capture 'spot[d=1]' (line 11) is at axes: none"),
    ("capture-name-with-path-separator", "  - capture: {name: ../flat, frames: 4}\n", "../flat",
     "capture name '../flat' contains a path separator"),
]


def check(capsys: pytest.CaptureFixture, monkeypatch: pytest.MonkeyPatch,
          *args: str) -> tuple[int, str]:
    monkeypatch.setenv("COLUMNS", "400")  # rich wraps at 80 columns when not a terminal
    code = main(["check", *args, "--no-connect"])
    return code, capsys.readouterr().out


@pytest.mark.parametrize("case, body, marker, fragment", CASES, ids=[c[0] for c in CASES])
def test_bad_recipe_through_check(case, body, marker, fragment, tmp_path, capsys,
                                  monkeypatch) -> None:
    text = HEAD + body
    path = tmp_path / f"{case}.yaml"
    path.write_text(text, encoding="utf-8")
    line = 1 + next(i for i, x in enumerate(text.splitlines()) if marker in x)
    code, out = check(capsys, monkeypatch, str(path))
    assert code == exitcodes.INVALID
    matching = [x.strip() for x in out.splitlines() if fragment in x]
    assert matching, out
    assert matching[0].startswith(f"{path}:{line}:"), out
    assert "check passed" not in out


def test_yaml_syntax_error_line_from_pyyaml(tmp_path, capsys, monkeypatch) -> None:
    text = HEAD + "  - capture: {name: flat, frames: 4\n  - note: after\n"
    path = tmp_path / "syntax.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(yaml.MarkedYAMLError) as ref:  # PyYAML decides where the error is
        yaml.safe_load(text)
    code, out = check(capsys, monkeypatch, str(path))
    assert code == exitcodes.INVALID
    assert f"{path}:{ref.value.problem_mark.line + 1}:" in out and "YAML syntax error" in out


def test_all_problems_of_a_file_reported_at_once(tmp_path, capsys, monkeypatch) -> None:
    cases = CASES[:6]  # independent one-line mistakes
    text = HEAD + "".join(c[1] for c in cases)
    path = tmp_path / "many.yaml"
    path.write_text(text, encoding="utf-8")
    code, out = check(capsys, monkeypatch, str(path))
    assert code == exitcodes.INVALID
    for _, _, _, fragment in cases:
        assert fragment in out


def test_bad_station_file(tmp_path, capsys, monkeypatch) -> None:
    station = tmp_path / "station.yaml"
    station.write_text("station: half-written\ninstruments:\n  blackbody: {driver: nope}\n")
    code, out = check(capsys, monkeypatch, "sitf-sweep", "--station", str(station))
    assert code == exitcodes.INVALID
    assert f"{station}:3:" in out and "unknown driver 'nope'" in out
    assert f"{station}:1:1: missing 'collimator'" in out


def test_unknown_recipe_name(capsys, monkeypatch) -> None:
    code, out = check(capsys, monkeypatch, "no-such-recipe")
    assert code == exitcodes.INVALID
    assert "no recipe file 'no-such-recipe' and no built-in recipe of that name" in out
    assert "sitf-sweep" in out  # lists what exists


def test_override_of_undeclared_parameter(capsys, monkeypatch) -> None:
    code, out = check(capsys, monkeypatch, "sitf-sweep", "--set", "frams=3")
    assert code == exitcodes.INVALID
    assert "override of 'frams': the recipe declares no such parameter" in out
    assert "did you mean 'frames'?" in out


def test_blackbody_timeout_shorter_than_its_settling_is_warned(tmp_path, capsys,
                                                              monkeypatch) -> None:
    # The simulated bench's blackbody (sim_station.yaml: slew 0.1 K/s, tau 60 s) needs minutes
    # to go 40 K up; a 100 s timeout cannot be met. check warns with the line, before anything
    # moves, and still passes (the model may be pessimistic).
    text = HEAD + "  - blackbody: {mode: difference, value: 40, timeout: 100}\n"
    path = tmp_path / "slow.yaml"
    path.write_text(text, encoding="utf-8")
    code, out = check(capsys, monkeypatch, str(path))
    assert code == exitcodes.OK
    (line,) = [x.strip() for x in out.splitlines() if "times out after 100 s" in x]
    assert line.startswith(f"{path}:6:") and "s2.blackbody: the blackbody needs about" in line
    needed = float(line.split("needs about ")[1].split(" s")[0])
    assert needed > 300  # slew alone: (40 - 0.1 * 60) / 0.1 = 340 s


def test_netd_condition_mismatch_is_warned_with_the_recipe_line(capsys, monkeypatch) -> None:
    # sitf-sweep's flats are set 2 to 10 K over the lab reference, whose temperature the recipe
    # does not set; the demo UUT states NETD at 30 C over 20 C.
    from sequences.library import find_recipe

    recipe = find_recipe("sitf-sweep")
    line = 1 + next(i for i, x in enumerate(recipe.read_text().splitlines())
                    if "analysis: netd" in x)
    code, out = check(capsys, monkeypatch, "sitf-sweep")
    assert code == exitcodes.OK
    (warning,) = [x.strip() for x in out.splitlines() if "measures 'netd_mk'" in x]
    assert warning.startswith(f"{recipe}:{line}:")
    assert "flats set 2 to 10 K over the lab's reference" in warning
    assert "reference between 20 and 28 C" in warning
    assert "source_c = 30, background_c = 20" in warning


def test_unknown_spec_key_in_the_uut_file_is_refused(tmp_path, capsys, monkeypatch) -> None:
    from station.inputs.uut_file import demo_uut_path

    text = demo_uut_path().read_text(encoding="utf-8").replace(
        "max_roll_deg:", "max_rol_deg:")
    uut = tmp_path / "uut.yaml"
    uut.write_text(text, encoding="utf-8")
    line = 1 + next(i for i, x in enumerate(text.splitlines()) if "max_rol_deg" in x)
    code, out = check(capsys, monkeypatch, "distortion-grid", "--uut", str(uut))
    assert code == exitcodes.INVALID
    (problem,) = [x.strip() for x in out.splitlines() if "max_rol_deg" in x]
    assert problem.startswith(f"{uut}:{line}:") and "did you mean 'max_roll_deg'?" in problem


def test_scan_over_a_linear_axis_is_refused_for_a_scan_analysis(tmp_path, capsys,
                                                                monkeypatch) -> None:
    # A station whose stage is one linear axis in mm: a scan over it has no angular pose, so
    # the distortion scan (which needs az and el in degrees) is refused at check.
    from tests.station.fast_bench import fast_station_yaml

    text = fast_station_yaml("linear-bench", timeout_s=1.0).replace(
        "      az: {min: -40.0, max: 40.0, park: 0.0, unit: deg}\n"
        "      el: {min: -30.0, max: 30.0, park: 0.0, unit: deg}\n",
        "      x: {min: -50.0, max: 50.0, park: 0.0, unit: mm}\n")
    text = text.replace("pinhole_grid, target: {kind: pinhole_grid, rows: 11, cols: 15, "
                        "pitch_mm: 12.0,\n           diameter_mm: 1.0}",
                        "pinhole, target: {kind: single_pinhole, diameter_mm: 1.0}")
    station = tmp_path / "linear.yaml"
    station.write_text(text, encoding="utf-8")
    recipe = tmp_path / "scan.yaml"
    recipe.write_text("recipe: linear-scan\nsteps:\n  - target: pinhole\n  - scan:\n"
                      "      axes: {x: {from: -25, to: 25, step: 5}}\n      steps:\n"
                      "        - capture: {name: spot, frames: 2}\n"
                      "  - analyze: {analysis: distortion, captures: [spot], "
                      "options: {mode: scan}}\n", encoding="utf-8")
    code, out = check(capsys, monkeypatch, str(recipe), "--station", str(station))
    assert code == exitcodes.INVALID, out
    (line,) = [x.strip() for x in out.splitlines() if "angular axes az and el" in x]
    assert line.startswith(f"{recipe}:8:") and "is at axes: x (mm)" in line
