"""Each report opened in headless Chromium (Debian's, driven by Playwright): every image
decodes, nothing is logged as an error, the verdict table is there, the page fits a printed A4
page, a screenshot is kept for people to look at (tests/artifacts/), and the browser prints it to
PDF on A4 and on Letter.

Paper sizes: ISO 216 A4 is 210 x 297 mm = 595.3 x 841.9 pt; ANSI Letter is 8.5 x 11 in =
612 x 792 pt (1 in = 72 pt = 25.4 mm). Chromium rounds page sizes to whole CSS pixels, hence the
1 pt tolerance.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from station.report.runread import read_run

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"  # ignored by git
A4_PT = (595.28, 841.89)
LETTER_PT = (612.0, 792.0)
A4_PRINTABLE_PX = round((210 - 24) / 25.4 * 96)  # width inside the 12 mm side margins at 96 dpi


def media_boxes(pdf: bytes) -> list[tuple[float, float]]:
    boxes = re.findall(rb"/MediaBox\s*\[\s*([\d.]+)\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)\s*\]", pdf)
    return [(float(x1) - float(x0), float(y1) - float(y0)) for x0, y0, x1, y1 in boxes]


@pytest.mark.parametrize("name", ["distortion-grid", "distortion-scan", "sitf-sweep",
                                  "overnight-soak", "geometry-family", "image-quality",
                                  "faulted"])
def test_report_in_a_real_browser(browser, all_runs, name: str) -> None:
    run = all_runs[name]
    record = read_run(run)
    page = browser.new_page()
    problems: list[str] = []
    page.on("console", lambda m: problems.append(f"console {m.type}: {m.text}")
            if m.type in ("error", "warning") else None)
    page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
    page.on("requestfailed", lambda r: problems.append(f"request failed: {r.url[:80]}"))
    try:
        page.goto((run / "report.html").as_uri(), wait_until="load")
        images = page.evaluate("Array.from(document.images).map(i => [i.alt, i.complete, "
                               "i.naturalWidth, i.naturalHeight])")
        assert images and all(ok and w > 0 and h > 0 for _, ok, w, h in images), images
        expected_plots = sum(len(v) for v in record.plots.values()) + 1  # + readings chart
        assert len(images) == expected_plots
        rows = page.locator("#verdict-table tbody tr")
        if record.verdicts.rows:
            assert rows.count() == len(record.verdicts.rows)
            statuses = rows.locator("td:nth-child(5)").all_inner_texts()
            assert statuses == [v.status for v in record.verdicts.rows]
        else:
            assert page.locator("#no-verdicts").is_visible()
        # the page's own stylesheet applied (the badge is coloured, the text is sans-serif)
        style = page.evaluate("[getComputedStyle(document.querySelector('#overall'))"
                              ".backgroundColor, getComputedStyle(document.body).fontFamily]")
        assert style[0] not in ("rgba(0, 0, 0, 0)", "transparent") and "Sans" in style[1], style
        assert page.locator("#overall").inner_text() in ("PASSED", "FAILED", "NOT JUDGED",
                                                         "INCOMPLETE")
        if record.state != "complete":
            assert record.state in page.locator("#partial").inner_text()
        ARTIFACTS.mkdir(parents=True, exist_ok=True)
        shot = ARTIFACTS / f"report-{name}.png"
        page.screenshot(path=str(shot), full_page=True)
        print(f"screenshot: {shot}")
        # Printed: nothing wider than A4's printable width (tables wrap, images scale).
        page.emulate_media(media="print")
        page.set_viewport_size({"width": A4_PRINTABLE_PX, "height": 1100})
        overflow = page.evaluate("document.documentElement.scrollWidth - "
                                 "document.documentElement.clientWidth")
        assert overflow <= 1, f"{overflow}px wider than an A4 page"
        for paper, size in (("A4", A4_PT), ("Letter", LETTER_PT)):
            pdf = page.pdf(format=paper, print_background=True)
            assert pdf.startswith(b"%PDF-")
            boxes = media_boxes(pdf)
            assert boxes and all(abs(w - size[0]) <= 1.0 and abs(h - size[1]) <= 1.0
                                 for w, h in boxes), (paper, boxes[:2])
            (ARTIFACTS / f"report-{name}-{paper}.pdf").write_bytes(pdf)
    finally:
        page.close()
    assert problems == []
