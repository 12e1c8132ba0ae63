"""``OUT/qc/index.html`` in headless Chromium: 10,000 slides load without freezing, filters and sorts
show exactly the rows they should, a card opens the full picture (issue 30).

Ground truth: the rows the test writes (statuses, tiles, warnings drawn from a seeded generator),
filtered and sorted in Python. Chromium is driven over its DevTools pipe (``tests/chromium.py``);
the tests skip only where no Chromium is installed (CI installs Debian's ``chromium``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from chromium import Browser, find_chromium
from tilewright.run.qc_page import write_qc_page

pytestmark = [pytest.mark.timeout(300),
              pytest.mark.skipif(find_chromium() is None, reason="no Chromium installed (CI installs it)")]

N = 10_000


def _rows(n, seed=3):
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        status = "failed" if i % 37 == 5 else "skipped" if i % 53 == 7 else "ok"
        warnings = "; ".join(["little-tissue: only 0.07 mm² of tissue found"] * (i % 11 == 0)
                             + ["ink: 31 % of the tissue is marker ink"] * (i % 23 == 0))
        rows.append({"slide_id": f"case-{i:05d}", "source": f"/slides/case-{i:05d}.svs", "status": status,
                     "error": "damaged JPEG tile 12" if status == "failed" else "",
                     "n_tiles": 0 if status != "ok" else int(rng.integers(1, 5000)),
                     "tissue_mm2": float(np.round(rng.uniform(0.01, 300.0), 3)), "warnings": warnings,
                     "seconds": float(np.round(rng.uniform(0.05, 90.0), 2)), "mpp_source": 0.2527,
                     "stain_gap_de00": float(np.round(rng.uniform(0.1, 9.0), 2))})
    return rows


def _png(path, colour):
    import cv2

    img = np.zeros((120, 200, 3), np.uint8)
    img[:] = colour
    assert cv2.imwrite(str(path), img)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    out = tmp_path_factory.mktemp("qc-out")
    rows = _rows(N)
    odd = "biopsy #7 50% [a]&b ü"  # a file name a URL must escape
    rows.append({"slide_id": odd, "status": "ok", "n_tiles": 3, "tissue_mm2": 0.5,
                 "warnings": "note: </script><b>not markup</b>", "seconds": 1.0})
    write_qc_page(out, rows)
    for i in range(40):  # pictures for the first cards; the others have none (a placeholder shows)
        _png(out / "qc" / f"case-{i:05d}.png", (30 + i, 90, 160))
    _png(out / "qc" / f"{odd}.png", (200, 60, 60))
    with Browser() as browser:
        browser.page((out / "qc" / "index.html").as_uri())
        browser.wait_for("window.qcReady === true", timeout=120)
        yield browser, rows, out


def _drawn(browser):
    return browser.js("[...document.querySelectorAll('.card')].map(c => c.title)")


def _sort(browser, value):
    browser.js(f"{{ const s = document.getElementById('sort'); s.value = '{value}'; s.dispatchEvent(new Event('change')) }}")
    _settle(browser)


def _search(browser, text):
    browser.js(f"{{ const q = document.getElementById('search'); q.value = '{text}'; q.dispatchEvent(new Event('input')) }}")
    _settle(browser)


def _settle(browser):
    browser.js("new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)))")


def test_ten_thousand_slides_draw_only_what_is_in_view(page):
    browser, rows, _ = page
    assert browser.js("document.getElementById('shown').textContent") == f"{len(rows):,} of {len(rows):,} slides"
    drawn = _drawn(browser)
    assert drawn[:3] == ["biopsy #7 50% [a]&b ü", "case-00000", "case-00001"]  # by slide id
    # only the cards in view (and a couple of rows around it) exist: the page never holds 10,000
    assert 10 <= len(drawn) <= 80
    assert browser.js("document.getElementsByTagName('*').length") < 1500
    requested = browser.js("performance.getEntriesByType('resource').filter(e => e.name.endsWith('.png')).length")
    assert requested <= len(drawn)  # pictures are loaded for drawn cards only
    # scrolled to the end, the last slides are drawn, still only a window of them
    browser.js("window.scrollTo(0, document.body.scrollHeight)")
    _settle(browser)
    drawn = _drawn(browser)
    assert "case-09999" in drawn and len(drawn) <= 80
    browser.js("window.scrollTo(0, 0)")
    _settle(browser)


@pytest.mark.parametrize("name, keep", [
    ("failed", lambda r: r["status"] == "failed"),
    ("skipped", lambda r: r["status"] == "skipped"),
    ("warnings", lambda r: bool(r["warnings"])),
])
def test_filters_show_exactly_their_rows(page, name, keep):
    browser, rows, _ = page
    browser.js(f"document.querySelector('.chip[data-filter={name}]').click()")
    _settle(browser)
    expected = sorted(r["slide_id"] for r in rows if keep(r))
    assert browser.js("document.getElementById('shown').textContent") == f"{len(expected):,} of {len(rows):,} slides"
    assert browser.js(f"document.querySelector('.chip[data-filter={name}] .n').textContent") == f"{len(expected):,}"
    assert _drawn(browser) == expected[:len(_drawn(browser))]
    browser.js("document.querySelector('.chip[data-filter=all]').click()")
    _settle(browser)


def test_fewest_tiles_first_and_search(page):
    browser, rows, _ = page
    _sort(browser, "tiles")
    _settle(browser)
    expected = [r["slide_id"] for r in sorted(rows, key=lambda r: (r["n_tiles"], r["slide_id"]))]
    drawn = _drawn(browser)
    assert drawn == expected[:len(drawn)]
    _sort(browser, "-tiles")
    _settle(browser)
    expected = [r["slide_id"] for r in sorted(rows, key=lambda r: (-r["n_tiles"], r["slide_id"]))]
    assert _drawn(browser)[:10] == expected[:10]
    _search(browser, "INK:")
    _settle(browser)
    inked = [r for r in rows if "ink:" in r["warnings"]]
    assert browser.js("document.getElementById('shown').textContent").startswith(f"{len(inked):,} of")
    _search(browser, "")
    _sort(browser, "id")
    _settle(browser)


def test_a_card_opens_its_full_picture_and_figures(page):
    browser, rows, _ = page
    browser.js("document.querySelector('.card').click()")  # the odd id sorts first
    browser.wait_for("document.getElementById('viewer').open")
    browser.wait_for("document.getElementById('big').naturalWidth > 0")
    assert browser.js("document.getElementById('big').naturalWidth") == 200  # the PNG the test wrote
    facts = browser.js("document.getElementById('facts').textContent")
    assert "biopsy #7 50% [a]&b ü" in facts and "</script><b>not markup</b>" in facts  # text, not markup
    assert browser.js("document.querySelectorAll('#facts b').length") == 1  # only the page's own "warnings"
    browser.js("document.querySelector('#facts [data-step=\"1\"]').click()")  # next slide
    facts = browser.js("document.getElementById('facts').textContent")
    first = rows[0]
    assert "case-00000" in facts and "stain_gap_de00" in facts and f"{first['stain_gap_de00']}" in facts
    browser.js("document.getElementById('viewer').close()")


def test_tile_out_writes_the_page_from_its_manifest(tmp_path):
    """End to end: the page tile-out writes lists every manifest row with its figures."""
    import re

    import pandas as pd

    from helpers import write_slide
    from tilewright.cli.tile_out import main as tile_out

    src = tmp_path / "slides"
    for i in range(2):
        write_slide(src / f"s{i}.tif", mpp=0.2428, size_um=(512.0, 640.0), seed=80 + i)
    (src / "broken.tif").write_text("not a slide\n")
    out = tmp_path / "out"
    assert tile_out([str(src), str(out), "--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]) == 3
    html = (out / "qc" / "index.html").read_text(encoding="utf-8")
    data = json.loads(re.search(r'<script type="application/json" id="rows">(.*?)</script>', html, re.S).group(1))
    manifest = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    assert [d["id"] for d in data] == sorted(manifest.slide_id)
    by_id = {d["id"]: d for d in data}
    for r in manifest.itertuples():
        assert by_id[r.slide_id]["status"] == r.status and by_id[r.slide_id]["tiles"] == r.n_tiles
    assert by_id["broken"]["error"] and all((out / "qc" / f"s{i}.png").exists() for i in range(2))
    assert "<link" not in html and "http" not in html.replace("http-equiv", "")  # nothing fetched from a network
