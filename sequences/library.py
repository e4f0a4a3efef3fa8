"""Built-in recipes shipped with nightbench, found by name, and lookup of a recipe argument.

A command line says ``nightbench check sitf-sweep`` or ``nightbench check my/recipe.yaml``: a path
that exists wins, otherwise the word is looked up among the built-ins in ``sequences/builtin/``.
"""

from __future__ import annotations

import re
from pathlib import Path

__all__ = ["BUILTIN_DIR", "RecipeNotFoundError", "list_builtin", "find_recipe"]

BUILTIN_DIR = Path(__file__).resolve().parent / "builtin"


class RecipeNotFoundError(FileNotFoundError):
    """Neither a file nor a built-in recipe; the message lists the built-ins."""


def _builtin_paths() -> dict[str, Path]:
    return {p.stem: p for p in sorted(BUILTIN_DIR.glob("*.yaml"))}


_PLAIN_DESCRIPTION = re.compile(r"^description:[ \t]+([^'\"|>&*!%@`#{\[\s][^#\n]*?)[ \t]*$",
                                re.MULTILINE)


def list_builtin() -> list[tuple[str, str]]:
    """(name, description) of every built-in recipe, sorted by name.

    A description written as a plain one-line scalar is read without parsing the YAML (so
    `nightbench recipes` answers at once); any other form goes through the YAML loader.
    """
    out: list[tuple[str, str]] = []
    for name, path in _builtin_paths().items():
        quick = _PLAIN_DESCRIPTION.search(path.read_text(encoding="utf-8"))
        if quick is not None:
            out.append((name, quick.group(1).strip()))
            continue
        from sequences.yamlsource import MarkedDict, SourceError, load_yaml

        try:
            doc = load_yaml(path)
        except SourceError:
            out.append((name, "(cannot be read: run 'check' on it for details)"))
            continue
        description = doc.get("description", "") if isinstance(doc, MarkedDict) else ""
        out.append((name, str(description).strip()))
    return out


def find_recipe(name_or_path: str | Path) -> Path:
    """The recipe file meant by a command-line argument: an existing path, else a built-in name
    (with or without ``.yaml``); raise :class:`RecipeNotFoundError` listing the built-ins."""
    path = Path(name_or_path)
    if path.is_file():
        return path
    builtins = _builtin_paths()
    key = path.name[:-5] if path.name.endswith(".yaml") else path.name
    if str(name_or_path) in (key, f"{key}.yaml") and key in builtins:
        return builtins[key]
    from sequences.steps import suggest

    listed = ", ".join(builtins) or "none"
    hint = suggest(key, builtins, "built-in recipes")
    extra = f" {hint}" if hint.startswith("did") else ""
    raise RecipeNotFoundError(f"no recipe file '{name_or_path}' and no built-in recipe of that name."
                              f"{extra} Built-in recipes: {listed}")
