"""Built-in recipes: found by name, listed with descriptions, unknown names rejected helpfully."""

from __future__ import annotations

import pytest

from sequences.library import RecipeNotFoundError, find_recipe, list_builtin
from sequences.recipe import load_recipe

REQUIRED = {"distortion-grid", "distortion-scan", "sitf-sweep", "overnight-soak"}


def test_builtins_listed_with_descriptions_and_names_match_files() -> None:
    listed = dict(list_builtin())
    assert REQUIRED <= set(listed)
    for name, description in listed.items():
        assert description
        assert load_recipe(find_recipe(name)).name == name  # 'recipe:' agrees with the file name


def test_existing_path_wins_over_builtin_name(tmp_path) -> None:
    own = tmp_path / "sitf-sweep"
    own.write_text("steps:\n  - note: mine\n")
    assert find_recipe(own) == own
    assert find_recipe("sitf-sweep.yaml").name == "sitf-sweep.yaml"


def test_unknown_name_lists_builtins_and_suggests() -> None:
    with pytest.raises(RecipeNotFoundError) as info:
        find_recipe("sitf-swep")
    text = str(info.value)
    assert "did you mean 'sitf-sweep'?" in text
    assert all(name in text for name in REQUIRED)
