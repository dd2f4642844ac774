"""The report page as a person meets it: its data against summary.json, and in a real browser.

The browser tests drive Debian's ``chromium`` through ``chromedriver`` (selenium, the
W3C WebDriver protocol) and Chrome's DevTools protocol (network events, printing to
PDF); they are skipped with a reason where either is missing. The page is the demo's:
the bundled dry session of the invented circuit, with its track file.
"""

from __future__ import annotations

import html
import json
import re
import shutil
import time
from pathlib import Path

import pytest

from limitlap import outputs, pipeline
from limitlap.formatting import number, time_left, units_named, with_band
from limitlap.resources import bundled_path
from limitlap.units import KMH_TO_M_S, MPH_TO_M_S

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo's analysis and its report written in km/h and in mph (no PNGs)."""
    a = pipeline.analyse(
        bundled_path("demo_tracks", "tarrowby_dry.csv.gz"),
        track=bundled_path("demo_tracks", "tarrowby_heath.toml"),
    )
    root = tmp_path_factory.mktemp("page")
    metric = outputs.write_outputs(a, root / "metric", figures=False)
    imperial = outputs.write_outputs(
        a, root / "imperial", figures=False, units=units_named("imperial")
    )
    return a, Path(metric["report"]), Path(imperial["report"])


def _island(page: Path) -> dict:
    text = page.read_text(encoding="utf-8")
    m = re.search(r'<script type="application/json" id="limitlap-data">(.*?)</script>', text, re.S)
    return json.loads(m.group(1))


def _rows(page: Path) -> list[list[str]]:
    """The corner table's cells, row by row (tags stripped, entities decoded)."""
    text = page.read_text(encoding="utf-8")
    body = text[text.index('<table id="corner-table">') : text.index("</table>")]
    rows = re.findall(r'<tr class="row[^"]*"[^>]*>(.*?)</tr>', body, re.S)
    return [
        [
            html.unescape(re.sub(r"<[^>]+>", "", c))
            for c in re.findall(r"<td[^>]*>(.*?)</td>", r, re.S)
        ]
        for r in rows
    ]


# --------------------------------------------------------------------------- data


def test_page_data_match_summary_json(demo):
    _, page, _ = demo
    summary = json.loads((page.parent / "summary.json").read_text(encoding="utf-8"))
    island = _island(page)
    # The same corners in the same order, with the same numbers, rounded the same way
    # (the page's records are summary.json's own, docs/outputs.md).
    assert [c["name"] for c in island["corners"]] == [c["name"] for c in summary["corners"]]
    for ours, theirs in zip(island["corners"], summary["corners"], strict=True):
        for key, value in theirs.items():
            assert ours[key] == value, (theirs["name"], key)
    # The table shows them ranked by time left, formatted by the one rule (formatting.py).
    ranked = sorted(summary["corners"], key=lambda c: -c["time_left_s"])
    rows = _rows(page)
    assert len(rows) == len(ranked)
    for cells, c in zip(rows, ranked, strict=True):
        assert cells[1].startswith(c["name"])
        assert cells[2] == str(c["rank_group"])
        assert cells[3] == number(c["apex_m"], ".0f")
        assert cells[4] == with_band(c["time_left_s"], c["time_left_band_s"], unit="")
        assert cells[5] == (time_left(c["line_time_s"]) if c["line_told"] else "narrow")
        assert cells[6] == number(c["actual_s"], ".2f") and cells[7] == number(c["ideal_s"], ".2f")
        assert cells[8] == (
            f"{number(c['min_speed_actual_kmh'], '.0f')} / {number(c['min_speed_ideal_kmh'], '.0f')}"
        )
        assert cells[12] == c["plain"]
    text = page.read_text(encoding="utf-8")
    assert f"Lap {summary['lap']['number']}:" in text
    # no machine paths in what the user reads: the log by its file name only
    assert str(bundled_path("demo_tracks")) not in text
    assert "tarrowby_dry.csv.gz" in text


def test_imperial_page_shows_mph_and_feet_and_keeps_the_data(demo):
    _, metric, imperial = demo
    assert (metric.parent / "summary.json").read_bytes() == (
        imperial.parent / "summary.json"
    ).read_bytes()
    summary = json.loads((imperial.parent / "summary.json").read_text(encoding="utf-8"))
    ranked = sorted(summary["corners"], key=lambda c: -c["time_left_s"])
    text = imperial.read_text(encoding="utf-8")
    assert "min speed yours / ideal [mph]" in text and "[ft from gate]" in text
    for cells, c in zip(_rows(imperial), ranked, strict=True):
        # 1 mph = 0.44704 m/s exactly (international yard and pound agreement, 1959)
        mph = c["min_speed_ideal_kmh"] * KMH_TO_M_S / MPH_TO_M_S
        assert cells[8].split(" / ")[1] == f"{mph:.0f}"
        assert "km/h" not in cells[12]


# --------------------------------------------------------------------------- browser


def _driver(width: int, height: int = 1000):
    webdriver = pytest.importorskip("selenium.webdriver", reason="selenium is not installed")
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    browser = next(
        (shutil.which(n) for n in ("chromium", "chromium-browser") if shutil.which(n)), None
    )
    driver_path = shutil.which("chromedriver")
    if browser is None or driver_path is None:
        pytest.skip(
            "no Chromium and chromedriver (Debian: apt-get install chromium chromium-driver)"
        )
    opts = Options()
    opts.binary_location = browser
    for arg in (
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-background-networking",
        "--disable-component-update",
        "--no-first-run",
        f"--window-size={width},{height}",
    ):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL", "performance": "ALL"})
    d = webdriver.Chrome(service=Service(driver_path), options=opts)
    d.set_window_size(width, height)
    return d


def _open(d, page: Path, timeout_s: float = 30.0) -> None:
    """Load the page and wait until every figure is drawn."""
    d.get(page.as_uri())
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if d.execute_script("return document.body.getAttribute('data-drawn')"):
            return
        time.sleep(0.05)
    raise AssertionError("the page's figures were not drawn within 30 s")


@pytest.fixture(scope="module")
def browser():
    d = _driver(1280)
    yield d
    d.quit()


def test_page_loads_without_console_errors_or_network_requests(demo, browser):
    _, page, _ = demo
    browser.get_log("performance")  # drop what came before
    _open(browser, page)
    errors = [e for e in browser.get_log("browser") if e["level"] in ("SEVERE", "WARNING")]
    assert errors == []
    requests = []
    for entry in browser.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg["method"] == "Network.requestWillBeSent":
            requests.append(msg["params"]["request"]["url"])
    assert requests and all(u == page.as_uri() or u.startswith("data:") for u in requests), requests
    n = len(_island(page)["figures"])
    assert browser.execute_script("return Object.keys(window.limitlap.drawn).length") == n


def _ranges(d):
    return d.execute_script(
        "var v = window.limitlap.views, out = {};"
        "['speed','time_delta','pedals','data_check'].forEach(function (k) {"
        "  if (v[k] && v[k]._fullLayout) out[k] = v[k]._fullLayout.xaxis.range.slice(); });"
        "return out;"
    )


def test_clicking_a_corner_zooms_every_view_and_shows_its_detail(demo, browser):
    _, page, _ = demo
    _open(browser, page)
    corners = _island(page)["corners"]
    # every corner, from the table's own buttons (also those outside the top three and
    # the one that runs across the gate, when there is one)
    for i, c in enumerate(corners):
        button = browser.find_element("css selector", f'button.corner[data-corner="{i}"]')
        browser.execute_script("arguments[0].click();", button)
        end = time.monotonic() + 5
        while time.monotonic() < end:
            ranges = _ranges(browser)
            if all(r == pytest.approx(c["zoom"], abs=1e-6) for r in ranges.values()):
                break
            time.sleep(0.05)
        assert len(ranges) >= 3 and all(
            r == pytest.approx(c["zoom"], abs=1e-6) for r in ranges.values()
        ), (c["name"], c["zoom"], ranges)
        shown = browser.execute_script(
            "return Array.from(document.querySelectorAll('.detail'))"
            ".filter(function (e) { return !e.hidden; }).map(function (e) { return e.id; });"
        )
        assert shown == [f"detail-{i}"]
        # the map shows the same stretch: highlighted, and inside the map's view
        box = browser.execute_script(
            "var m = window.limitlap.views.map, t = m.data[1];"
            "var xs = t.x.filter(function (v) { return v !== null; }),"
            "    ys = t.y.filter(function (v) { return v !== null; });"
            "return [xs.length, Math.min.apply(null, xs), Math.max.apply(null, xs),"
            "  Math.min.apply(null, ys), Math.max.apply(null, ys),"
            "  m._fullLayout.xaxis.range, m._fullLayout.yaxis.range];"
        )
        n, x0, x1, y0, y1, xr, yr = box
        assert n > 0, c["name"]
        assert xr[0] <= x0 and x1 <= xr[1] and yr[0] <= y0 and y1 <= yr[1], c["name"]


def test_hover_reads_every_view_at_one_distance_and_laps_switch(demo, browser):
    _, page, _ = demo
    _open(browser, page)
    from selenium.webdriver.common.action_chains import ActionChains

    # a real mouse over the middle of the speed view's plot area
    area = browser.find_element("css selector", "#fig-speed .nsewdrag")
    browser.execute_script("arguments[0].scrollIntoView({block: 'center'});", area)
    ActionChains(browser).move_to_element(area).pause(0.3).move_by_offset(5, 0).pause(0.5).perform()
    labels = browser.execute_script(
        "var v = window.limitlap.views;"
        "return ['speed', 'time_delta', 'pedals'].map(function (k) {"
        "  return v[k].querySelectorAll('.hoverlayer text').length; });"
    )
    assert all(n > 0 for n in labels), labels
    # a box selected on the map (the event plotly.js sends for it) shows that stretch in
    # every lap view: from the first selected point's distance to the last's
    picked = browser.execute_script(
        "var m = window.limitlap.views.map, s = m.data[2].customdata, pts = [];"
        "for (var i = 100; i < 160; i++) pts.push({curveNumber: 2, pointIndex: i});"
        "m.emit('plotly_selected', {points: pts}); return [s[100], s[159]];"
    )
    end = time.monotonic() + 5
    while time.monotonic() < end and not all(
        r == pytest.approx(picked, abs=1e-6) for r in _ranges(browser).values()
    ):
        time.sleep(0.05)
    assert all(r == pytest.approx(picked, abs=1e-6) for r in _ranges(browser).values())
    laps = _island(page)["laps"]
    assert laps  # the demo session has other complete laps
    n = laps[0]["number"]
    box = browser.find_element("css selector", f'input.lap[value="{n}"]')
    browser.execute_script("arguments[0].click();", box)
    visible = browser.execute_script(
        "var v = window.limitlap.views, n = arguments[0];"
        "return ['speed', 'time_delta'].map(function (k) {"
        "  return v[k].data.filter(function (t) { return t.meta && t.meta.lap === n; })"
        "    .map(function (t) { return t.visible; }); });",
        n,
    )
    assert visible == [[True], [True]]


def test_nothing_is_wider_than_a_420_px_window(demo):
    _, page, _ = demo
    d = _driver(420, 900)
    try:
        _open(d, page)
        widths = d.execute_script(
            "return [document.documentElement.scrollWidth, window.innerWidth,"
            " Math.max.apply(null, Array.from(document.querySelectorAll('body *')).filter("
            "   function (e) { return !e.parentElement.closest('.table-wrap'); }).map("
            "   function (e) { return e.getBoundingClientRect().right; }))];"
        )
        # a table wider than the window (the session's, one column per corner) scrolls
        # inside its own box (.table-wrap); the box and everything outside one must fit
        scroll, inner, right = widths
        assert scroll <= inner and right <= inner + 0.5, widths
        # the corner table reflows to cards: a row is no taller than its cells stacked
        tall = d.execute_script(
            "return Math.max.apply(null, Array.from(document.querySelectorAll("
            "'#corner-table tr.row')).map(function (r) { return r.getBoundingClientRect().height; }));"
        )
        assert tall < 420, tall
    finally:
        d.quit()


@pytest.mark.parametrize("paper", [(8.27, 11.69), (8.5, 11.0)], ids=["A4", "Letter"])
def test_printed_first_page_holds_the_summary_and_the_whole_table(demo, browser, paper):
    pypdf = pytest.importorskip("pypdf", reason="pypdf is not installed")
    import base64
    import io

    _, page, _ = demo
    _open(browser, page)
    pdf = browser.execute_cdp_cmd(
        "Page.printToPDF",
        {"paperWidth": paper[0], "paperHeight": paper[1], "printBackground": True},
    )
    reader = pypdf.PdfReader(io.BytesIO(base64.b64decode(pdf["data"])))
    # Printed, every figure fits the paper's width: A4 less the page's 12 mm margins is
    # (210 - 24) mm = 703 CSS px at 96 px to the inch (CSS Values 4: 1in = 96px).
    browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
    try:
        zooms = browser.execute_script(
            "return Array.from(document.querySelectorAll('.plot')).map(function (p) {"
            "  return [parseFloat(getComputedStyle(p).zoom),"
            "          p.querySelector('svg.main-svg').width.baseVal.value]; });"
        )
    finally:
        browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})
    assert zooms and all(z * w <= 703.0 + 0.5 for z, w in zooms), zooms
    first = " ".join(reader.pages[0].extract_text().split())
    summary = json.loads((page.parent / "summary.json").read_text(encoding="utf-8"))
    assert f"Lap {summary['lap']['number']}:" in first and "time left" in first
    for c in summary["corners"]:  # every row, with its advice line, on page 1
        assert " ".join(c["plain"].split())[:40] in first, c["name"]
    # each figure whole on one page: its heading and the start of its caption together
    pages = [" ".join(p.extract_text().split()) for p in reader.pages]
    titles = re.findall(
        r'<figure class="fig"[^>]*><h3>(.*?)</h3>.*?<figcaption>(.*?)</figcaption>',
        page.read_text(encoding="utf-8"),
        re.S,
    )
    assert titles
    for title, caption in titles:
        t = " ".join(html.unescape(title).split())[:30]
        cap = " ".join(html.unescape(caption).split())[:30]
        assert any(t in p and cap in p for p in pages), t
