"""Template validation of the configurable drivers: every problem named by key path and line."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from drivers.configurable import ConfigurableBlackbody, ConfigurableStage, ConfigurableWheel
from drivers.scpi import SettingsError
from sequences.yamlsource import SourceRef, load_yaml

STATION = Path(__file__).parent / "data" / "configurable_station.yaml"
COMMON = {"driver", "resource", "timeout_s", "recovery"}


def locate(entry: Any, path: tuple[str, ...]) -> SourceRef:
    """The file position of a settings key path in a YAML-loaded instrument entry."""
    node, ref = entry, entry.ref()
    for key in path:
        if not hasattr(node, "ref_of") or key not in node:
            break
        ref, node = node.ref_of(key), node[key]
    return ref


def broken_station(tmp_path: Path, old: str, new: str) -> Path:
    text = STATION.read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / "station.yaml"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


def problems_with_lines(path: Path, role: str, cls: Any) -> list[str]:
    doc = load_yaml(path)
    entry = doc["instruments"][role]
    settings = {k: v for k, v in entry.items() if k not in COMMON}
    return [f"{locate(entry, p.path)}: {p}" for p in cls.settings_problems(settings)]


def line_of(path: Path, needle: str) -> int:
    return next(n for n, line in enumerate(path.read_text().splitlines(), 1) if needle in line)


def test_the_example_station_has_no_problems() -> None:
    doc = load_yaml(STATION)
    for role, cls in (("blackbody", ConfigurableBlackbody), ("wheel", ConfigurableWheel),
                      ("stage", ConfigurableStage)):
        entry = doc["instruments"][role]
        assert cls.validate_settings({k: v for k, v in entry.items() if k not in COMMON}) == []


def test_unknown_placeholder_is_reported_with_file_and_line(tmp_path: Path) -> None:
    path = broken_station(tmp_path, '"SOUR:TEMP {value:.3f}"', '"SOUR:TEMP {temp:.3f}"')
    (problem,) = problems_with_lines(path, "blackbody", ConfigurableBlackbody)
    line = line_of(path, "SOUR:TEMP {temp")
    assert problem.startswith(f"{path}:{line}:")
    assert "commands.set_temperature: unknown placeholder {temp}" in problem
    assert "may use: {value}" in problem


def test_missing_reply_pattern_is_reported_with_file_and_line(tmp_path: Path) -> None:
    path = broken_station(tmp_path, '{query: "MEAS:REF?", reply: "(?P<value>[-+0-9.eE]+)"}',
                          '{query: "MEAS:REF?"}')
    (problem,) = problems_with_lines(path, "blackbody", ConfigurableBlackbody)
    line = line_of(path, '{query: "MEAS:REF?"}')
    assert problem.startswith(f"{path}:{line}:")
    assert "commands.reference_temperature.reply: reply pattern missing" in problem


def test_every_problem_of_an_entry_is_reported_at_once(tmp_path: Path) -> None:
    text = STATION.read_text(encoding="utf-8")
    text = text.replace('"MOVE {axis} {value:.4f}"', '"MOVE {axis}"')            # field missing
    text = text.replace('reply: "(?P<value>[01])"}\n      home: "HOME',
                        'reply: "(?P<value>[01]"}\n      home: "HOME')          # bad regex
    text = text.replace('"STOP"', '"STOP {axis}"')                               # not allowed
    path = tmp_path / "station.yaml"
    path.write_text(text, encoding="utf-8")
    problems = problems_with_lines(path, "stage", ConfigurableStage)
    assert len(problems) == 3
    joined = "\n".join(problems)
    assert f":{line_of(path, 'MOVE {axis}')}:" in problems[0]
    assert "commands.move: must contain {value}" in joined
    assert "commands.moving.reply: not a valid regular expression (missing )" in joined
    assert "commands.stop: unknown placeholder {axis}; this command may use: none" in joined


@pytest.mark.parametrize("change,expected", [
    ({"replies": {"ok": "OK", "error": "ERR \\d+"}},   # the message group is optional
     "replies.error: needs the named group(s) (?P<code>...)"),
    ({"booleans": {"true": ["1", "Y"], "false": ["Y"]}}, "booleans: a word is both true and false"),
    ({"modes": {"absolute": "ABS"}}, "modes: must map exactly absolute and difference"),
    ({"safe_c": 150.0}, "safe_c: 150.0 C outside the limits 0.0..100.0 C"),
    ({"terminations": {"read": ""}}, "terminations.read: must be a text"),
])
def test_settings_problems_name_their_key(change: dict[str, Any], expected: str) -> None:
    doc = load_yaml(STATION)
    settings = {k: v for k, v in doc["instruments"]["blackbody"].items() if k not in COMMON}
    problems = ConfigurableBlackbody.validate_settings({**settings, **change})
    assert len(problems) == 1 and problems[0].startswith(expected), problems


def test_constructor_refuses_bad_settings_before_talking() -> None:
    settings = {"limits": {"min_c": 0, "max_c": 50, "min_difference_k": -5,
                           "max_difference_k": 20}, "safe_c": 22,
                "commands": {"identify": "*IDN?"}}
    with pytest.raises(SettingsError) as err:
        ConfigurableBlackbody(None, name="blackbody", settings=settings)  # type: ignore[arg-type]
    text = str(err.value)
    assert text.startswith("blackbody: commands.identify: is a query")
    # the eight other required commands are listed as missing too (error is optional)
    assert text.count(": missing") == 8
