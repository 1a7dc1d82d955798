"""The report in a real browser: every chart draws, no script fails, nothing leaves the page.

Headless Chromium opens report.html from disk (as a double-click would) with
name resolution switched off (every host maps to "not found"), lets the page
run for a budget of virtual time, and prints the resulting DOM. The page
itself records what a person could not see: the number of marks each chart
drew (``data-marks`` on the chart), any script or console error
(``data-errors`` on <html>) and any load its Content-Security-Policy blocked
(``data-blocked``). A control page with a planted fault shows that these
records do catch a fault.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

from pathfinder.report.html import read_tables, write_report

from . import add_invented_tables, small_run


def _chromium():
    for candidate in (shutil.which("chromium"), "/usr/bin/chromium"):
        if candidate and os.access(candidate, os.X_OK):
            return candidate
    return None


CHROMIUM = _chromium()


def open_in_chromium(page: Path, profile: Path, window: str | None = None) -> tuple:
    """(DOM after the page ran, Chromium's log) for ``page`` opened offline."""
    if CHROMIUM is None:
        pytest.skip("no chromium binary (install the Debian package 'chromium' to run the browser checks)")
    command = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--disable-extensions", "--disable-default-apps", f"--user-data-dir={profile}",
        "--host-resolver-rules=MAP * ~NOTFOUND", "--enable-logging=stderr", "--v=0",
        "--virtual-time-budget=30000", "--dump-dom", page.resolve().as_uri(),
    ]
    if window:
        command.insert(1, f"--window-size={window}")
    done = subprocess.run(command, capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout, done.stderr


class Dom(HTMLParser):
    """The attributes of <html> and of every chart element, and the sliders the charts made."""

    def __init__(self, text: str):
        super().__init__()
        self.root, self.charts, self.sliders = {}, {}, 0
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "html":
            self.root = attrs
        elif tag == "div" and "chart" in (attrs.get("class") or "").split():
            self.charts[attrs["id"].removeprefix("chart-")] = attrs
        elif tag == "input" and attrs.get("type") == "range":
            self.sliders += 1


def console_faults(log: str) -> list:
    """Lines of Chromium's log that report an uncaught exception or a console error."""
    return [line for line in log.splitlines()
            if "CONSOLE" in line and ("Uncaught" in line or ":ERROR:" in line)]


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """The full report (every section drawn) after Chromium ran it: (folder, source, DOM, log)."""
    base = tmp_path_factory.mktemp("browser")
    folder = small_run(base / "run")
    add_invented_tables(folder)
    page = write_report(folder)
    dom, log = open_in_chromium(page, base / "profile")
    return folder, page.read_text(encoding="utf-8"), Dom(dom), log


def test_every_chart_drew_its_marks(rendered):
    folder, source, dom, _ = rendered
    expected = source.count('<div class="chart"')
    assert expected >= 14
    assert dom.root.get("data-rendered") == str(expected), "the page did not finish drawing"
    assert len(dom.charts) == expected
    for name, attrs in dom.charts.items():
        assert "data-error" not in attrs, (name, attrs.get("data-error"))
        assert int(attrs.get("data-marks", "0")) > 0, name
    # marks follow the data: one point per site, one cell per pair of terms
    sites = read_tables(folder)["sites"]
    assert int(dom.charts["sites_by_fold"]["data-marks"]) >= len(sites)
    n_terms = len(read_tables(folder)["stability"])
    assert int(dom.charts["correlations"]["data-marks"]) >= n_terms * (n_terms - 1) // 2
    # each coefficient-path chart brought its slider along the path
    assert dom.sliders == sum(name.startswith("paths_") for name in dom.charts) >= 2


def test_no_script_or_console_error(rendered):
    _, _, dom, log = rendered
    assert json.loads(dom.root["data-errors"]) == []
    assert console_faults(log) == []


def test_no_request_left_the_page(rendered):
    _, _, dom, _ = rendered
    assert json.loads(dom.root["data-blocked"]) == []


def test_the_page_reports_a_planted_fault_and_a_planted_request(rendered, tmp_path):
    # the same report with a picture from the web, a failing script and a broken chart:
    # the records must show all three
    _, source, _, _ = rendered
    planted = ('<img src="http://pathfinder.invalid/planted.png" alt="">'
               '<script>throw new Error("planted fault");</script>')
    control = source.replace("</main>", planted + "</main>", 1)
    control, broken = re.subn(r'(<script type="application/json" id="spec-comparison">).*?(</script>)',
                              r'\1{"mark": "no-such-mark", "data": {"values": []}}\2', control,
                              count=1, flags=re.S)
    assert broken == 1
    page = tmp_path / "control.html"
    page.write_text(control, encoding="utf-8")
    dom_text, log = open_in_chromium(page, tmp_path / "profile")
    dom = Dom(dom_text)
    blocked = json.loads(dom.root["data-blocked"])
    errors = json.loads(dom.root["data-errors"])
    assert any("pathfinder.invalid" in b for b in blocked), blocked
    assert any("planted fault" in e for e in errors), errors
    assert any("planted fault" in line for line in console_faults(log))
    assert "data-error" in dom.charts["comparison"] and "data-marks" not in dom.charts["comparison"]
    # the other charts still draw around the faults
    assert dom.root.get("data-rendered") == str(source.count('<div class="chart"'))
    assert all(int(a.get("data-marks", "0")) > 0 for n, a in dom.charts.items() if n != "comparison")
