"""The report in headless Chromium (Debian's /usr/bin/chromium through Playwright): a part turn's
polar wedge, the summary's width, the collapsed file hashes and the report's weight."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from conftest import TINY_MANIFEST, point_echo, skip_or_fail, write_s1p

CHROMIUM = "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--no-first-run"]


@pytest.fixture(scope="module")
def part_turn_report(tmp_path_factory):
    """A campaign measured from -60 to +60 deg only, processed over the sector -30:30 with its report."""
    if not Path(CHROMIUM).exists() or shutil.which(CHROMIUM) is None:
        skip_or_fail("chromium is not installed at /usr/bin/chromium")
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError:
        skip_or_fail("playwright (Python) is not installed")
    from cloakrcs.pipeline import run_process
    from cloakrcs.process import ProcessSettings

    root = tmp_path_factory.mktemp("part-turn")
    freq = np.linspace(8e9, 12e9, 201)
    rng = np.random.default_rng(5)
    for pol in ("HH", "VV"):
        for rep in range(2):
            write_s1p(root / "raw" / f"empty_{pol}_{rep}.s1p", freq,
                      point_echo(freq, 1.0, 0.01) + 1e-6 * rng.standard_normal(freq.size))
        write_s1p(root / "raw" / f"sphere_{pol}.s1p", freq, point_echo(freq, 4.2, 0.1))
        for ang in np.arange(-60.0, 61.0, 10.0):
            lobe = 1 + 0.5 * np.cos(np.radians(ang) * 3)
            write_s1p(root / "raw" / f"bare_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.3 * lobe))
            write_s1p(root / "raw" / f"r1_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.1 * lobe))
    (root / "manifest.toml").write_text(TINY_MANIFEST)
    outcome = run_process(root / "manifest.toml", root / "out", ProcessSettings(sector_deg=(-30.0, 30.0)),
                          store_url=None)
    return outcome


@pytest.fixture(scope="module")
def page(part_turn_report):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS, headless=True)
        pg = browser.new_page(viewport={"width": 1280, "height": 900})
        pg.set_default_timeout(90000)
        pg.goto(part_turn_report.paths["report"].resolve().as_uri())
        pg.wait_for_function("document.documentElement.getAttribute('data-plotly') === 'ready'")
        yield pg
        browser.close()


def test_polar_wedge_holds_the_part_turn(page):
    page.locator("#fig-polar-r1-vv").scroll_into_view_if_needed()  # drawn when it comes into view
    page.wait_for_selector("#fig-polar-r1-vv .main-svg")
    got = page.evaluate("""() => {
      const g = document.querySelector('#fig-polar-r1-vv');
      const b = g.querySelector('.plotbg path').getBoundingClientRect();
      const trace = g.querySelectorAll('.scatterlayer .trace')[0];
      const pts = [...trace.querySelectorAll('path.point')].map(e => { const r = e.getBoundingClientRect();
        return [r.x + r.width / 2, r.y + r.height / 2]; });
      return {wedge: [b.left, b.top, b.right, b.bottom], pts: pts}; }""")
    left, top, right, bottom = got["wedge"]
    pts = got["pts"]
    assert len(pts) == 13  # -60..60 deg every 10 deg
    # every measured angle is drawn inside the visible wedge (the old sector, set in data angles on a
    # rotated axis, showed the wedge from -30 to +150 deg of the screen and cut the data off)
    for x, y in pts:
        assert left - 1 <= x <= right + 1 and top - 1 <= y <= bottom + 1, (x, y, got["wedge"])
    # data angle 0 at the top, angles counter-clockwise: -60 deg on the right, +60 deg on the left
    xs = [p[0] for p in pts]
    ys = [p[1] for p in pts]
    assert ys[6] == min(ys)
    assert xs[0] > xs[6] > xs[12]
    ticks = page.evaluate("() => [...document.querySelectorAll('#fig-polar-r1-vv .radialaxis text, "
                          "#fig-polar-r1-vv .radial-axis text, #fig-polar-r1-vv .polar text')].map(t => t.textContent)")
    assert any(t.endswith("dBsm") for t in ticks) and not any(t.endswith(" dB") for t in ticks)


def test_summary_fits_the_page_and_hashes_are_collapsed(page, part_turn_report):
    fit = page.evaluate("""() => { const t = document.querySelector('#summary-table');
        const m = document.querySelector('main');
        return [t.getBoundingClientRect().right, t.parentElement.scrollWidth, t.parentElement.clientWidth,
                m.getBoundingClientRect().right]; }""")
    assert fit[0] <= fit[3] and fit[1] <= fit[2]  # no horizontal overflow
    assert page.evaluate("() => document.querySelector('#files-details').open") is False
    assert not page.locator("#files-table").is_visible()
    scope = page.locator("#summary-scope").inner_text()
    assert "sector -30 to 30 deg (7 angles, -30 to 30 deg)" in scope and "GHz" in scope
    # example RCS curves are drawn at angles inside the sector
    names = page.evaluate("""() => JSON.parse(document.querySelector('script.figure-data[data-for="fig-rcs-r1-vv"]')
                                  .textContent).data.map(t => t.name)""")
    angles = [float(n.split()[-1].rstrip("°")) for n in names if not n.endswith("floor")]
    assert angles and all(-30 <= a <= 30 for a in angles)


def test_report_weight(part_turn_report):
    size = part_turn_report.paths["report"].stat().st_size
    # the small campaign's report: compressed plotly.js (about 2 MB) and its figures; 5.1 MB with plotly.js inlined plain
    assert size < 3e6, size
