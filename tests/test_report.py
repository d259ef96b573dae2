"""report.html on the synthetic output folder: parsed with html5lib (the WHATWG parsing
algorithm), images as data URIs, no "http", under 10 MB, and rendered in headless Chromium
(Debian package) without console or page errors."""

from __future__ import annotations

import base64
import os
import re
import shutil
from pathlib import Path

import html5lib
import pytest
from test_plots_synthrun import build_output_folder

from regionmap.errors import OutputError
from regionmap.plots.style import zone_slug
from regionmap.report.briefing import (
    REPORT_MAX_BYTES,
    _data_uri,
    _no_web_text,
    write_all_figures,
    write_report,
)

CHROMIUM = Path("/usr/bin/chromium")
_NS = "{http://www.w3.org/1999/xhtml}"  # html5lib's element namespace (WHATWG HTML)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = build_output_folder(tmp_path_factory.mktemp("report") / "out")
    return write_report(folder)


def test_report_parses_and_embeds_every_image_as_data_uri(report):
    text = report.read_text(encoding="utf-8")
    doc = html5lib.parse(text, treebuilder="etree", namespaceHTMLElements=True)
    images = doc.findall(f".//{_NS}img")
    assert len(images) >= 5  # the maps; roses are drawn by the page
    for img in images:
        src = img.get("src")
        assert src.startswith("data:image/png;base64,")
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948
    assert all(s.get("src") is None for s in doc.findall(f".//{_NS}script"))  # inline only
    assert not doc.findall(f".//{_NS}link[@rel='stylesheet']")
    sections = [s.get("id") for s in doc.findall(f".//{_NS}section")]
    assert {
        "headline",
        "zones",
        "layers",
        "maps",
        "overviews",
        "verification",
        "cautions",
        "run",
        "forecast",
    } <= set(sections)
    # the zone x avalanche-problem matrix comes first, then the headline, then the maps
    assert sections[:3] == ["problems-matrix", "headline", "maps"]
    assert "problems" in sections


def test_report_has_no_web_address_and_stays_small(report):
    text = report.read_text(encoding="utf-8")
    assert "http" not in text.lower()
    assert report.stat().st_size < REPORT_MAX_BYTES


def test_report_images_are_reduced_and_print_pngs_stay_in_figures(report):
    import io

    from PIL import Image

    text = report.read_text(encoding="utf-8")
    doc = html5lib.parse(text, treebuilder="etree", namespaceHTMLElements=True)
    img = doc.findall(f".//{_NS}img")[0]
    embedded = Image.open(io.BytesIO(base64.b64decode(img.get("src").split(",", 1)[1])))
    figures = sorted((report.parent / "figures").glob("map_*.png"))
    assert figures
    full = Image.open(figures[0])
    assert embedded.width < full.width / 2


def test_report_content_sections(report):
    text = report.read_text(encoding="utf-8")
    # the zones' rain-crust sentence from rain_crust.rain_crust_sentence, designed 1400-2000 m
    assert "rain crust likely between" in text
    assert "buried surface hoar of 12 Jan" in text  # layers of concern, as a sentence
    # the headline: changes over the last 24 h, the new snow of the observation days to their
    # real end: the map time 2026-01-22T12Z is 05:00 at UTC-7, before that day's 07:00
    # observation, so the days end at 07:00 local the day before
    assert "Last 24 h:" in text
    assert "New snow to Wed 21 Jan 07:00 UTC-07 (14:00 UTC)" in text
    assert "wet snow" in text.lower()
    assert "ST1" in text and "ST2" in text  # verification.csv written by the fixture
    assert "no forecast part" in text
    assert "field observations" in text.lower() and "local avalanche service" in text.lower()
    assert 'id="invented-data"' not in text  # real data: no invented-data banner


def test_report_without_verification_skips_the_section_with_a_note_and_lists_figures(
    tmp_path, capsys, monkeypatch
):
    import regionmap.report.briefing as report_module
    from regionmap.cli import main

    folder = build_output_folder(tmp_path / "out", with_verification=False)
    paths = write_all_figures(folder)
    assert all(p.is_file() for p in paths)
    assert {p.suffix for p in paths} == {".png", ".csv"}
    names = {p.name for p in paths}
    overview = f"overview_{zone_slug('Zone A')}_depth_hoar_fraction.csv"
    assert "map_snow_depth_cm.png" in names and overview in names
    assert not (folder / "report.html").exists()
    # the report command writes the briefing, and every figure only when asked
    calls = []
    monkeypatch.setattr(report_module, "write_all_figures", lambda d: calls.append(d) or paths)
    assert main(["report", str(folder)]) == 0 and not calls
    text = (folder / "report.html").read_text(encoding="utf-8")
    assert "No station verification results in this output folder" in text
    assert main(["report", str(folder), "--all-figures"]) == 0 and calls == [folder]
    assert f"{len(paths)} figures and tables written to" in capsys.readouterr().out


def test_report_of_many_figures_lists_those_over_the_image_budget(tmp_path, monkeypatch):
    # a region of many zones must still get its report: images beyond the budget are listed
    import regionmap.report.briefing as report_module

    folder = build_output_folder(tmp_path / "out", with_verification=False)
    monkeypatch.setattr(report_module, "FIGURE_BUDGET_BYTES", 40_000)
    text = write_report(folder).read_text(encoding="utf-8")
    listed = re.findall(
        r"not embedded, to keep this report under 10 MB; see figures/(\S+\.png)", text
    )
    assert listed and all((folder / "figures" / name).is_file() for name in listed)
    images = re.findall(r'<img src="(data:image/png;base64,[^"]+)"', text)
    assert sum(map(len, images)) <= 40_000


def test_data_uri_never_spells_http():
    # bytes whose base64 encoding (RFC 4648) starts with "http": _data_uri must shift it away
    raw = base64.b64decode("httpAAAA")
    png = b"\x89PNG\r\n\x1a\n" + b"\x00\x00\x00\x0dIHDR" + b"\x00" * 13 + b"\x00" * 4 + raw
    uri = _data_uri(png)
    assert "http" not in uri.lower()
    assert _no_web_text("see http and HTTP") == "see h&#116;tp and H&#84;TP"


def _chromium_or_skip():
    if not CHROMIUM.exists() or shutil.which(str(CHROMIUM)) is None:
        if os.environ.get("CI") == "true":
            pytest.fail("Chromium (/usr/bin/chromium) is required when CI=true")
        pytest.skip("Chromium not installed")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        if os.environ.get("CI") == "true":
            pytest.fail("playwright is required when CI=true")
        pytest.skip("playwright not installed")
    return sync_playwright


def render_in_chromium(html_path, screenshot):
    """Open a report in headless Chromium; returns (console errors, page errors, requested
    URLs, all images loaded, image count). Oracle: the Debian Chromium package, driven
    through Playwright's sync API (no browser download)."""
    sync_playwright = _chromium_or_skip()
    console, page_errors, requests = [], [], []
    with sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=str(CHROMIUM),
            args=[
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--no-first-run",
            ],
        )
        try:
            page = browser.new_page(viewport={"width": 1200, "height": 900})
            page.on("console", lambda m: console.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: page_errors.append(str(e)))
            page.on("request", lambda r: requests.append(r.url))
            page.goto(html_path.resolve().as_uri(), wait_until="load")
            loaded = page.evaluate(
                "Array.from(document.images).every(i => i.complete && i.naturalWidth > 0)"
            )
            n_images = page.evaluate("document.images.length")
            page.screenshot(path=str(screenshot), full_page=True)
        finally:
            browser.close()
    return console, page_errors, requests, loaded, n_images


def test_report_renders_in_headless_chromium_without_errors(report, tmp_path):
    shot = tmp_path / "report.png"
    console, page_errors, requests, loaded, _ = render_in_chromium(report, shot)
    assert not console, console
    assert not page_errors, page_errors
    assert loaded
    assert shot.stat().st_size > 10_000
    assert all(u.startswith(("file:", "data:")) for u in requests), requests


def layout_in_chromium(html_path, width: int, height: int, screenshot):
    """Open a report at a viewport of ``width`` × ``height`` CSS px; returns the page's
    scroll width, the viewport size, the bounding boxes of the caution and of the first
    zone's headline, and how many roses the page drew once scrolled to the layers and then
    made ready to print. Oracle: the Debian Chromium package driven by Playwright."""
    sync_playwright = _chromium_or_skip()
    with sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=str(CHROMIUM),
            args=["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run"],
        )
        try:
            page = browser.new_page(viewport={"width": width, "height": height})
            errors = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(html_path.resolve().as_uri(), wait_until="load")
            page.screenshot(path=str(screenshot))
            box = (
                "(s => { const r = document.querySelector(s).getBoundingClientRect(); "
                "return [r.top, r.bottom, r.left, r.right]; })"
            )
            info = {
                "scroll_width": page.evaluate("document.documentElement.scrollWidth"),
                "viewport": page.evaluate("[window.innerWidth, window.innerHeight]"),
                "caution": page.evaluate(box, "#caution"),
                "headline": page.evaluate(box, "#headline .zone h3"),
                "headline_first_item": page.evaluate(box, "#headline .zone li"),
            }
            page.locator("#layers svg[data-v]").first.scroll_into_view_if_needed()
            page.wait_for_timeout(200)
            info["drawn_after_scroll"] = page.evaluate(
                "document.querySelectorAll('#layers svg[data-drawn] path').length"
            )
            page.evaluate("window.dispatchEvent(new Event('beforeprint'))")
            info["drawn_for_print"] = page.evaluate(
                "document.querySelectorAll('svg[data-drawn]').length"
            )
            info["roses"] = page.evaluate("document.querySelectorAll('svg[data-v]').length")
            info["errors"] = errors
        finally:
            browser.close()
    return info


@pytest.mark.parametrize("width,height", [(1280, 800), (390, 844)], ids=["laptop", "phone"])
def test_report_reads_on_a_laptop_and_a_phone(report, tmp_path, width, height):
    info = layout_in_chromium(report, width, height, tmp_path / f"report-{width}.png")
    assert not info["errors"], info["errors"]
    # no horizontal scrolling: the page is no wider than the viewport (tables scroll in their box)
    assert info["scroll_width"] <= info["viewport"][0]
    # the page draws the roses it shows, and all of them before printing
    assert info["drawn_after_scroll"] > 0
    assert info["drawn_for_print"] == info["roses"] > 0
    if width >= 1280:
        # on a laptop the caution and the first zone's headline show without scrolling
        assert info["caution"][1] <= info["viewport"][1]
        assert info["headline_first_item"][1] <= info["viewport"][1]


def test_report_over_the_size_limit_drops_minor_roses_first(tmp_path, monkeypatch):
    # a region of very many zones and layers: the minor layers keep their sentence, not their rose
    import regionmap.report.briefing as report_module
    import regionmap.report.headline as headline_module

    folder = build_output_folder(tmp_path / "out", with_verification=False)
    # every layer but the rain crusts and glaze is minor
    monkeypatch.setattr(headline_module, "HEADLINE_MIN_PRESENCE_FRAC", 1.01)
    full = write_report(folder).read_text(encoding="utf-8")
    assert re.findall(r'<figure class="rose minor"><svg', full)
    monkeypatch.setattr(report_module, "REPORT_MAX_BYTES", len(full.encode("utf-8")) - 1)
    text = write_report(folder).read_text(encoding="utf-8")
    assert not re.findall(r'<figure class="rose minor"><svg', text)
    assert text.count('<figure class="rose minor">') == full.count('<figure class="rose minor">')
    assert "listed without their rose, to keep this report under 10 MB" in text
    monkeypatch.setattr(report_module, "REPORT_MAX_BYTES", 1000)
    with pytest.raises(OutputError, match="over the 10 MB limit"):
        write_report(folder)
