"""The dashboard in headless Chromium (Debian's /usr/bin/chromium through Playwright).

Loads the app on the sample campaign (recorded in a fresh SQLite store), changes a control on
every view and checks that its figure changed, re-gates in the background and keeps the result,
uploads a campaign zip (and a bad one), and saves a screenshot of each view to tests/_artifacts/.
"""

from __future__ import annotations

import io
import shutil
import threading
import zipfile
from pathlib import Path

import pytest

from conftest import skip_or_fail

CHROMIUM = "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage"]
ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = Path(__file__).resolve().parent / "_artifacts"


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    if not Path(CHROMIUM).exists() or shutil.which(CHROMIUM) is None:
        skip_or_fail("chromium is not installed at /usr/bin/chromium")
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError:
        skip_or_fail("playwright (Python) is not installed")
    from werkzeug.serving import make_server

    from cloakrcs import store
    from cloakrcs.campaign import load_campaign
    from cloakrcs.process import process_campaign
    from cloakrcs.dashboard.app import create_app

    tmp = tmp_path_factory.mktemp("browser")
    url = "sqlite:///" + (tmp / "results.sqlite").as_posix()
    campaign = load_campaign(ROOT / "sample_measurements" / "manifest.toml")
    store.record_run(url, campaign, process_campaign(campaign))
    app = create_app(url)
    srv = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{srv.server_port}", app
    srv.shutdown()


@pytest.fixture(scope="module")
def page(server):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS, headless=True)
        pg = browser.new_page(viewport={"width": 1440, "height": 1000})
        pg.set_default_timeout(90000)  # generous: a loaded 2-core CI machine renders slowly
        pg.goto(server[0])
        pg.wait_for_selector("#fig-check .main-svg")
        yield pg
        browser.close()


def figure_title(pg, graph_id: str) -> str:
    return pg.evaluate(f"""() => {{ const el = document.querySelector('#{graph_id} .js-plotly-plot');
                                    return el && el.layout && el.layout.title ? (el.layout.title.text || '') : ''; }}""")


def trace_names(pg, graph_id: str) -> list:
    return pg.evaluate(f"""() => {{ const el = document.querySelector('#{graph_id} .js-plotly-plot');
                                    return el && el.data ? el.data.map(t => t.name || '') : []; }}""")


def wait_title(pg, graph_id: str, text: str, timeout: float | None = None):
    pg.wait_for_function(f"""() => {{ const el = document.querySelector('#{graph_id} .js-plotly-plot');
        return el && el.layout && el.layout.title && (el.layout.title.text || '').includes({text!r}); }}""",
                         timeout=timeout)


def choose(pg, radio_id: str, label: str, graph_id: str):
    """Click a radio item and wait until graph_id's title names it.

    A callback answering an earlier change (a new run selected by the previous test, say) can land
    after the click and set the control back, so the click is repeated until the choice holds.
    """
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    for _ in range(5):
        pg.locator(f"#{radio_id} label", has_text=label).click()
        try:
            wait_title(pg, graph_id, label, timeout=15000)
            return
        except PlaywrightTimeout:
            continue
    pg.locator(f"#{radio_id} label", has_text=label).click()
    wait_title(pg, graph_id, label)


def open_view(pg, label: str):
    pg.get_by_role("tab", name=label).click() if pg.get_by_role("tab", name=label).count() else \
        pg.locator(".tab", has_text=label).first.click()


def shot(pg, name: str):
    ARTIFACTS.mkdir(exist_ok=True)
    pg.wait_for_timeout(400)
    pg.screenshot(path=str(ARTIFACTS / f"dashboard_{name}.png"), full_page=True)


def test_campaign_view(page):
    assert "RF safety." in page.inner_text("#caution")
    wait_title(page, "fig-check", "HH")
    choose(page, "campaign-pol", "VV", "fig-check")
    wait_title(page, "fig-floor", "VV")
    assert "check-sphere" in page.inner_text("#campaign-summary")
    shot(page, "campaign")


def test_range_and_gate_view(page):
    open_view(page, "Range & gate")
    page.wait_for_selector("#fig-profile .main-svg")
    page.wait_for_function("() => document.querySelector('#gate-center').value !== ''")
    page.fill("#gate-center", "4.35")
    page.press("#gate-center", "Enter")
    page.wait_for_function("""() => { const el = document.querySelector('#fig-profile .js-plotly-plot');
        return el && el.data && el.data.some(t => (t.name || '').startsWith('gate 4.350')); }""")
    assert page.is_visible("#caution")
    page.click("#gate-run")
    page.wait_for_function("() => document.querySelector('#gate-status').innerText.includes('preview ready')",
                           timeout=120000)
    assert trace_names(page, "fig-preview") == ["stored run", "new settings"]
    shot(page, "range_gate")
    page.click("#gate-keep")
    page.wait_for_function("() => document.querySelector('#gate-status').innerText.includes('recorded as run')")


def test_rcs_view(page):
    open_view(page, "RCS")
    page.wait_for_selector("#fig-rcs-freq .main-svg")
    wait_title(page, "fig-rcs-freq", "HH")
    choose(page, "rcs-pol", "VV", "fig-rcs-freq")
    wait_title(page, "fig-rcs-polar", "VV")
    wait_title(page, "fig-rcs-map", "VV")
    shot(page, "rcs")


def test_reduction_view(page):
    open_view(page, "Reduction")
    page.wait_for_selector("#fig-red-map .main-svg")
    wait_title(page, "fig-red-curve", "HH")
    choose(page, "red-pol", "VV", "fig-red-curve")
    wait_title(page, "fig-red-map", "VV")
    assert "band-averaged reduction" in page.inner_text("#red-metrics")
    shot(page, "reduction")


def test_revisions_view(page):
    open_view(page, "Revisions")
    page.wait_for_selector("#fig-trend .main-svg")
    wait_title(page, "fig-trend", "band-averaged reduction")
    cell = page.locator("#rev-table td[data-dash-column='note']").first
    cell.click()
    page.keyboard.type("taped seam")
    page.keyboard.press("Enter")
    page.wait_for_function("() => document.querySelector('#rev-status').innerText.includes('saved')")
    shot(page, "revisions")


def test_safety_view(page):
    open_view(page, "RF safety")
    page.wait_for_selector("#fig-safety .main-svg")
    before = page.inner_text("#safe-out")
    page.fill("#safe-p", "43")
    page.press("#safe-p", "Enter")
    page.wait_for_function(f"() => document.querySelector('#safe-out').innerText !== {before!r}")
    assert "Indicative" in page.inner_text("#safe-out")
    shot(page, "safety")


def _zip_folder(folder: Path) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for p in folder.rglob("*"):
            if p.is_file():
                zf.write(p, "campaign/" + str(p.relative_to(folder)))
    return buf.getvalue()


def test_upload(page, tiny_campaign, tmp_path):
    bad = tmp_path / "bad.zip"
    with zipfile.ZipFile(bad, "w") as zf:
        zf.writestr("../escape.txt", "x")
    page.set_input_files("#upload input[type=file]", str(bad))
    page.wait_for_function("() => document.querySelector('#upload-status').innerText.includes('escapes')")
    good = tmp_path / "tiny.zip"
    good.write_bytes(_zip_folder(tiny_campaign.parent))
    page.set_input_files("#upload input[type=file]", str(good))
    page.wait_for_function("() => document.querySelector('#upload-status').innerText.includes('added as run')",
                           timeout=120000)
    open_view(page, "Campaign")
    page.wait_for_function("() => document.querySelector('#campaign-summary').innerText.includes('tiny')")
    shot(page, "upload")
