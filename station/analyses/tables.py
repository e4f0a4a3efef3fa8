"""CSV result files written through a site (inside its results folder, registered)."""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from pathlib import Path

from station.analyses.registry import AnalysisSite
from station.record.atomic import write_text_atomic

__all__ = ["write_csv"]


def write_csv(site: AnalysisSite, file_name: str, header: Sequence[str],
              rows: Sequence[Sequence[object]]) -> Path:
    """One CSV file (numbers written with repr precision) in the site's results folder."""
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\n")
    out.writerow(header)
    for row in rows:
        out.writerow([repr(float(v)) if isinstance(v, float) else v for v in row])
    path = write_text_atomic(site.result_path(file_name), buf.getvalue())
    site.register(path)
    return path
