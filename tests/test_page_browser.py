"""The report page in a real browser: headless Chromium through playwright.

Skipped, with the reason, only where no Chromium is installed; CI installs it
(``.ci/run``) and sets ``SYNTHGEN_REQUIRE_BROWSER=1`` so that a missing browser
fails there instead of skipping.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import orjson
import pytest

from synthgen.page import write_report
from tests._page_helpers import make_probe_dir

_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
         "--disable-sync", "--no-first-run"]


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").is_file() else None


def _require():
    required = os.environ.get("SYNTHGEN_REQUIRE_BROWSER") == "1"
    exe = _chromium()
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        if required:
            pytest.fail("SYNTHGEN_REQUIRE_BROWSER=1 but the playwright package is not installed")
        pytest.skip("the playwright package is not installed (it is in the [test] extra)")
    if exe is None:
        if required:
            pytest.fail("SYNTHGEN_REQUIRE_BROWSER=1 but no chromium executable was found")
        pytest.skip("no Chromium found (apt-get install chromium); .ci/run installs it")
    return exe


@pytest.fixture(scope="module")
def browser():
    exe = _require()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=exe, args=_ARGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def page_file(small_dataset, tmp_path_factory):
    root = tmp_path_factory.mktemp("browser")
    run = make_probe_dir(root, small_dataset[0], subsets=(("size=8", {"objects.size": 8}, 3),
                                                          ("size=16", {"objects.size": 16}, 4)))
    out = root / "report.html"
    write_report(run, out)
    return run, out


def _open(browser, out: Path, *, js: bool = True):
    ctx = browser.new_context(java_script_enabled=js, viewport={"width": 1280, "height": 900})
    page = ctx.new_page()
    problems, requests = [], []
    page.on("console", lambda m: problems.append(m.text) if m.type in ("error", "warning") else None)
    page.on("pageerror", lambda e: problems.append(str(e)))
    page.on("request", lambda r: requests.append(r.url))
    page.goto(out.as_uri(), wait_until="load")
    return ctx, page, problems, requests


def test_page_loads_offline_with_no_errors_and_right_numbers(browser, page_file, tmp_path):
    run, out = page_file
    ctx, page, problems, requests = _open(browser, out)
    try:
        assert problems == []
        assert [u for u in requests if not u.startswith("data:")] == [out.as_uri()]
        # every figure and crop has a rendered size (subsets after the first are in closed <details>)
        page.evaluate("document.querySelectorAll('details').forEach(d => d.open = true)")
        sizes = page.evaluate("""Array.from(document.querySelectorAll('svg.chart, svg.crop')).map(
            e => { const r = e.getBoundingClientRect(); return [r.width, r.height]; })""")
        assert len(sizes) >= 2 * 4 + 1 and all(w > 50 and h > 50 for w, h in sizes)
        # the headline numbers in the DOM equal score.json
        score = orjson.loads((run / "score.json").read_bytes())["subsets"]
        cells = page.evaluate("""Array.from(document.querySelectorAll('[data-stat][data-value]')).map(
            e => [e.dataset.subset, e.dataset.stat, parseFloat(e.dataset.value), e.textContent])""")
        assert len(cells) >= 24
        for subset, name, value, text in cells:
            assert value == score[subset]["stats"][name]
            assert text == (f"{value:.3f}" if value >= 0 else "–")  # -1: no object counts
        shot = tmp_path / "page.png"
        page.screenshot(path=str(shot), full_page=True)
        import numpy as np
        from PIL import Image

        pix = np.asarray(Image.open(shot).convert("L"), dtype=float)
        assert pix.shape[0] > 2000 and pix.std() > 20  # a long page with content, not a blank one
    finally:
        ctx.close()


def _luminance(rgb) -> float:
    """Relative luminance, WCAG 2.x definition (sRGB linearised; 0.03928 threshold as the text gives it)."""
    def lin(c):
        c = c / 255
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (lin(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def _contrast(a, b) -> float:
    """WCAG contrast ratio (L1 + 0.05) / (L2 + 0.05)."""
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_wcag_contrast_helper_matches_known_ratios():
    """Black on white is 21:1 and #777 on white about 4.48:1 (WCAG 2.x; the latter a common-practice example)."""
    assert _contrast((0, 0, 0), (255, 255, 255)) == pytest.approx(21.0)
    assert _contrast((119, 119, 119), (255, 255, 255)) == pytest.approx(4.48, abs=0.01)


_TEXT_COLOURS = """
() => {
  const rgb = s => (s.match(/[\\d.]+/g) || []).map(Number);
  const out = [];
  for (const el of document.querySelectorAll('main *')) {
    if (el.closest('svg')) continue;
    const own = Array.from(el.childNodes).some(n => n.nodeType === 3 && n.textContent.trim());
    if (!own || !el.getClientRects().length) continue;
    let bg = null, e = el;
    while (e) { const c = rgb(getComputedStyle(e).backgroundColor);
      if (c.length === 3 || (c.length === 4 && c[3] > 0.99)) { bg = c.slice(0, 3); break; } e = e.parentElement; }
    out.push([el.tagName, rgb(getComputedStyle(el).color).slice(0, 3), bg || [255, 255, 255],
              el.textContent.trim().slice(0, 30)]);
  }
  return out;
}
"""


def test_text_contrast_meets_wcag_aa(browser, page_file):
    """Every text element's computed colour against its computed background reaches 4.5:1 (WCAG 2.x AA)."""
    ctx, page, _, _ = _open(browser, page_file[1])
    try:
        pairs = page.evaluate(_TEXT_COLOURS)
    finally:
        ctx.close()
    assert len(pairs) > 50
    low = [(tag, fg, bg, text, round(_contrast(fg, bg), 2)) for tag, fg, bg, text in pairs if _contrast(fg, bg) < 4.5]
    assert low == []


def test_page_reads_with_javascript_off_and_sorts_with_it_on(browser, page_file):
    ctx, page, problems, _ = _open(browser, page_file[1], js=False)
    try:
        assert problems == []
        visible = page.evaluate("""() => ['table.stats', 'table.errors', 'svg.chart', 'svg.crop', 'table.percat']
            .map(s => { const e = document.querySelector(s); return !!e && e.getBoundingClientRect().height > 20; })""")
        assert visible == [True] * 5
        # the truth/prediction switches are CSS only
        page.check("#hide-pred")
        assert page.evaluate("getComputedStyle(document.querySelector('svg.crop g.pred')).display") == "none"
    finally:
        ctx.close()
    ctx, page, _, _ = _open(browser, page_file[1])
    try:
        table = "table.percat"
        page.click(f"{table} th:nth-child(4) button")
        values = page.evaluate(f"""Array.from(document.querySelector('{table}').tBodies[0].rows)
            .map(r => r.cells[3].dataset.value).filter(v => v !== undefined).map(Number)""")
        assert values == sorted(values) and len(values) >= 2
    finally:
        ctx.close()
