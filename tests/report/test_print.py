"""The report printed to PDF by Chromium, and its first screen at 1400 x 900.

Chromium's own ``--print-to-pdf`` prints the page as a person would from the
browser; pypdf reads the PDF back: every chart is drawn as one image, so
each image's box (from the PDF's transformation matrix at the moment it is
drawn) must lie inside its page, below the top margin and above the footer,
and there must be as many images as charts (a chart cut across two pages
would be drawn twice, clipped). The sliders of the interactive charts must
not reach paper. The first screen is measured by the page itself
(``data-summary-bottom``, see report/html.py).
"""

from __future__ import annotations

import subprocess

import pytest

from pathfinder.report.html import write_report

from . import add_invented_tables, small_run
from .test_browser import CHROMIUM, Dom, open_in_chromium

pypdf = pytest.importorskip("pypdf")

MM = 72 / 25.4


def _print_to_pdf(page, pdf, profile):
    if CHROMIUM is None:
        pytest.skip("no chromium binary (install the Debian package 'chromium' to run the browser checks)")
    command = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--disable-extensions", f"--user-data-dir={profile}", "--host-resolver-rules=MAP * ~NOTFOUND",
        "--virtual-time-budget=30000", "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
        page.resolve().as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=240)
    assert done.returncode == 0, done.stderr[-2000:]


def _images(page):
    """Boxes (x0, y0, x1, y1) in points of every image drawn on a PDF page."""
    boxes = []

    def before(operator, operands, cm, tm):
        if operator == b"Do":
            a, b, c, d, e, f = (float(v) for v in cm)
            boxes.append((e, f, e + a, f + d))

    page.extract_text(visitor_operand_before=before)
    return boxes


@pytest.fixture(scope="module")
def printed(tmp_path_factory):
    base = tmp_path_factory.mktemp("print")
    folder = small_run(base / "run")
    add_invented_tables(folder)
    page = write_report(folder)
    pdf = base / "report.pdf"
    _print_to_pdf(page, pdf, base / "profile")
    return page.read_text(encoding="utf-8"), pypdf.PdfReader(str(pdf))


def test_no_chart_crosses_a_page_boundary(printed):
    source, reader = printed
    charts = source.count('<div class="chart"')
    drawn = 0
    for page in reader.pages:
        height = float(page.mediabox.height)
        for x0, y0, x1, y1 in _images(page):
            drawn += 1
            assert y0 >= 14 * MM and y1 <= height - 12 * MM, (x0, y0, x1, y1)
    assert drawn == charts


def test_paper_carries_page_numbers_the_date_and_no_slider(printed):
    source, reader = printed
    text = "\n".join(page.extract_text() for page in reader.pages)
    assert f"page 1 of {len(reader.pages)}" in text
    assert "model along the path" in source          # the sliders' label is on screen ...
    assert "model along the path" not in text         # ... and not on paper


def test_the_first_screen_holds_the_suggested_model_and_its_skill(tmp_path):
    folder = small_run(tmp_path / "run")
    page = write_report(folder)
    profile = tmp_path / "profile"
    dom_text, _ = open_in_chromium(page, profile, window="1400,900")
    dom = Dom(dom_text)
    assert 0 < int(dom.root["data-summary-bottom"]) <= 900
    summary = dom_text.split('id="summary"', 1)[1].split("</section>", 1)[0]
    assert "Suggested model" in summary and "Held-out skill" in summary
    assert "deviance explained on held-out sites" in summary


def test_a_warning_that_changes_the_reading_shows_on_the_first_screen(tmp_path):
    from pathfinder.report.html import read_record, read_tables

    folder = small_run(tmp_path / "run")
    record = read_record(folder)
    note = ("there are only 6 presences for 10 folds, so 6 folds are used and every fold holds "
            "at least one; more presences give a steadier skill estimate")
    record["notes"] = list(record.get("notes") or []) + [note]
    page = write_report(folder, read_tables(folder), record)
    dom_text, _ = open_in_chromium(page, tmp_path / "profile", window="1400,900")
    dom = Dom(dom_text)
    summary = dom_text.split('id="summary"', 1)[1].split("</section>", 1)[0]
    assert "Read with care" in summary and "only 6 presences" in summary
    assert int(dom.root["data-summary-bottom"]) <= 900
