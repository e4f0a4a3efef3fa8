"""Render a run folder's report: one self-contained HTML file (plots embedded as data URIs).

The page is built from Jinja2 templates shipped in this package (templates/); nothing is fetched
when the file is opened, so it reads offline, attached to an e-mail or filed with the unit, and
prints on A4 or Letter (the @page rules in report.css).
"""

from __future__ import annotations

import base64
import datetime as dt
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

from station.formatting import format_duration
from station.record.atomic import write_bytes_atomic
from station.report.readings import plot_series, read_series
from station.report.runread import RunRecord, read_run
from station.report.timeline import read_timeline
from station.report.verdict_rows import count_by_status

REPORT_NAME = "report.html"
PDF_NAME = "report.pdf"
KEY_FIGURES_MAX = 24


def _environment() -> Environment:
    env = Environment(loader=PackageLoader("station.report", "templates"),
                      autoescape=select_autoescape(["html", "j2"]), undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True)
    env.filters["num"] = format_number
    env.filters["duration"] = format_duration
    return env


def format_number(value: Any, digits: int = 4) -> str:
    """Four significant digits, '-' for none: enough for a figure read beside its uncertainty."""
    if value is None or isinstance(value, bool):
        return "-" if value is None else ("yes" if value else "no")
    if isinstance(value, (int, float)):
        if not math.isfinite(value):
            return "-"
        return f"{value:.{digits}g}" if isinstance(value, float) else str(value)
    return str(value)


IMAGE_TYPES = {".png": "image/png", ".svg": "image/svg+xml"}


def data_uri(data: bytes, media_type: str = "image/png") -> str:
    """The picture inlined in the page (one self-contained HTML file, printable as PDF)."""
    return f"data:{media_type};base64," + base64.b64encode(data).decode("ascii")


def file_data_uri(path: Path) -> str:
    """data_uri of a plot file, typed by its suffix (PNG or SVG)."""
    return data_uri(path.read_bytes(), IMAGE_TYPES.get(path.suffix.lower(), "image/png"))


def _analyses(record: RunRecord) -> list[dict[str, Any]]:
    """One section per analysis: its verdicts, key figures and plots."""
    names = [n for n in record.results if n != "verdicts"]
    names += [n for n in record.plots if n not in names]
    out = []
    for name in names:
        figures = [f for f in record.figures if f.name.startswith(f"{name}.")]
        out.append({
            "name": name,
            "verdicts": [v for v in record.verdicts.rows if v.analysis == name],
            "figures": [{"name": f.name.split(".", 1)[1], "value": f.value, "sigma": f.sigma,
                         "unit": f.unit} for f in figures[:KEY_FIGURES_MAX]],
            "more": max(0, len(figures) - KEY_FIGURES_MAX),
            "notes": (record.results.get(name) or {}).get("notes", [])
            if isinstance(record.results.get(name), Mapping) else [],
            "plots": [{"name": p.stem, "uri": file_data_uri(p)}
                      for p in record.plots.get(name, [])],
        })
    return out


def _headline(record: RunRecord) -> dict[str, Any]:
    """The overall verdict; a run that did not complete is never reported PASSED."""
    outcome = record.verdicts.outcome
    complete = record.state == "complete"
    if not complete and outcome == "PASSED":
        outcome = "INCOMPLETE"
    return {"outcome": outcome, "complete": complete,
            "counts": count_by_status(record.verdicts.rows),
            "css": {"PASSED": "pass", "FAILED": "fail"}.get(outcome, "none")}


def _provenance(record: RunRecord) -> dict[str, Any]:
    m = record.manifest
    inputs = [{"role": role, **entry} for role, entry in (m.get("inputs") or {}).items()]
    plan = record.plan
    return {
        "software_version": m.get("software_version"), "python": m.get("python"),
        "platform": m.get("platform"), "host": m.get("host"),
        "start_utc": m.get("start_utc"), "end_utc": m.get("end_utc"),
        "simulated": m.get("simulated_clock"), "sessions": m.get("sessions") or [],
        "inputs": inputs, "overrides": plan.get("overrides") or {}, "seed": plan.get("seed"),
        "instruments": plan.get("instruments") or {}, "files": len(m.get("files") or {}),
        "folder": record.path.name, "run_uid": record.run_uid,
    }


def build_context(record: RunRecord) -> dict[str, Any]:
    timeline = read_timeline(record.path)
    chart = plot_series(read_series(record.path))
    start, end = record.started, record.ended
    return {
        "r": record, "uut": record.uut, "plan": record.plan, "headline": _headline(record),
        "verdicts": record.verdicts, "analyses": _analyses(record), "timeline": timeline,
        "readings_uri": data_uri(chart, "image/svg+xml") if chart else None, "prov": _provenance(record),
        "duration_s": (end - start).total_seconds() if start and end else None,
        "generated_utc": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "css": (Path(__file__).parent / "templates" / "report.css").read_text(encoding="utf-8"),
    }


def render_html(run: Path | str) -> str:
    """The report of a run folder as HTML text (finished, failed, aborted or faulted)."""
    record = read_run(run)
    return _environment().get_template("report.html.j2").render(**build_context(record))


def write_report(run: Path | str, out: Path | str | None = None) -> Path:
    """Write report.html into the run folder (or to ``out``), atomically."""
    target = Path(out) if out is not None else Path(run) / REPORT_NAME
    write_bytes_atomic(target, render_html(run).encode("utf-8"))
    return target


def write_pdf(html_path: Path, pdf_path: Path | None = None) -> Path:
    """Print the report to PDF with WeasyPrint (the optional `pdf` extra)."""
    try:
        import weasyprint
    except ImportError as exc:
        raise RuntimeError("PDF output needs the optional extra: pip install "
                           "'nightbench[pdf]' (or print report.html from a browser)") from exc
    target = pdf_path or html_path.with_suffix(".pdf")
    weasyprint.HTML(filename=str(html_path)).write_pdf(str(target))
    return target
