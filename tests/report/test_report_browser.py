"""A generated report in a real browser (headless chromium): DOM, print to PDF, screenshot.

Two chromium runs in total: one ``--dump-dom``, one ``--print-to-pdf`` + ``--screenshot``.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

from benchfit.report import figures
from benchfit.report.assemble import build_report
from benchfit.report.html import render_html, write_report
from benchfit.report.spec import load_spec
from report_builders import make_capture, make_fit, make_measurement

ROOT = Path(__file__).resolve().parents[2]
CHROMIUM = "/usr/bin/chromium"
pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not Path(CHROMIUM).exists(), reason="chromium is not installed")]


def _chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={tmp_path / 'chromium-profile'}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=90)


class _Collector(HTMLParser):
    """Counts elements and gathers the text of the results table and of the decision cells."""

    def __init__(self) -> None:
        super().__init__()
        self.svg = 0
        self.rows = 0
        self.decisions: list[str] = []
        self._in_results = False
        self._in_decision = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "svg":
            self.svg += 1
        if tag == "table" and a.get("id") == "results-table":
            self._in_results = True
        if self._in_results and tag == "tr" and (a.get("class") or "").startswith("row-"):
            self.rows += 1
        if self._in_results and tag == "span" and "decision" in (a.get("class") or "").split():
            self._in_decision = True

    def handle_endtag(self, tag):
        if tag == "table":
            self._in_results = False
        if tag == "span":
            self._in_decision = False

    def handle_data(self, data):
        if self._in_decision and data.strip():
            self.decisions.append(data.strip())


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    spec = load_spec(ROOT / "sample_captures" / "hc_spec.toml")
    cap, fit = make_capture(), make_fit()
    # THD 5.02 % ± 0.04 % (U): conditional fail, so the page shows more than one kind of decision
    m = make_measurement(f=50.02, thd=5.02, thd_u=0.02)
    rep = build_report(unit="HC-11", spec=spec, as_left=[(cap, m)], fits_left=[fit], operator="T. Ahn",
                       created_utc="2026-12-01T18:00:00Z")
    figs = [{"title": "waveform", "svg": figures.waveform_svg(cap, 0, model=None)},
            {"title": "spectrum", "svg": figures.spectrum_svg(m.channels[0])},
            {"title": "fit", "svg": figures.fit_svg(fit)}]
    html, _ = write_report(rep, render_html(rep, figs), out)
    return html, rep


def test_no_external_urls(report_file):
    text = report_file[0].read_text(encoding="utf-8")
    # only SVG namespace declarations may name a URL; nothing is fetched
    assert not re.search(r"""\b(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", text, re.I)
    assert not re.search(r"url\(\s*['\"]?\s*(?:https?:)?//", text, re.I)
    assert not re.search(r"<(?:script|link|iframe|img)\b", text, re.I)


def test_dom_in_headless_chromium(report_file, tmp_path):
    html, rep = report_file
    proc = _chromium(tmp_path, "--dump-dom", html.as_uri())
    assert proc.returncode == 0, proc.stderr[-2000:]
    dom = _Collector()
    dom.feed(proc.stdout)
    assert dom.rows == len(rep["results"]) == 3
    assert dom.decisions == [r["decision"] for r in rep["results"]]
    assert dom.decisions == ["pass", "conditional fail", "pass"]
    assert dom.svg >= 3                        # waveform, spectrum, fit (each an inline <svg>)
    assert 'id="verdict"' in proc.stdout and "HC-11" in proc.stdout


def test_print_to_pdf_and_screenshot(report_file, tmp_path):
    html, _ = report_file
    pdf, png = tmp_path / "report.pdf", tmp_path / "report.png"
    proc = _chromium(tmp_path, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", f"--screenshot={png}",
                     "--window-size=1100,1400", html.as_uri())
    assert pdf.exists() and png.exists(), proc.stderr[-2000:]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext (poppler-utils) is not installed")
    first = subprocess.run(["pdftotext", "-f", "1", "-l", "1", str(pdf), "-"], capture_output=True,
                           text=True, timeout=30).stdout
    assert "HC-11" in first and "Results" in first and "FAIL" in first.upper()
    # every printed page carries the unit, its page number and the program version (page-margin boxes)
    import benchfit

    pages = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True,
                           timeout=30).stdout.split("\f")
    pages = [p for p in pages if p.strip()]
    assert len(pages) >= 2
    for n, page in enumerate(pages, start=1):
        assert "Unit HC-11 · calibration record 2026-12-01T18:00:00Z" in page, (n, page[:300])
        assert f"page {n} of {len(pages)}" in page and f"benchfit {benchfit.__version__}" in page
