"""report.html on a real run folder: the demo DEM, one demo zone and a week of the demo
season around its rain-on-snow event (the small scenario of ``test_run``), run through
``regionmap.pipeline.execute.execute`` without the report, then ``write_report``.

Checks against outside oracles: html5lib (the WHATWG HTML parsing algorithm), the PNG
signature and pHYs chunk (ISO/IEC 15948), and the Debian Chromium package driven by
Playwright (no console or page errors, no request that is not file: or data:).
"""

from __future__ import annotations

import base64
import io
import struct

import html5lib
import numpy as np
import pytest
from test_report import render_in_chromium
from test_run import config, run, scenario  # noqa: F401  (session fixture of the small scenario)

from regionmap.plots.maps import rain_crust_events
from regionmap.plots.outputs import RunOutputs
from regionmap.plots.style import PRINT_DPI
from regionmap.report.briefing import (
    MAP_METRICS,
    MAX_RAIN_CRUST_MAPS,
    OVERVIEW_METRICS,
    REPORT_MAX_BYTES,
    write_report,
)

_NS = "{http://www.w3.org/1999/xhtml}"  # html5lib's element namespace (WHATWG HTML)
_SVG = "{http://www.w3.org/2000/svg}"  # and that of inline SVG


@pytest.fixture(scope="module")
def demo_report(scenario, tmp_path_factory):  # noqa: F811
    out = tmp_path_factory.mktemp("report-demo") / "out"
    cfg = config(scenario, "report")  # invented data, as the demo's config declares
    run(
        cfg.model_copy(update={"region": cfg.region.model_copy(update={"invented_data": True})}),
        out,
    )
    return write_report(out)


def _pngs(doc):
    """(img element, caption text, embedded PNG bytes) of every figure."""
    assert len(doc.findall(f".//{_NS}img")) == len(doc.findall(f".//{_NS}figure/{_NS}img"))
    for fig in doc.iter(f"{_NS}figure"):
        if fig.find(f"{_NS}img") is None:
            continue  # a rose the page draws
        img, caption = fig.find(f"{_NS}img"), fig.find(f"{_NS}figcaption").text
        src = img.get("src")
        assert src.startswith("data:image/png;base64,")
        yield img, caption, base64.b64decode(src.split(",", 1)[1])


def _phys_dpi(png: bytes) -> float:
    """Horizontal resolution from the pHYs chunk (ISO/IEC 15948 §11.3.5.3: pixels per metre,
    unit 1)."""
    pos = 8
    while pos < len(png):
        length, kind = struct.unpack(">I4s", png[pos : pos + 8])
        if kind == b"pHYs":
            ppm_x, _, unit = struct.unpack(">IIB", png[pos + 8 : pos + 17])
            assert unit == 1
            return ppm_x * 0.0254
        pos += 12 + length
    raise AssertionError("no pHYs chunk")


def test_demo_report_parses_embeds_reduced_images_and_stays_small(demo_report):
    text = demo_report.read_text(encoding="utf-8")
    assert "http" not in text.lower()
    assert demo_report.stat().st_size < REPORT_MAX_BYTES
    doc = html5lib.parse(text, treebuilder="etree", namespaceHTMLElements=True)
    assert all(s.get("src") is None for s in doc.findall(f".//{_NS}script"))  # inline only
    figdir = demo_report.parent / "figures"
    from PIL import Image

    images = list(_pngs(doc))
    # the maps of MAP_METRICS the run has and a rain-crust map per event with lines (at most
    # MAX_RAIN_CRUST_MAPS); one zone: a rose per quantity of OVERVIEW_METRICS the page draws
    captions = [img.get("alt") for img, _, _ in images]
    out = RunOutputs(demo_report.parent)
    try:
        events = rain_crust_events(out)
    finally:
        out.close()
    assert sum(c.startswith("Map: rain-crust line") for c in captions) == min(
        len(events), MAX_RAIN_CRUST_MAPS
    )
    roses = doc.findall(f".//{_NS}section[@id='overviews']//{_SVG}svg[@data-v]")
    assert {r.get("data-scale") for r in roses} >= set(OVERVIEW_METRICS)
    for img, caption, png in images:
        assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948 §5.2)
        name = caption.rsplit("figures/", 1)[1].rstrip(")")
        full = figdir / name
        assert full.is_file()
        print_png = full.read_bytes()
        assert _phys_dpi(print_png) == pytest.approx(PRINT_DPI, abs=0.5)
        assert PRINT_DPI >= 150  # print resolution (common practice)
        with Image.open(io.BytesIO(png)) as small, Image.open(full) as big:
            assert small.width < big.width / 1.5
            assert (small.width, small.height) == (int(img.get("width")), int(img.get("height")))


def test_demo_report_figures_match_the_run(demo_report):
    out = RunOutputs(demo_report.parent)
    try:
        figdir = demo_report.parent / "figures"
        zone = out.zone_names[0]
        maps = {p.stem for p in (demo_report.parent / "maps").glob("*.tif")}
        for m in MAP_METRICS:
            assert (figdir / f"map_{m}.png").is_file() == (m in maps)
        text = demo_report.read_text(encoding="utf-8")
        assert zone in text
        # the week is analysis forcing only (no analysis_time in the config)
        assert "no forecast part" in text
        assert not out.is_forecast.any()
        # the summary table's snow depth equals the zones layer (written by the run, not the report)
        doc = html5lib.parse(text, treebuilder="etree", namespaceHTMLElements=True)
        zones_table = doc.find(f".//{_NS}section[@id='zones']//{_NS}table")
        header = [th.text for th in zones_table.iter(f"{_NS}th")]
        row = [td.text for td in zones_table.find(f"{_NS}tbody").iter(f"{_NS}td")]
        depth = float(row[header.index("snow depth [cm]")])
        assert depth == pytest.approx(
            float(out.zones.loc[out.zones["zone"] == zone, "snow_depth_cm"].iloc[0]), abs=0.5
        )
        assert np.isfinite(depth) and depth > 0
    finally:
        out.close()


def test_demo_report_renders_in_headless_chromium_without_errors(demo_report, tmp_path):
    shot = tmp_path / "report-demo.png"
    console, page_errors, requests, loaded, n_images = render_in_chromium(demo_report, shot)
    assert not console, console
    assert not page_errors, page_errors
    assert loaded and n_images >= 5  # the maps
    assert shot.stat().st_size > 10_000
    assert all(u.startswith(("file:", "data:")) for u in requests), requests


def test_invented_data_are_declared_in_run_json_and_at_the_top_of_the_report(demo_report):
    import json

    from regionmap import INVENTED_DATA

    assert json.loads((demo_report.parent / "run.json").read_text())["invented_data"] is True
    doc = html5lib.parse(
        demo_report.read_text(encoding="utf-8"), treebuilder="etree", namespaceHTMLElements=True
    )
    body = doc.find(f"{_NS}body")
    first = next(iter(body))  # the banner comes before everything else on the page
    assert first.get("id") == "invented-data" and "".join(first.itertext()) == INVENTED_DATA


def test_demo_report_opens_with_the_zone_problem_matrix_from_problems_csv(demo_report):
    import pandas as pd

    from regionmap.products.problems import PROBLEM_LABELS, PROBLEMS

    doc = html5lib.parse(
        demo_report.read_text(encoding="utf-8"), treebuilder="etree", namespaceHTMLElements=True
    )
    sections = [s.get("id") for s in doc.iter(f"{_NS}section")]
    # the matrix comes first, before the headline; the problems section has its caution
    assert sections[0] == "problems-matrix" and sections.index("problems") > 0
    matrix = doc.find(f".//{_NS}section[@id='problems-matrix']//{_NS}table")
    header = [th.text for th in matrix.iter(f"{_NS}th")]
    assert header == ["zone", *[PROBLEM_LABELS[p] for p in PROBLEMS]]
    problems = pd.read_csv(demo_report.parent / "problems.csv")
    zone_rows = problems[problems["aspect_sector"] == "all"].set_index(["zone", "problem"])
    for tr in matrix.find(f"{_NS}tbody").iter(f"{_NS}tr"):
        cells = [td.text for td in tr.iter(f"{_NS}td")]
        zone = cells[0]
        for problem, text in zip(PROBLEMS, cells[1:], strict=True):
            row = zone_rows.loc[(zone, problem)]
            if not row["assessed"]:
                assert text == "not assessed"
            elif row["present_frac"] > 0:
                assert text.startswith(row["likelihood_class"])
            else:
                assert text == "none"
    section = doc.find(f".//{_NS}section[@id='problems']")
    assert "not a hazard rating" in "".join(section.itertext())
    # one rose per problem present in the zone (the page draws them)
    present = problems[(problems["aspect_sector"] == "all") & (problems["present_frac"] > 0)]
    roses = section.findall(f".//{_SVG}svg[@data-scale='problem']")
    assert len(roses) == len(present)
