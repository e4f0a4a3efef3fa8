"""The report's contents, read from the HTML file the end of each run wrote.

Outside references: SHA-256 of the input files recomputed with hashlib (FIPS 180-4); embedded
plots decoded and compared byte for byte with plots/*.png and plots/*.svg; a PNG starts with the
PNG signature (ISO/IEC 15948, 89 50 4E 47 0D 0A 1A 0A), an SVG parses as XML with an <svg> root
in the SVG namespace (W3C SVG 1.1).
"""

from __future__ import annotations

import base64
import hashlib
import re
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path

import pytest

from station.record.verify import verify_run
from station.report.runread import read_run
from station.report.render import render_html

SECTION_ORDER = ["identity", "verdicts", "timeline", "readings", "provenance"]
PNG_SIGNATURE = bytes.fromhex("89504E470D0A1A0A")


def html_of(run: Path) -> str:
    return (run / "report.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("name", ["distortion-grid", "distortion-scan", "sitf-sweep",
                                  "overnight-soak", "geometry-family", "image-quality",
                                  "faulted"])
def test_sections_in_reading_order_and_nothing_fetched(all_runs, name: str) -> None:
    html = html_of(all_runs[name])
    where = [html.index(f'id="{s}"') for s in SECTION_ORDER]
    assert where == sorted(where)
    analyses = [m.start() for m in re.finditer(r'id="analysis-', html)]
    assert all(where[1] < a < where[2] for a in analyses)  # analyses between verdicts, timeline
    # self-contained: no reference to any other file or host
    assert not re.search(r'(src|href)="(?!data:|#)', html)
    assert verify_run(all_runs[name]).ok  # the report is written after the close, not checked


@pytest.mark.parametrize("name", ["distortion-grid", "sitf-sweep"])
def test_embedded_plots_are_the_run_plots_and_checksums_are_right(all_runs, name: str) -> None:
    run = all_runs[name]
    html = html_of(run)
    pngs = [base64.b64decode(b) for b in re.findall(r'src="data:image/png;base64,([^"]+)"', html)]
    svgs = [base64.b64decode(b) for b in
            re.findall(r'src="data:image/svg\+xml;base64,([^"]+)"', html)]
    assert all(png.startswith(PNG_SIGNATURE) for png in pngs)
    assert all(ET.fromstring(svg).tag == "{http://www.w3.org/2000/svg}svg" for svg in svgs)
    embedded = pngs + svgs
    plots = sorted((run / "plots").glob("*.png")) + sorted((run / "plots").glob("*.svg"))
    on_disk = [p.read_bytes() for p in plots]
    assert all(pic in embedded for pic in on_disk)
    assert len(embedded) == len(on_disk) + 1  # + the instrument readings chart
    if name == "distortion-grid":  # the distortion plots are SVG (vector, text kept as text)
        assert sorted(p.name for p in plots if p.suffix == ".svg") == [
            "distortion_map.svg", "distortion_radial.svg", "distortion_residual.svg"]
    for copy in (run / "inputs").glob("*__*"):
        assert hashlib.sha256(copy.read_bytes()).hexdigest() in html, copy.name


def test_verdict_rows_match_the_results(all_runs) -> None:
    """sitf-sweep on the demo camera: NETD above the demo UUT's 50 mK limit, so FAILED."""
    record = read_run(all_runs["sitf-sweep"])
    netd = next(v for v in record.verdicts.rows if v.key == "netd_mk")
    html = html_of(all_runs["sitf-sweep"])
    assert record.verdicts.outcome == ("FAILED" if netd.status == "FAIL" else "PASSED")
    assert f'id="overall">{record.verdicts.outcome}<' in html
    assert f"{netd.value:.4g}" in html and netd.limit == 50.0


def test_faulted_run_gets_a_partial_report_with_its_cause(all_runs) -> None:
    run = all_runs["faulted"]
    record = read_run(run)
    html = html_of(run)
    assert record.state == "faulted"
    assert 'id="partial"' in html and "blackbody" in record.cause
    assert re.sub(r"\s+", " ", record.cause.split(";")[0])[:40] in re.sub(r"\s+", " ", html)
    assert 'id="overall">NOT JUDGED<' in html
    # the wheel's garbled reply was retried (ridden out), the blackbody ended the run
    assert "ridden out: retried 1x; recovered" in html
    assert "report check: this run is meant to fault" in html  # the operator's note


def test_report_is_rendered_the_same_from_the_folder_again(all_runs) -> None:
    """`nightbench report RUN` long after the run: same content (only the footer's time)."""
    run = all_runs["distortion-grid"]
    strip = lambda h: re.sub(r"Report generated [^<]*", "", h)  # noqa: E731
    assert strip(render_html(run)) == strip(html_of(run))


def test_pdf_from_the_optional_extra(all_runs, tmp_path) -> None:
    """`nightbench report RUN --pdf` (WeasyPrint): a PDF of A4 pages by default (ISO 216:
    210 x 297 mm = 595.3 x 841.9 pt)."""
    pytest.importorskip("weasyprint", reason="the optional pdf extra is not installed")
    from station.cli.main import main

    run = all_runs["distortion-grid"]
    assert main(["report", str(run), "--out", str(tmp_path / "r.html"), "--pdf"]) == 0
    pdf = (tmp_path / "r.pdf").read_bytes()
    assert pdf.startswith(b"%PDF-")
    # page dictionaries may sit in compressed object streams (PDF 1.5+, Flate = zlib)
    text = pdf + b"".join(_inflate(m) for m in re.findall(rb"stream\r?\n(.*?)endstream", pdf,
                                                          re.S))
    boxes = re.findall(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", text)
    assert boxes and all(abs(float(w) - 595.28) < 1 and abs(float(h) - 841.89) < 1
                         for w, h in boxes)


def _inflate(data: bytes) -> bytes:
    try:
        return zlib.decompress(data)
    except zlib.error:
        return b""
