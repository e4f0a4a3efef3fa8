"""Check a run folder against its manifest: what is missing, cut short, changed or unexplained.

Why: a run folder is evidence. Before results are trusted (or handed to a customer), every file is
compared with the SHA-256 and size the manifest recorded when the run ended, and the journal, the
event log and the captures are read back to see that they hold together.

Example::

    report = verify_run(Path("runs/20260101T000000Z_SN-0042_sitf_sweep"))
    print(report.format())
    sys.exit(0 if report.ok else 1)
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import tifffile

from station.record.atomic import TEMP_SUFFIX, sha256_file
from station.record.events import scan_events
from station.record.frame_store import (ABANDONED, CAPTURE_FORMAT, META_SUFFIX, capture_files,
                                 partial_files, capture_stem)
from station.record.journal import Journal, JournalError
from station.record.live import is_live_view
from station.record.manifest import (DERIVED_AFTER_CLOSE, MANIFEST_NAME, NOT_RECORDED, RUNNING,
                                     ManifestError, load_manifest)
from station.record.runfolder import EVENTS_NAME, JOURNAL_NAME, MARKER_NAME



@dataclass
class VerifyReport:
    """Findings of `verify_run`. `problems` make the run fail; `notes` are for information."""

    path: Path
    state: str | None = None
    cause: str | None = None
    files_checked: int = 0
    missing: list[str] = field(default_factory=list)
    truncated: list[str] = field(default_factory=list)
    altered: list[str] = field(default_factory=list)
    extra: list[str] = field(default_factory=list)
    temporary: list[str] = field(default_factory=list)
    partial: list[str] = field(default_factory=list)
    abandoned: list[dict[str, Any]] = field(default_factory=list)
    captures_checked: int = 0
    capture_problems: list[str] = field(default_factory=list)
    journal_entries: int = 0
    journal_problem: str | None = None
    journal_warnings: list[str] = field(default_factory=list)
    events_count: int = 0
    events_problems: list[str] = field(default_factory=list)
    manifest_problem: str | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def problems(self) -> list[str]:
        out: list[str] = []
        if self.manifest_problem:
            out.append(self.manifest_problem)
        out += [f"missing: {p}" for p in self.missing]
        out += [f"truncated: {p}" for p in self.truncated]
        out += [f"altered: {p}" for p in self.altered]
        out += [f"not in the manifest: {p}" for p in self.extra]
        out += [f"leftover temporary file: {p}" for p in self.temporary]
        out += [f"unfinished capture file: {p}" for p in self.partial]
        out += self.capture_problems
        if self.journal_problem:
            out.append(self.journal_problem)
        out += self.events_problems
        return out

    @property
    def ok(self) -> bool:
        return not self.problems

    def format(self) -> str:
        """Plain text for the command line: verdict first, then each finding on its own line."""
        lines = [f"run folder: {self.path}",
                 f"final state: {self.state or 'unknown'}" + (f" ({self.cause})" if self.cause
                                                                else ""),
                 f"files checked: {self.files_checked}; captures checked: "
                 f"{self.captures_checked}; journal entries: {self.journal_entries}; events: "
                 f"{self.events_count}"]
        problems = self.problems
        lines.append("verdict: OK, every file matches the manifest" if not problems
                     else f"verdict: {len(problems)} problem(s)")
        lines += [f"  PROBLEM {p}" for p in problems]
        for item in self.abandoned:
            lines.append(f"  set aside: {item['folder']} (step {item.get('step_id')}, "
                         f"{item.get('frames_added')} frame(s)): {item.get('reason')}")
        lines += [f"  note: {n}" for n in self.journal_warnings + self.notes]
        return "\n".join(lines)


def verify_run(path: Path | str) -> VerifyReport:
    """Compare a run folder with its manifest and read back journal, events and captures."""
    root = Path(path)
    report = VerifyReport(root)
    if not root.is_dir():
        report.manifest_problem = f"{root}: no such run folder"
        return report
    if not (root / MARKER_NAME).exists():
        report.notes.append(f"{MARKER_NAME} is missing: this may not be a run folder")
    _check_manifest(root, report)
    _check_partials_and_abandoned(root, report)
    _check_captures(root, report)
    _check_journal(root, report)
    _check_events(root, report)
    return report


def _check_manifest(root: Path, report: VerifyReport) -> None:
    try:
        manifest = load_manifest(root)
    except ManifestError as exc:
        report.manifest_problem = f"manifest unusable: {exc}"
        return
    report.state, report.cause = manifest.state, manifest.cause
    if manifest.state == RUNNING:
        report.manifest_problem = ("the run did not finish (manifest says running): it was "
                                   "interrupted; resume it or read what it holds, checksums "
                                   "are written only when a run ends")
        return
    listed = manifest.files
    report.files_checked = len(listed)
    for rel, entry in sorted(listed.items()):
        file = root / rel
        if not file.is_file():
            report.missing.append(rel)
            continue
        size = file.stat().st_size
        if size < int(entry.get("bytes", 0)):
            report.truncated.append(f"{rel} ({size} of {entry['bytes']} bytes)")
        elif sha256_file(file) != entry.get("sha256"):
            detail = "" if size == entry.get("bytes") else f", {size} bytes, was {entry['bytes']}"
            report.altered.append(f"{rel} (checksum differs{detail})")
    for file in sorted(p for p in root.rglob("*") if p.is_file()):
        rel = file.relative_to(root).as_posix()
        if rel == MANIFEST_NAME or rel in listed or rel in NOT_RECORDED \
                or rel in DERIVED_AFTER_CLOSE or is_live_view(rel):
            continue
        if rel.startswith(REANALYSIS_PREFIX):  # written after the run by `nightbench analyze`
            version = rel.split("/")[1] if rel.count("/") > 1 else ""
            note = f"re-analysis {version} (reanalysis/{version}/) is not part of the run record"
            if note not in report.notes:
                report.notes.append(note)
            continue
        if file.name.endswith(TEMP_SUFFIX):
            report.temporary.append(rel)
        elif not file.name.endswith(".partial"):
            report.extra.append(rel)


REANALYSIS_PREFIX = "reanalysis/"


def _check_partials_and_abandoned(root: Path, report: VerifyReport) -> None:
    frames = root / "frames"
    report.partial = [p.relative_to(root).as_posix() for p in partial_files(frames)]
    aside = frames / ABANDONED
    if not aside.is_dir():
        return
    for folder in sorted(p for p in aside.iterdir() if p.is_dir()):
        item: dict[str, Any] = {"folder": folder.relative_to(root).as_posix()}
        try:
            info = json.loads((folder / "reason.json").read_text(encoding="utf-8"))
            item.update({k: info.get(k) for k in ("step_id", "reason", "frames_added")})
        except (OSError, ValueError):
            item["reason"] = "reason.json missing or unreadable"
        report.abandoned.append(item)


def _check_captures(root: Path, report: VerifyReport) -> None:
    frames = root / "frames"
    if not frames.is_dir():
        return
    for meta_path in sorted(frames.glob(f"*{META_SUFFIX}")):
        rel = meta_path.relative_to(root).as_posix()
        try:
            meta = json.loads(meta_path.read_text(encoding="utf-8"))
        except ValueError:
            report.capture_problems.append(f"capture metadata is not valid JSON: {rel}")
            continue
        if not isinstance(meta, dict) or meta.get("format") != CAPTURE_FORMAT:
            continue
        report.captures_checked += 1
        files = capture_files(frames, capture_stem(str(meta.get("name", ""))))
        for role, info in meta.get("files", {}).items():
            # the file name the capture recorded, else the one the naming scheme gives
            file = frames / info["file"] if isinstance(info, dict) and info.get("file") \
                else files.get(role)
            if file is None or not file.is_file():
                report.capture_problems.append(f"capture {meta.get('name')!r}: {role} file "
                                               f"missing ({info.get('file')})")
                continue
            recorded = info.get("sha256") if isinstance(info, dict) else None
            if recorded and sha256_file(file) != recorded:
                report.capture_problems.append(
                    f"capture {meta.get('name')!r}: {role} file {file.name} does not match the "
                    "checksum in its metadata (changed after it was captured)")
            if role == "stack":
                pages = _pages(file)
                if pages != meta.get("count"):
                    report.capture_problems.append(
                        f"capture {meta.get('name')!r}: stack holds {pages} readable frame(s), "
                        f"metadata says {meta.get('count')}")


def _pages(path: Path) -> int | None:
    try:
        with tifffile.TiffFile(path) as tf:
            return len(tf.pages)
    except Exception:
        return None


def _check_journal(root: Path, report: VerifyReport) -> None:
    path = root / JOURNAL_NAME
    if not path.exists():
        report.notes.append("no journal (no step completed)")
        return
    try:
        journal = Journal(path)
    except JournalError as exc:
        report.journal_problem = f"journal damaged: {exc}"
        return
    report.journal_entries = len(journal)
    report.journal_warnings = list(journal.warnings)


def _check_events(root: Path, report: VerifyReport) -> None:
    path = root / EVENTS_NAME
    if not path.exists():
        report.notes.append("no event log")
        return
    scan = scan_events(path)
    report.events_count = len(scan.events)
    for number, text in scan.bad_lines:
        report.events_problems.append(f"{EVENTS_NAME}, line {number}: unreadable ({text[:60]!r})")
    if scan.torn_tail:
        report.notes.append(f"{EVENTS_NAME}: last line cut off by an interruption")
