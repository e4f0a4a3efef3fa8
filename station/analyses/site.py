"""The one AnalysisSite: captures read from a run folder, results written to one results folder.

During a run the site's results and plots folders are the run's own results/ and plots/ and each
written file is registered (checksummed into the run's record). A re-analysis reads the same
captures and writes to a new folder (RUN/reanalysis/<n>/ or --out), registering into a list.
Either way a result can only be written inside the site's results or plots folder: a file name
with a separator or '..' is refused.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, MutableMapping, Sequence
from pathlib import Path
from typing import Any, TypeVar

import numpy as np

from station.analyses.registry import AnalysisFailed, JsonValue
from station.record import frame_store

__all__ = ["FolderSite"]

T = TypeVar("T")


class FolderSite:
    """Captures from ``run_path``/frames; results in ``results_dir``, plots in ``plots_dir``."""

    def __init__(self, run_path: Path, results_dir: Path, plots_dir: Path, *, run_id: str,
                 register: Callable[[Path], object] | None = None,
                 memo: MutableMapping[tuple[Any, ...], Any] | None = None) -> None:
        self._run_path = Path(run_path)
        self._memo = memo if memo is not None else {}
        self._results_dir = Path(results_dir)
        self._plots_dir = Path(plots_dir)
        self._run_id = run_id
        self._register = register
        self.written: list[Path] = []

    @property
    def run_path(self) -> Path:
        """The run folder the captures come from (its own results/ may hold step outputs)."""
        return self._run_path

    @property
    def results_dir(self) -> Path:
        return self._results_dir

    @property
    def plots_dir(self) -> Path:
        return self._plots_dir

    @property
    def run_id(self) -> str:
        return self._run_id

    def capture_info(self, name: str) -> Mapping[str, JsonValue]:
        try:
            meta = frame_store.load_metadata(self._run_path, name)
        except frame_store.FrameStoreError as exc:
            raise AnalysisFailed(str(exc)) from None
        extra = meta.get("extra", {})
        return extra if isinstance(extra, dict) else {}

    def load_average(self, name: str) -> np.ndarray:
        try:
            return frame_store.load_average(self._run_path, name)
        except frame_store.FrameStoreError as exc:
            raise AnalysisFailed(str(exc)) from None

    def load_stack(self, name: str) -> np.ndarray:
        try:
            return frame_store.load_stack(self._run_path, name)
        except frame_store.FrameStoreError as exc:
            raise AnalysisFailed(f"{exc}; this analysis needs the frames kept as a stack "
                                 "(keep: stack or both)") from None

    def remembered(self, what: str, captures: Sequence[str], compute: Callable[[], T]) -> T:
        """`compute()` once per run for the same captures (keyed by the checksums of their files,
        so a retaken capture is computed afresh): NETD, uniformity, SiTF, 3-D noise and the
        bad-pixel map all mask the one bad-pixel map of the same two flats."""
        key = (what, *((name, self._checksums(name)) for name in captures))
        if key not in self._memo:
            self._memo[key] = compute()
        return self._memo[key]  # type: ignore[no-any-return]

    def _checksums(self, name: str) -> tuple[str, ...]:
        try:
            files = frame_store.load_metadata(self._run_path, name).get("files", {})
        except frame_store.FrameStoreError as exc:
            raise AnalysisFailed(str(exc)) from None
        return tuple(sorted(str(info.get("sha256")) for info in files.values()
                            if isinstance(info, dict)))

    @staticmethod
    def _inside(folder: Path, file_name: str) -> Path:
        if (not file_name or "/" in file_name or "\\" in file_name or file_name in (".", "..")
                or Path(file_name).is_absolute()):
            raise AnalysisFailed(f"result file name {file_name!r} is not a plain file name; "
                                 "results are written only inside the results folder")
        folder.mkdir(parents=True, exist_ok=True)
        return folder / file_name

    def result_path(self, file_name: str) -> Path:
        return self._inside(self._results_dir, file_name)

    def plot_path(self, file_name: str) -> Path:
        return self._inside(self._plots_dir, file_name)

    def register(self, path: Path) -> None:
        path = Path(path)
        full = path.resolve()
        inside = any(_is_within(full, d.resolve()) for d in (self._results_dir, self._plots_dir))
        if not inside:
            raise AnalysisFailed(f"{path} is outside {self._results_dir} and {self._plots_dir}; "
                                 "an analysis writes only into its results and plots folders")
        self.written.append(path)
        if self._register is not None:
            self._register(path)


def _is_within(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
        return True
    except ValueError:
        return False
