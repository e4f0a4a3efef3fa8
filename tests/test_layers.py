"""The layer rules of DESIGN.md hold: imports point downwards only.

Read from the source with `ast` (every `import` and `from ... import`, including those inside
functions), so a lazy import cannot hide a wrong arrow.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
PACKAGES = ("station", "drivers", "sequences", "analysis", "simulators")
FORBIDDEN = {
    "analysis": {"station", "drivers", "sequences", "simulators"},
    "drivers": {"station", "sequences", "simulators", "analysis"},
    "sequences": {"station", "drivers", "simulators", "analysis"},
    "simulators": {"station", "sequences"},
}


def imported_packages(path: Path) -> set[str]:
    """Top-level project packages a module imports anywhere in its body."""
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names = [node.module]
        else:
            continue
        found.update(n.split(".")[0] for n in names if n.split(".")[0] in PACKAGES)
    return found


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_imports_point_downwards_only(package: str) -> None:
    wrong = {f"{p.relative_to(REPO)} imports {sorted(bad)}"
             for p in (REPO / package).rglob("*.py")
             if (bad := imported_packages(p) & FORBIDDEN[package])}
    assert not wrong, sorted(wrong)
