"""The report in a real browser: headless Chromium (Debian's ``chromium``) opens report.html from
the demo run, and the test checks that every chart drew marks, that nothing was written to the
console as an error, and that no request left the page (Chrome DevTools Protocol network events;
the page's Content-Security-Policy forbids loading anything as well). A doctored copy of the
report shows the same checks catch a broken chart, an outside image and a fetch.

Locally the tests are skipped when no Chromium is installed; CI sets CHURNLIFE_REQUIRE_BROWSER=1
(.ci/run) so a missing browser fails there instead."""

from __future__ import annotations

import os
import struct
import subprocess
import sys
from pathlib import Path

import pytest

from tests.cdp import Browser, find_browser

# Every chart div holds an SVG with at least one drawn mark (vega renders marks as paths).
CHARTS_DRAWN = """(() => {
  const charts = [...document.querySelectorAll('div.chart')];
  if (!charts.length) return false;
  return charts.every(d => { const s = d.querySelector('svg');
    return s && s.getBoundingClientRect().width > 0 && s.querySelectorAll('path').length > 0; });
})()"""
CHART_STATE = """[...document.querySelectorAll('div.chart')].map(d => ({
  name: d.dataset.name, svg: !!d.querySelector('svg'),
  width: d.querySelector('svg') ? d.querySelector('svg').getBoundingClientRect().width : 0,
  marks: d.querySelectorAll('svg path').length, text: d.textContent.slice(0, 80)}))"""


@pytest.fixture(scope="module")
def browser_path() -> str:
    path = find_browser()
    if path is None:
        if os.environ.get("CHURNLIFE_REQUIRE_BROWSER") == "1":
            pytest.fail(
                "CHURNLIFE_REQUIRE_BROWSER=1 but no chromium found (apt-get install chromium)"
            )
        pytest.skip("no chromium installed (apt-get install chromium); the browser test needs it")
    return path


@pytest.fixture(scope="module")
def report_folder(demo_folder: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("browser") / "out"
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "churnlife",
            "run",
            "--config",
            str(demo_folder / "churnlife.toml"),
            "--output",
            str(out),
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stderr
    return out


def _png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG"
    width, height = struct.unpack(">II", data[16:24])
    return width, height


def _open(browser_path: str, report: Path, width: int = 1280, height: int = 900) -> Browser:
    b = Browser(browser_path, width, height)
    b.open(report.as_uri())
    return b


def test_report_renders_in_a_browser_with_no_requests(browser_path, report_folder, tmp_path):
    report = report_folder / "report.html"
    with _open(browser_path, report) as b:
        b.wait_until(CHARTS_DRAWN, timeout=90)
        b.pump(1.0)  # anything late (errors, requests) still arrives
        charts = b.evaluate(CHART_STATE)
        shot = b.screenshot(tmp_path / "top.png")
        glance = b.evaluate(
            "[...document.querySelectorAll('#glance .fig')].map(e => e.textContent)"
        )
        contents = b.evaluate(
            "[...document.querySelectorAll('nav.contents a')].map(a => a.getAttribute('href'))"
        )
        errors, requests = b.console_errors(), b.requests()
    # one drawn chart per chart written beside the report
    written = sorted(p.name.removesuffix(".vl.json") for p in report_folder.glob("*.vl.json"))
    assert sorted(c["name"] for c in charts) == written
    assert all(c["svg"] and c["width"] > 100 and c["marks"] > 0 for c in charts), charts
    assert errors == []
    # the page itself is the only thing loaded: no script, style, image, font or fetch
    assert requests == [report.as_uri()], requests
    assert _png_size(shot) == (1280, 900) and len(shot) > 20_000
    # the summary up front shows figures (percentages and tenures), not placeholders only
    assert sum("%" in g for g in glance) >= 6, glance
    assert contents[0] == "#glance" and all(b_id.startswith("#") for b_id in contents), contents


def test_every_contents_entry_reaches_a_section(browser_path, report_folder):
    with _open(browser_path, report_folder / "report.html") as b:
        missing = b.evaluate(
            "[...document.querySelectorAll('nav.contents a')]"
            ".map(a => a.getAttribute('href').slice(1))"
            ".filter(id => !document.getElementById(id))"
        )
    assert missing == []


def test_the_checks_catch_a_broken_chart_an_outside_image_and_a_fetch(
    browser_path, report_folder, tmp_path
):
    """The same checks on doctored copies: they must fail where the real report passes."""
    html = (report_folder / "report.html").read_text(encoding="utf-8")
    # 1. a chart whose spec names a field type Vega-Lite does not know: it fails to draw
    broken = tmp_path / "broken.html"
    broken.write_text(
        html.replace('"type": "quantitative"', '"type": "no-such-type"', 1).replace(
            '"type":"quantitative"', '"type":"no-such-type"', 1
        ),
        encoding="utf-8",
    )
    with _open(browser_path, broken) as b:
        b.pump(4.0)
        charts = b.evaluate(CHART_STATE)
        errors = b.console_errors()
    assert not all(c["marks"] > 0 for c in charts), charts
    assert errors, "a failed chart must show up as a console error"
    # 2. an outside image: the page's policy refuses it, and says so on the console
    outside = tmp_path / "outside.html"
    outside.write_text(
        html.replace("<main>", '<main><img src="http://192.0.2.1/pixel.png" alt="">', 1),
        encoding="utf-8",
    )
    with _open(browser_path, outside) as b:
        b.pump(2.0)
        errors = b.console_errors()
    assert any("Content Security Policy" in e for e in errors), errors
    # 3. without the policy, a fetch shows up among the page's requests
    no_policy = tmp_path / "fetch.html"
    start = html.index('<meta http-equiv="Content-Security-Policy"')
    end = html.index(">", start) + 1
    no_policy.write_text(
        html[:start]
        + html[end:].replace(
            "<main>", "<main><script>fetch('http://192.0.2.1/x').catch(() => {});</script>", 1
        ),
        encoding="utf-8",
    )
    with _open(browser_path, no_policy) as b:
        b.pump(2.0)
        requests = b.requests()
    assert "http://192.0.2.1/x" in requests, requests
