"""The analysis registry end to end: re-analysis reproduces a run, verdicts reach the console.

One recorded run on the fast simulated bench (tests/station/fast_bench.py) takes flat fields at
three blackbody differences and one pinhole-grid frame, and runs all four built-in analyses.
References: the run's own result files (re-analysis reads the same frames through the same code,
so only float rounding may differ: 1e-9), and for the verdicts the decision rule of
analysis/verdicts.py with UUT limits chosen far on either side of the measured NETD, so the test
holds whatever the NETD method gives.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from station.analyses.builtin import builtin_registry
from station.analyses.registry import AnalysisFailed, OptionSpec
from station.analyses.site import FolderSite
from station.cli import exitcodes
from station.cli.main import main
from station.inputs.uut_file import demo_uut_path
from tests.station.fast_bench import fast_station_yaml

SAME = 1e-9
RECIPE = """\
recipe: all-four
parameters:
  frames: 8
steps:
  - target: open
  - move: {az: 0.0, el: 0.0}
  - sweep:
      over: difference
      values: [2.0, 5.0, 10.0]
      steps:
        - blackbody: {mode: difference, value: "${difference}", tolerance: 0.05, hold: 2,
                      timeout: 300}
        - capture: {name: flat, frames: "${frames}", keep: both}
  - analyze: {analysis: sitf, captures: [flat]}
  - analyze: {analysis: netd, captures: [flat]}
  - analyze: {analysis: uniformity, captures: [flat]}
  - analyze: {analysis: badpixels, captures: [flat]}
  - target: pinhole_grid
  - blackbody: {mode: difference, value: 30, tolerance: 0.05, hold: 2, timeout: 300}
  - capture: {name: grid, frames: 4, keep: average}
  - analyze: {analysis: distortion, captures: [grid], options: {mode: grid}}
"""


def _uut(folder: Path, netd_limit_mk: float) -> Path:
    text = demo_uut_path().read_text(encoding="utf-8")
    text = text.replace("netd_mk: {limit: 50.0,", f"netd_mk: {{limit: {netd_limit_mk},")
    path = folder / f"uut_{netd_limit_mk:g}.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _files(tmp: Path) -> tuple[Path, Path]:
    station = tmp / "station.yaml"
    station.write_text(fast_station_yaml("registry-bench", timeout_s=1.0), encoding="utf-8")
    recipe = tmp / "all_four.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    return station, recipe


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, int, str]:
    tmp = tmp_path_factory.mktemp("registry")
    station, recipe = _files(tmp)
    runs = tmp / "runs"
    capture = pytest.MonkeyPatch()
    capture.setenv("COLUMNS", "200")
    import io
    import contextlib

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["run", str(recipe), "--station", str(station), "--uut",
                     str(_uut(tmp, 1.0)), "--runs", str(runs), "--plain"])
    capture.undo()
    (folder,) = [p for p in runs.iterdir() if p.is_dir()]
    return folder, code, out.getvalue()


def _json(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def _numbers(a: object, b: object, where: str = "") -> None:
    """Every number of two JSON documents equal to SAME, every other value equal."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), where
        for k in a:
            _numbers(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _numbers(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and not isinstance(a, bool):
        assert b == pytest.approx(a, abs=SAME, rel=SAME), where
    else:
        assert a == b, where


@pytest.mark.parametrize("name, files", [
    ("sitf", ["sitf.json"]), ("netd", ["netd.json"]), ("uniformity", ["uniformity.json"]),
    ("badpixels", ["badpixels.json"]), ("distortion", ["distortion.json"]),
])
def test_analyze_reproduces_the_runs_own_results(recorded, name, files, capsys,
                                                 monkeypatch) -> None:
    folder, _, _ = recorded
    before = {f: (folder / "results" / f).read_bytes() for f in files}
    monkeypatch.setenv("COLUMNS", "200")
    code = main(["analyze", name, str(folder)])
    out = capsys.readouterr().out
    versions = sorted((folder / "reanalysis").iterdir(), key=lambda p: int(p.name))
    again = versions[-1] / "results"
    for f in files:
        original, redone = json.loads(before[f]), _json(again / f)
        if name == "distortion":  # the figures that matter; the rest are plotting aids
            original = {k: original[k] for k in ("model", "summary")}
            redone = {k: redone[k] for k in ("model", "summary")}
        _numbers(original, redone, f)
        assert (folder / "results" / f).read_bytes() == before[f]  # the run's own: untouched
    assert f"results in {again}" in out
    if name == "netd":  # limit 1 mK: clearly failed, on rerun too
        assert code == exitcodes.UUT_FAILED and "UUT FAILED (1 of 1)" in out
    elif name == "sitf":
        assert code == exitcodes.OK and "NOT JUDGED" in out


def test_run_ends_with_the_results_table_and_the_failed_unit_code(recorded) -> None:
    folder, code, out = recorded
    assert code == exitcodes.UUT_FAILED
    table = out[out.index("what the run found"):]
    row = next(line for line in table.splitlines() if "netd_mk" in line)
    assert "FAIL" in row and "+/-" in row and "<= 1 mK" in row
    # netd, bad pixels, gain and offset non-uniformity and three distortion keys of the demo UUT
    # judged; only netd fails
    assert out.rstrip().endswith("UUT FAILED (1 of 7)")
    verdicts = _json(folder / "results" / "verdicts.json")
    assert verdicts["outcome"] == "FAILED" and verdicts["failed"] == 1
    assert verdicts["judged"] == 7
    assert verdicts["uut"]["serial"] == "DEMO-0042"
    keys = {v["key"]: v for v in verdicts["verdicts"]}
    assert {"netd_mk", "max_bad_pixel_percent", "max_distortion_percent"} <= set(keys)
    # the estimate's and the spec's warnings reach the run's log before anything moves
    events = [json.loads(x) for x in (folder / "events.jsonl").read_text().splitlines()]
    warned = [e["text"] for e in events if e["type"] == "preflight.warning"]
    # flats set as differences over the lab reference: check says whether they can bracket 30 C
    assert any("measures 'netd_mk' at flats set 2 to 10 K over the lab's reference" in w
               for w in warned)
    assert max(i for i, e in enumerate(events) if e["type"] == "preflight.warning") < next(
        i for i, e in enumerate(events) if e["type"] == "step.start")
    netd = keys["netd_mk"]
    assert netd["conditions"]["spec_source_c"] == 30.0
    # evaluated at the spec's source temperature, from flats (22 C + 2..10 K) that bracket it
    assert netd["conditions"]["source_c"] == 30.0 and netd["conditions"]["brackets_source"]


def test_a_passing_unit_exits_zero(tmp_path, capsys, monkeypatch) -> None:
    station, _ = _files(tmp_path)
    monkeypatch.setenv("COLUMNS", "200")
    code = main(["run", "sitf-sweep", "--station", str(station), "--uut",
                 str(_uut(tmp_path, 100000.0)), "--runs", str(tmp_path / "runs"), "--plain",
                 "--set", "frames=4", "--set", "hold=2"])
    out = capsys.readouterr().out
    assert code == exitcodes.OK
    assert "UUT PASSED (1 of 1 within limits)" in out


def test_out_inside_a_run_folder_is_refused(recorded, capsys) -> None:
    folder, _, _ = recorded
    code = main(["analyze", "sitf", str(folder), "--out", str(folder / "frames" / "x")])
    assert code == exitcodes.INVALID
    assert "inside the run folder" in " ".join(capsys.readouterr().out.split())
    assert not (folder / "frames" / "x").exists()


def test_a_site_never_writes_outside_its_folders(tmp_path: Path) -> None:
    site = FolderSite(tmp_path / "run", tmp_path / "run" / "r", tmp_path / "run" / "p",
                      run_id="x")
    for bad in ("../escape.json", "/tmp/escape.json", "a/b.json", "..", ""):
        with pytest.raises(AnalysisFailed, match="not a plain file name"):
            site.result_path(bad)
    outside = tmp_path / "elsewhere.json"
    outside.write_text("{}")
    with pytest.raises(AnalysisFailed, match="outside"):
        site.register(outside)
    assert site.result_path("ok.json") == tmp_path / "run" / "r" / "ok.json"


def test_every_registered_analysis_declares_what_check_needs() -> None:
    registry = builtin_registry()
    assert {"distortion", "sitf", "netd", "uniformity"} <= set(registry)
    declared: dict[str, str] = {}
    for name, analysis in registry.items():
        assert analysis.name == name and analysis.result_files
        for key in analysis.spec_keys:  # each spec key names one quantity of one analysis
            assert key not in declared, f"{key} declared by {declared.get(key)} and {name}"
            declared[key] = name
        for option in analysis.options:
            assert not any(w in option for w in ("dir", "path", "folder"))
    assert declared["netd_mk"] == "netd"


def test_option_values_are_checked_with_a_suggestion() -> None:
    spec = OptionSpec("frames", "count", 4, "frames to use", minimum=2)
    assert spec.coerce(8) == (8, None)
    assert spec.coerce(1)[1].message == "option 'frames' must be at least 2, not 1"
    assert "whole number" in spec.coerce(2.5)[1].message
    mode = builtin_registry()["distortion"].options["mode"]
    assert mode.coerce("grd")[1].hint == "did you mean 'grid'?"


def test_verify_notes_a_reanalysis_without_failing_the_run(recorded, capsys) -> None:
    folder, _, _ = recorded
    assert main(["analyze", "uniformity", str(folder)]) == exitcodes.OK
    assert main(["verify", str(folder)]) == exitcodes.OK
    assert "is not part of the run record" in capsys.readouterr().out


def test_builtin_names_known_without_import_match_the_registry() -> None:
    # The command line lists these names without importing the analyses (start-up time); the
    # list must name exactly the registry's analyses.
    from station.analyses.builtin import BUILTIN_NAMES
    assert sorted(BUILTIN_NAMES) == sorted(builtin_registry())
