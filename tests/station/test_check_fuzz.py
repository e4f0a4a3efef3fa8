"""Property: no mutation of a valid recipe, station or geometry file makes the tool crash or hang.

Hypothesis (property-based testing) mutates the valid files shipped with nightbench (text
edits: spans deleted or repeated, lines swapped, numbers replaced by extreme values, YAML
anchors and aliases, brackets, indentation, stray characters) and feeds them to the command line
in process: `check --no-connect` for recipes and station files, `analyze distortion --frame` on a
blank frame for geometry files. Whatever the mutation, the answer must be exit 0 (still valid) or
2 (bad input, one clear message), never a traceback, within a bounded time per example (the
time) and a bounded peak of memory (the process's peak resident size, getrusage).
"""

from __future__ import annotations

import resource
import time
from pathlib import Path

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sequences.library import find_recipe
from station.cli import exitcodes
from station.cli.main import main
from station.inputs.config import BUILTIN_DIR

REPO = Path(__file__).resolve().parents[2]
MAX_PEAK_BYTES = 1500 * 1024 * 1024  # the whole test process, imports and all
SOURCES = {
    "recipe": find_recipe("distortion-grid").read_text(encoding="utf-8"),
    "station": (BUILTIN_DIR / "sim_station.yaml").read_text(encoding="utf-8").replace(
        "camera_truth: demo_camera_truth.yaml",
        f"camera_truth: {BUILTIN_DIR / 'demo_camera_truth.yaml'}"),
    "geometry": (BUILTIN_DIR / "example_geometry.yaml").read_text(encoding="utf-8"),
}
EXTREMES = ["0", "-1", "1e308", "-1e308", "1e-320", ".nan", ".inf", "-.inf", "100000000000000000000",
            "99999", "'x'", "null", "[]", "{}", "true", "[1, 2", "{a: 1", "*undefined", "&a 1",
            "!!python/object:os.system 'true'", "0x7fffffffffffffff", "- 1"]
NOISE = st.text(alphabet=list("[]{}:,-&*!|>'\"#%@`\t\n 0123456789.eEabcxyz_"), max_size=12)


@st.composite
def mutated(draw: st.DrawFn, text: str) -> str:
    """`text` after 1 to 6 random edits."""
    for _ in range(draw(st.integers(1, 6))):
        n = len(text)
        i = draw(st.integers(0, max(0, n - 1)))
        j = min(n, i + draw(st.integers(0, 80)))
        kind = draw(st.sampled_from(["delete", "repeat", "insert", "extreme", "swap", "indent",
                                     "alias"]))
        if kind == "delete":
            text = text[:i] + text[j:]
        elif kind == "repeat":
            text = text[:j] + text[i:j] * draw(st.integers(2, 50)) + text[j:]
        elif kind == "insert":
            text = text[:i] + draw(NOISE) + text[i:]
        elif kind == "extreme":
            numbers = [k for k, c in enumerate(text) if c.isdigit()]
            if numbers:
                k = draw(st.sampled_from(numbers))
                end = k
                while end < n and (text[end].isdigit() or text[end] in ".-e"):
                    end += 1
                text = text[:k] + draw(st.sampled_from(EXTREMES)) + text[end:]
        elif kind == "swap":
            lines = text.splitlines(keepends=True)
            if len(lines) > 1:
                a = draw(st.integers(0, len(lines) - 1))
                b = draw(st.integers(0, len(lines) - 1))
                lines[a], lines[b] = lines[b], lines[a]
                text = "".join(lines)
        elif kind == "indent":
            lines = text.splitlines(keepends=True)
            if lines:
                a = draw(st.integers(0, len(lines) - 1))
                lines[a] = " " * draw(st.integers(0, 6)) + lines[a].lstrip(" ")
                text = "".join(lines)
        else:  # anchor a value and refer to it many times
            lines = text.splitlines(keepends=True)
            if lines:
                a = draw(st.integers(0, len(lines) - 1))
                key, sep, value = lines[a].partition(": ")
                if sep and value.strip():
                    lines[a] = f"{key}: &m {value}"
                    refs = ", ".join(["*m"] * draw(st.integers(1, 30)))
                    lines.append(f"extra_key_{a}: [{refs}]\n")
                    text = "".join(lines)
    return text


MAX_SECONDS = 10.0  # per example; a valid input takes well under a second (plus imports once)


def _peak_rss() -> int:
    """Peak resident memory of this process so far, bytes (getrusage: kB on Linux)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def _call(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, int]:
    started = time.monotonic()
    try:
        code = main(argv)
    except SystemExit as stop:  # argparse
        code = int(stop.code or 0)
    peak = _peak_rss()
    captured = capsys.readouterr()
    elapsed = time.monotonic() - started
    assert elapsed < MAX_SECONDS, f"took {elapsed:.1f} s"
    return code, captured.out + captured.err, peak


@pytest.fixture(scope="module")
def blank_frame(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("fuzz-frame") / "blank.tif"
    tifffile.imwrite(path, np.full((512, 640), 600, np.uint16))
    return path


EXAMPLES = {"recipe": 100, "station": 60, "geometry": 60}


@pytest.mark.parametrize("kind", ["recipe", "station", "geometry"])
def test_mutated_inputs_give_exit_0_or_2_and_never_a_traceback(kind: str, tmp_path: Path,
                                                               blank_frame: Path,
                                                               capsys) -> None:
    # the time bound is checked per example in _call (MAX_SECONDS), not by hypothesis's
    # deadline, which a loaded test machine would trip on first imports
    @settings(max_examples=EXAMPLES[kind], deadline=None, derandomize=True,
              suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
    @given(text=mutated(SOURCES[kind]))
    def check_one(text: str) -> None:
        path = tmp_path / f"{kind}.yaml"
        path.write_text(text, encoding="utf-8")
        if kind == "recipe":
            argv = ["check", str(path), "--no-connect"]
        elif kind == "station":
            argv = ["check", "distortion-grid", "--station", str(path), "--no-connect"]
        else:
            argv = ["analyze", "distortion", "--frame", str(blank_frame), "--geometry",
                    str(path), "--out", str(tmp_path / "out")]
        code, output, peak = _call(argv, capsys)
        assert "Traceback" not in output, output[-2000:]
        assert code in (exitcodes.OK, exitcodes.INVALID), (code, output[-2000:])
        assert peak < MAX_PEAK_BYTES, f"{peak / 1e6:.0f} MB"

    path = tmp_path / f"{kind}.yaml"  # the unmutated file first: imports happen once, here
    path.write_text(SOURCES[kind], encoding="utf-8")
    main(["check", str(path), "--no-connect"] if kind == "recipe" else
         ["check", "distortion-grid", "--station", str(path), "--no-connect"] if kind == "station"
         else ["analyze", "distortion", "--frame", str(blank_frame), "--geometry", str(path),
               "--out", str(tmp_path / "out")])
    capsys.readouterr()
    check_one()
