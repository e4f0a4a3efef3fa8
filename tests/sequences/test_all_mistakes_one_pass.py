"""Every mistake of a recipe in one pass: a step with a malformed option is still checked
against the station, so a second `check` never reveals a mistake the first one hid."""

from __future__ import annotations

import pytest

from sequences.recipe import load_recipe
from sequences.yamlsource import SourceError

FOUR_MISTAKES = """\
recipe: four-mistakes
description: two steps with two mistakes each
steps:
  - target: open
  - blackbody: {mode: difference, value: 90, tolerance: fast}
  - move: {az: 99, el: up}
"""


def test_shape_and_station_mistakes_of_one_step_come_together(facts) -> None:
    with pytest.raises(SourceError) as info:
        load_recipe("four.yaml", facts=facts, text=FOUR_MISTAKES)
    found = sorted((p.where.line, p.where.column, p.message) for p in info.value.problems)
    assert len(found) == 4, found
    # (line, column) of each mistake, counted in the text above (1-based, as editors show)
    assert [(line, col) for line, col, _ in found] == [(5, 42), (5, 57), (6, 16), (6, 24)]
    messages = " | ".join(m for *_, m in found)
    for piece in ("difference 90 K is outside the station's limits -10 .. 40 K",
                  "tolerance must be a number", "az = 99 is outside the soft limits -45 .. 45",
                  "el must be a number"):
        assert piece in messages


def test_a_malformed_step_without_station_mistakes_reports_only_its_own(facts) -> None:
    text = FOUR_MISTAKES.replace("value: 90", "value: 10").replace("az: 99", "az: 5")
    with pytest.raises(SourceError) as info:
        load_recipe("two.yaml", facts=facts, text=text)
    assert [p.where.line for p in info.value.problems] == [5, 6]
