"""Figure behaviours in headless Chromium (Debian's /usr/bin/chromium through Playwright).

Fixed earlier and tested without a browser; here they are checked on the rendered page, reading the
live Plotly figures (``.data``, ``.layout``, ``._fullLayout``) and the DOM:

* a part turn's polar plot draws the wedge of the measured angles (dashboard and report),
* the RCS map's x-axis title is not clipped by the graph's SVG,
* the polar radial axis says dBsm, not dB,
* with an empty store every view shows a sentence, not blank axes; the Range & gate comparison shows
  its sentence before reprocessing,
* the campaign view's floor curves do not share one legend entry.

The part-turn campaign is simulated from sample_measurements/config.toml with angles -60..+60 deg.
"""

from __future__ import annotations

import shutil
import threading
import tomllib
from pathlib import Path

import pytest

from conftest import skip_or_fail
from test_dashboard_browser import CHROMIUM, FLAGS, ROOT, open_view, wait_title

ANGLES = (-60.0, 60.0, 5.0)


def _need_browser():
    if not Path(CHROMIUM).exists() or shutil.which(CHROMIUM) is None:
        skip_or_fail("chromium is not installed at /usr/bin/chromium")
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError:
        skip_or_fail("playwright (Python) is not installed")


def _part_turn_config() -> dict:
    """The sample campaign's config, measured from -60 to +60 deg, with fewer targets and repeats."""
    cfg = tomllib.loads((ROOT / "sample_measurements" / "config.toml").read_text())
    cfg["campaign"]["name"] = "part-turn"
    cfg["angles"] = dict(zip(("start", "stop", "step"), ANGLES))
    keep = {"empty", "cal-sphere", "check-sphere", "bare", "r1"}
    cfg["target"] = [t for t in cfg["target"] if t["name"] in keep]
    for t in cfg["target"]:
        t["repeats"] = min(t.get("repeats", 1), 2)
    return cfg


def _serve(app):
    from werkzeug.serving import make_server

    srv = make_server("127.0.0.1", 0, app.server, threaded=True)
    threading.Thread(target=srv.serve_forever, daemon=True).start()
    return srv


@pytest.fixture(scope="module")
def part_turn(tmp_path_factory):
    """The simulated part turn, processed with its report and recorded in a fresh SQLite store."""
    _need_browser()
    from cloakrcs.pipeline import run_process
    from cloakrcs.simulate import simulate_campaign

    tmp = tmp_path_factory.mktemp("part-turn-figs")
    sim = simulate_campaign(_part_turn_config(), tmp / "campaign")
    url = "sqlite:///" + (tmp / "results.sqlite").as_posix()
    outcome = run_process(sim.manifest_path, tmp / "out", store_url=url, report=True)
    return url, outcome


@pytest.fixture(scope="module")
def browser():
    _need_browser()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS, headless=True)
        yield b
        b.close()


def _new_page(browser, url: str):
    pg = browser.new_page(viewport={"width": 1440, "height": 1000})
    pg.set_default_timeout(90000)  # generous: a loaded 2-core CI machine renders slowly
    pg.goto(url)
    return pg


@pytest.fixture(scope="module")
def dash_page(part_turn, browser):
    from cloakrcs.dashboard.app import create_app

    srv = _serve(create_app(part_turn[0]))
    pg = _new_page(browser, f"http://127.0.0.1:{srv.server_port}")
    pg.wait_for_selector("#fig-check .main-svg")
    wait_title(pg, "fig-floor", "floor")
    yield pg
    pg.close()
    srv.shutdown()


@pytest.fixture(scope="module")
def report_page(part_turn, browser):
    pg = _new_page(browser, part_turn[1].paths["report"].resolve().as_uri())
    pg.wait_for_function("document.documentElement.getAttribute('data-plotly') === 'ready'")
    yield pg
    pg.close()


@pytest.fixture(scope="module")
def empty_page(browser, tmp_path_factory):
    from cloakrcs.dashboard.app import create_app

    url = "sqlite:///" + (tmp_path_factory.mktemp("empty-store") / "results.sqlite").as_posix()
    srv = _serve(create_app(url))
    pg = _new_page(browser, f"http://127.0.0.1:{srv.server_port}")
    pg.wait_for_selector("#fig-check .main-svg")
    yield pg
    pg.close()
    srv.shutdown()


# ---------------------------------------------------------------------------------------------- polar

POLAR_GEOMETRY = """(sel) => {
  const el = document.querySelector(sel);
  const fl = el._fullLayout.polar;
  const pts = [...el.querySelectorAll('.scatterlayer .trace')].map(tr =>
      [...tr.querySelectorAll('path.point')].map(e => { const r = e.getBoundingClientRect();
        return [r.x + r.width / 2, r.y + r.height / 2]; }));
  const bg = el.querySelector('.polar .bg, .plotbg path, .polar path.bg');
  const b = bg ? bg.getBoundingClientRect() : null;
  return {sector: fl.sector, rotation: fl.angularaxis.rotation, direction: fl.angularaxis.direction,
          thetas: el._fullData.map(t => Array.from(t.theta || [])), points: pts,
          wedge: b ? [b.left, b.top, b.right, b.bottom] : null,
          suffix: fl.radialaxis.ticksuffix, title: (el.layout.title || {}).text || '',
          ticks: [...el.querySelectorAll('.polar .radial-axis text, .polar .radialaxis text, .polar .xtick text')]
                   .map(t => t.textContent)}; }"""


def _screen_angle(theta: float, rotation: float, direction: str) -> float:
    """Where plotly draws a data angle: degrees counter-clockwise from the right (the sector's frame)."""
    return rotation + (theta if direction == "counterclockwise" else -theta)


def _in_sector(angle: float, sector) -> bool:
    lo, hi = sector
    return (angle - lo) % 360.0 <= (hi - lo) + 1e-9


def check_polar_wedge(g: dict):
    thetas = [th for trace in g["thetas"] for th in trace]
    assert thetas, g
    assert min(thetas) == pytest.approx(ANGLES[0]) and max(thetas) == pytest.approx(ANGLES[1])
    # a part turn shows a wedge, not the full circle, and the wedge is not much wider than the data
    lo, hi = g["sector"]
    assert 0 < hi - lo < 180, g["sector"]
    outside = [th for th in thetas if not _in_sector(_screen_angle(th, g["rotation"], g["direction"]), g["sector"])]
    assert not outside, (outside, g["sector"], g["rotation"], g["direction"])
    # the drawn points agree: inside the wedge's box, data angle 0 at the top, -60 on the right
    pts = g["points"][0]
    assert len(pts) == len(g["thetas"][0])
    if g["wedge"]:
        left, top, right, bottom = g["wedge"]
        for x, y in pts:
            assert left - 1 <= x <= right + 1 and top - 1 <= y <= bottom + 1, (x, y, g["wedge"])
    th = g["thetas"][0]
    i0, ilo, ihi = th.index(0.0), th.index(ANGLES[0]), th.index(ANGLES[1])
    assert pts[i0][1] == min(p[1] for p in pts)  # angle 0 at the top of the wedge
    assert pts[ilo][0] > pts[i0][0] > pts[ihi][0]  # counter-clockwise: -60 right, +60 left


def check_dbsm(g: dict):
    # the drawn tick labels first, then the figure's setting
    assert g["ticks"] and all(t.endswith("dBsm") for t in g["ticks"] if t.strip()), g["ticks"]
    assert not any(t.endswith(" dB") for t in g["ticks"])
    assert g["suffix"].strip() == "dBsm"
    assert "(dBsm)" in g["title"] and "(dB)" not in g["title"]


def _dash_polar(pg) -> dict:
    open_view(pg, "RCS")
    pg.wait_for_function("""() => { const el = document.querySelector('#fig-rcs-polar .js-plotly-plot');
        return el && el._fullLayout && el._fullLayout.polar && el.data.length > 0; }""")
    pg.wait_for_selector("#fig-rcs-polar .scatterlayer path.point")
    return pg.evaluate(POLAR_GEOMETRY, "#fig-rcs-polar .js-plotly-plot")


def _report_polar(pg) -> dict:
    sel = ".lazy-figure[id^='fig-polar-']"
    pg.locator(sel).first.scroll_into_view_if_needed()  # the report draws a figure when it comes into view
    pg.wait_for_selector(f"{sel} .scatterlayer path.point")
    fid = pg.evaluate(f"() => document.querySelector(\"{sel}\").id")
    return pg.evaluate(POLAR_GEOMETRY, f"#{fid}")


def test_dashboard_polar_wedge_holds_the_part_turn(dash_page):
    check_polar_wedge(_dash_polar(dash_page))


def test_report_polar_wedge_holds_the_part_turn(report_page):
    check_polar_wedge(_report_polar(report_page))


def test_polar_radial_axis_says_dbsm(dash_page, report_page):
    check_dbsm(_dash_polar(dash_page))
    check_dbsm(_report_polar(report_page))


# ---------------------------------------------------------------------------------------------- map

def test_rcs_map_x_title_is_not_clipped(dash_page):
    open_view(dash_page, "RCS")
    wait_title(dash_page, "fig-rcs-map", "RCS map of")
    dash_page.wait_for_selector("#fig-rcs-map .g-xtitle text")
    box = dash_page.evaluate("""() => {
      const g = document.querySelector('#fig-rcs-map .js-plotly-plot');
      const svg = g.querySelector('svg.main-svg').getBoundingClientRect();
      const t = g.querySelector('.g-xtitle').getBoundingClientRect();
      const ticks = [...g.querySelectorAll('.xtick text')].map(e => e.getBoundingClientRect().bottom);
      return {svg: [svg.left, svg.top, svg.right, svg.bottom], title: [t.left, t.top, t.right, t.bottom],
              text: g.querySelector('.g-xtitle').textContent, tickBottom: Math.max(...ticks)}; }""")
    sl, st, sr, sb = box["svg"]
    tl, tt, tr, tb = box["title"]
    assert box["text"] == "frequency (GHz)"
    assert tb > tt and tr > tl  # drawn
    assert sl <= tl and tr <= sr and st <= tt and tb <= sb, box  # the title inside the SVG
    # plotly keeps a title that does not fit inside the SVG by drawing it over the tick labels (which
    # then leave the SVG): the labels stay inside too, and the title below them
    assert box["tickBottom"] <= sb, box
    assert tt >= box["tickBottom"] - 1, box


# ---------------------------------------------------------------------------------------------- floor legend

def test_floor_curves_have_their_own_legend_entries(dash_page):
    open_view(dash_page, "Campaign")
    wait_title(dash_page, "fig-floor", "floor")
    got = dash_page.evaluate("""() => {
      const el = document.querySelector('#fig-floor .js-plotly-plot');
      return {names: el.data.filter(t => t.showlegend !== false).map(t => t.name || ''),
              groups: el.data.map(t => t.legendgroup || ''),
              legend: [...el.querySelectorAll('.legend .traces .legendtext')].map(e => e.textContent)}; }""")
    names = got["names"]
    floors = [n for n in names if n.endswith("floor")]
    assert len(floors) >= 2, names  # bare and r1 each have a floor curve
    assert len(set(names)) == len(names), names
    # the drawn legend: one distinct entry for every trace (none merged into a shared group)
    assert sorted(got["legend"]) == sorted(names), got
    assert len(set(got["legend"])) == len(got["legend"]), got


# ---------------------------------------------------------------------------------------------- empty states

MESSAGE = """(id) => { const el = document.querySelector('#' + id + ' .js-plotly-plot');
  if (!el || !el._fullLayout) return null;
  const ann = [...el.querySelectorAll('.annotation-text')].map(e => e.textContent).join(' ');
  return {ann: ann, traces: el.data.length, axes: el.querySelectorAll('.xtick, .ytick').length}; }"""


def _sentence_shown(pg, graph_id: str, text: str):
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    try:  # the sentence is the graph's first figure: drawn with the graph, not by a late callback
        pg.wait_for_function(f"() => document.querySelector('#{graph_id} .annotation-text') !== null",
                             timeout=10000)
    except PlaywrightTimeout:
        pass  # the assertions below say what is drawn instead
    got = pg.evaluate(MESSAGE, graph_id)
    assert got is not None, graph_id
    assert text in got["ann"], (graph_id, got)
    assert got["traces"] == 0 and got["axes"] == 0, (graph_id, got)  # a sentence, no blank axes


def test_empty_store_views_show_a_sentence(empty_page):
    from cloakrcs.dashboard.layout import EMPTY_TEXT, EMPTY_TEXTS

    pg = empty_page
    assert pg.is_visible("#empty-banner")
    assert "No processing run in this store yet" in pg.inner_text("#empty-banner")
    graphs = {"Campaign": ["fig-check", "fig-floor", "fig-coverage"], "Range & gate": ["fig-profile", "fig-preview"],
              "RCS": ["fig-rcs-freq", "fig-rcs-polar", "fig-rcs-map"], "Reduction": ["fig-red-curve", "fig-red-map"],
              "Revisions": ["fig-trend"]}
    for view, ids in graphs.items():
        open_view(pg, view)
        for gid in ids:
            pg.wait_for_selector(f"#{gid} .main-svg", state="visible")
            _sentence_shown(pg, gid, EMPTY_TEXTS.get(gid, EMPTY_TEXT))


def test_gate_comparison_shows_its_sentence_before_reprocessing(dash_page):
    from cloakrcs.dashboard.layout import EMPTY_TEXTS

    open_view(dash_page, "Range & gate")
    dash_page.wait_for_function("""() => { const el = document.querySelector('#fig-profile .js-plotly-plot');
        return el && el.data && el.data.length > 0; }""")
    dash_page.wait_for_selector("#fig-preview .main-svg", state="visible")
    _sentence_shown(dash_page, "fig-preview", EMPTY_TEXTS["fig-preview"])
