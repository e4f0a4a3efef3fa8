"""Position-keeping YAML loader: values must equal PyYAML's own safe_load (the reference reader) and
every position must match where the text really is (line/column counted 1-based, as editors do)."""

from __future__ import annotations

import textwrap

import pytest
import yaml

from sequences.yamlsource import (MarkedDict, MarkedList, MarkedScalar, Problem, SourceError,
                                  SourceRef, load_yaml)

TEXT = textwrap.dedent("""\
    # bench description
    name: bench-7
    stage:
      axes:
        az: [-30.5, 30.5]
        el: [-20, 20]
    targets:
      - pinhole
      - slanted_edge
    defaults: &d {frames: 16, keep: average}
    flat:
      <<: *d
      frames: 64
    """)


def position_of(text: str, needle: str, occurrence: int = 0) -> tuple[int, int]:
    """1-based (line, column) of the n-th occurrence of needle, computed independently of PyYAML."""
    index = -1
    for _ in range(occurrence + 1):
        index = text.index(needle, index + 1)
    line = text.count("\n", 0, index) + 1
    column = index - (text.rfind("\n", 0, index) + 1) + 1
    return line, column


def test_values_equal_pyyaml_safe_load() -> None:
    # Reference: PyYAML safe_load is the standard reading of the same text (merge key included).
    doc = load_yaml("bench.yaml", TEXT)
    assert doc == yaml.safe_load(TEXT)
    assert isinstance(doc, MarkedDict)
    assert isinstance(doc["targets"], MarkedList)


def test_positions_of_keys_values_and_items() -> None:
    doc = load_yaml("bench.yaml", TEXT)
    assert isinstance(doc, MarkedDict)
    ref = doc.ref_of("name")
    assert (ref.line, ref.column) == position_of(TEXT, "bench-7")
    assert (doc.key_ref("stage").line, doc.key_ref("stage").column) == position_of(TEXT, "stage")
    axes = doc["stage"]["axes"]
    assert (axes.ref_of("el").line, axes.ref_of("el").column) == position_of(TEXT, "[-20, 20]")
    assert (axes["az"].ref_of(1).line, axes["az"].ref_of(1).column) == position_of(TEXT, "30.5", 1)
    targets = doc["targets"]
    assert (targets.ref_of(1).line, targets.ref_of(1).column) == position_of(TEXT, "slanted_edge")
    assert doc.ref_of("name").file == "bench.yaml"


def test_merge_key_written_value_overrides_merged_one() -> None:
    doc = load_yaml("bench.yaml", TEXT)
    assert doc["flat"] == {"frames": 64, "keep": "average"}
    line, _ = position_of(TEXT, "frames: 64")
    assert doc["flat"].key_ref("frames").line == line


def test_missing_key_falls_back_to_container_position() -> None:
    doc = load_yaml("bench.yaml", TEXT)
    assert doc["stage"].ref_of("nothing") == doc["stage"].ref()
    assert doc["targets"].ref_of(99) == doc["targets"].ref()


def test_syntax_error_names_the_line_pyyaml_reports() -> None:
    bad = "a: 1\nb: [1, 2\nc: 3\n"
    with pytest.raises(SourceError) as info:
        load_yaml("bad.yaml", bad)
    # Reference: PyYAML's own problem_mark for the same text (0-based, hence + 1).
    with pytest.raises(yaml.MarkedYAMLError) as ref:
        yaml.safe_load(bad)
    (problem,) = info.value.problems
    assert problem.where.line == ref.value.problem_mark.line + 1
    assert "YAML syntax error" in problem.message
    assert str(problem).startswith(f"bad.yaml:{problem.where.line}:")


def test_duplicate_keys_are_all_reported() -> None:
    text = "a: 1\nb: 2\na: 3\nc: {x: 1, x: 2}\n"
    with pytest.raises(SourceError) as info:
        load_yaml("dup.yaml", text)
    lines = [p.where.line for p in info.value.problems]
    assert lines == [3, 4]
    assert "first is at line 1" in info.value.problems[0].hint
    assert len(str(info.value).splitlines()) == 2


def test_scalar_and_empty_documents_come_back_marked() -> None:
    assert load_yaml("s.yaml", "42\n") == MarkedScalar(42, SourceRef("s.yaml", 1, 1))
    empty = load_yaml("e.yaml", "# only a comment\n")
    assert isinstance(empty, MarkedScalar) and empty.value is None


def test_missing_file_is_a_source_error(tmp_path) -> None:
    with pytest.raises(SourceError, match="file not found"):
        load_yaml(tmp_path / "absent.yaml")


def test_problem_text_format() -> None:
    p = Problem(SourceRef("r.yaml", 4, 7), "frames must be at least 1", "use 1 or more")
    assert str(p) == "r.yaml:4:7: frames must be at least 1. use 1 or more."
