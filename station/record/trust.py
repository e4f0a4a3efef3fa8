"""What resume checks on disk before it continues: frames, inputs, leftover temporary files.

Why: between a kill and a resume anything may happen to the folder. A frame edited in that gap
would be analysed and its new checksum written into the final manifest, so `verify` would then
vouch for it; an edited copy of the recipe in inputs/ would be run. So before a run continues,
every file a completed step wrote is compared with the checksum the journal recorded when the
step finished, and every inputs/ copy with the checksum the manifest recorded when the run
started. A mismatch is refused naming the file; `--force` goes on and the manifest records it.

Example::

    mismatches = check_recorded_files(run, journal.completed(), manifest.inputs)
    aside = set_aside_temporary_files(run)
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from station.record.atomic import TEMP_SUFFIX, sha256_file
from station.record.frame_store import ABANDONED, abandon_files

LEFTOVER_SUFFIX = ".leftover"


@dataclass(frozen=True)
class Mismatch:
    """A file whose content is not what was recorded when it was written."""

    path: str       # relative to the run folder
    problem: str    # "missing" or "changed since <when>"

    def __str__(self) -> str:
        return f"{self.path}: {self.problem}"


def _capture_files(record: Mapping[str, Any]) -> dict[str, str]:
    """{relative path: sha256} of the frame files a journalled capture step wrote."""
    capture = (record.get("data") or {}).get("capture") or {}
    sums = capture.get("checksums") or {}
    out: dict[str, str] = {}
    for role in ("stack", "average"):
        rel = capture.get(role)
        if rel and Path(rel).name in sums:
            out[str(rel)] = str(sums[Path(rel).name])
    return out


def check_recorded_files(run_path: Path, completed: Mapping[str, Mapping[str, Any]],
                         inputs: Mapping[str, Mapping[str, Any]]) -> list[Mismatch]:
    """Compare completed captures' frames (journal checksums) and inputs/ copies (manifest
    checksums) with the disk; returns every mismatch (empty: all as recorded)."""
    found: list[Mismatch] = []
    expected: dict[str, tuple[str, str]] = {}
    for step_id, record in completed.items():
        for rel, digest in _capture_files(record).items():
            expected[rel] = (digest, f"step {step_id} recorded it")
    for role, entry in inputs.items():
        rel, digest = entry.get("relpath"), entry.get("sha256")
        if rel and digest:
            expected[str(rel)] = (str(digest), f"the run copied the {role} file")
    for rel, (digest, when) in sorted(expected.items()):
        path = run_path / rel
        if not path.is_file():
            found.append(Mismatch(rel, f"missing ({when})"))
        elif sha256_file(path) != digest:
            found.append(Mismatch(rel, f"changed since {when} (checksum differs)"))
    return found


def temporary_files(run_path: Path) -> list[Path]:
    """Leftovers of atomic writes cut short (`*.tmp`), outside frames/abandoned/."""
    aside = run_path / "frames" / ABANDONED
    return sorted(p for p in run_path.rglob(f"*{TEMP_SUFFIX}")
                  if p.is_file() and aside not in p.parents)


def set_aside_temporary_files(run_path: Path, *, clock: Any = None,
                              events: Any = None) -> Path | None:
    """Move leftover temporary files to frames/abandoned/temporary-files-<n>/ with a reason."""
    files = []
    for path in temporary_files(run_path):  # renamed so nothing reads them as pending writes
        kept = path.with_name(path.name + LEFTOVER_SUFFIX)
        os.replace(path, kept)
        files.append(kept)
    if not files:
        return None
    return abandon_files(run_path / "frames", "temporary-files", files,
                         "temporary files of writes cut short by an interruption (the final "
                         "files were never replaced by them)", clock=clock, events=events)


__all__ = ["Mismatch", "check_recorded_files", "set_aside_temporary_files", "temporary_files"]
