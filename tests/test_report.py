"""The self-contained HTML report: structure, numbers against summary.json, offline-ness, export.

The page is parsed with BeautifulSoup (html.parser). "No external URL" is checked on the tags and
attributes the report emits (script src, link href, img/iframe/object/embed, any href other than
a #fragment, CSS url()/@import), not on the text of the inlined plotly.js bundle: the minified
bundle holds URL strings of its own (docs links, optional map tiles) that a plain scatter or
heatmap page never fetches.
"""

from __future__ import annotations

import hashlib
import json
import re

import numpy as np
import pytest
from bs4 import BeautifulSoup

from conftest import TINY_MANIFEST, point_echo, skip_or_fail, write_s1p
from cloakrcs import figures, report
from cloakrcs.pipeline import run_process

CHECK_TARGET = """
[[target]]
name = "check-sphere"
role = "subject"
shape = "sphere"
radius_m = 0.05
files = "raw/sphere_{pol}.s1p"
"""


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    """A processed tiny campaign (sphere reference, bare, R1, a sphere check target): out dir + result."""
    root = tmp_path_factory.mktemp("report")
    freq = np.linspace(8e9, 12e9, 401)
    raw = root / "raw"
    rng = np.random.default_rng(7)
    for pol in ("HH", "VV"):
        for rep in range(2):
            write_s1p(raw / f"empty_{pol}_{rep}.s1p", freq,
                      point_echo(freq, 1.0, 0.01) + 1e-6 * rng.standard_normal(401))
        write_s1p(raw / f"sphere_{pol}.s1p", freq, point_echo(freq, 1.0, 0.01) + point_echo(freq, 4.2, 0.1))
        for ang in (-10.0, -5.0, 0.0, 5.0, 10.0):
            lobe = 1 + 0.3 * np.cos(np.radians(ang) * 9)
            write_s1p(raw / f"bare_{pol}_{ang:+06.1f}.s1p", freq,
                      point_echo(freq, 1.0, 0.01) + point_echo(freq, 4.2, 0.3 * lobe))
            # R1 scatters 10x less in amplitude at 8 GHz, 2x less at 12 GHz: the 10 dB edge lies inside the band
            red = 0.1 + 0.4 * (freq - 8e9) / 4e9
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", freq,
                      point_echo(freq, 1.0, 0.01) + point_echo(freq, 4.2, 0.3 * lobe) * red)
    manifest = root / "manifest.toml"
    manifest.write_text(TINY_MANIFEST + CHECK_TARGET)
    outcome = run_process(manifest, root / "out", store_url=None)
    return root, outcome


@pytest.fixture(scope="module")
def soup(run_dir):
    _, outcome = run_dir
    return BeautifulSoup(outcome.paths["report"].read_text(encoding="utf-8"), "html.parser")


@pytest.fixture(scope="module")
def summary(run_dir):
    _, outcome = run_dir
    return json.loads(outcome.paths["summary"].read_text(encoding="utf-8"))


def plotly_bundle_scripts(soup):
    return soup.find_all("script", id="plotly-bundle")


def test_plotly_js_is_inlined_exactly_once(soup, run_dir):
    import base64
    import gzip

    from plotly.offline import get_plotlyjs

    bundles = plotly_bundle_scripts(soup)
    assert len(bundles) == 1 and bundles[0]["type"] == "application/gzip+base64"
    # the whole bundle of the installed plotly (RFC 1952 gzip, RFC 4648 base64)
    assert gzip.decompress(base64.b64decode(bundles[0].string)).decode() == get_plotlyjs()
    html_text = run_dir[1].paths["report"].read_text(encoding="utf-8")
    assert html_text.count(bundles[0].string[:300]) == 1  # not once per figure


def test_every_figure_is_present(soup, summary):
    ids = []
    for m in summary["metrics"]:
        for kind in ("rcs", "polar", "map", "sector"):
            ids.append(report.slug(f"fig-{kind}", m["subject"], m["polarization"]))
    for c in summary["checks"]:
        ids.append(report.slug("fig-check", c["target"], c["polarization"]))
    ids.append("fig-range-profile")
    assert summary["checks"], "the fixture has a check target"
    for fid in ids:
        div = soup.find(id=fid)
        assert div is not None and "plotly-graph-div" in div.get("class", []), fid
        data = soup.find("script", attrs={"class": "figure-data", "data-for": fid})
        assert data is not None and json.loads(data.string)["data"], fid  # the loader draws it from this


def test_summary_table_matches_summary_json(soup, summary):
    table = soup.find(id="summary-table")
    rows = table.find("tbody").find_all("tr")
    assert len(rows) == len(summary["metrics"]) > 0
    printed = {"band_reduction_db": (2, 1), "band_reduction_uncertainty_db": (2, 1), "best_reduction_db": (2, 1),
               "best_frequency_hz": (3, 1e9), "bandwidth_hz": (1, 1e6), "bandwidth_start_hz": (3, 1e9),
               "bandwidth_stop_hz": (3, 1e9), "fractional_bandwidth": (1, 0.01), "worst_angle_deg": (1, 1),
               "worst_angle_reduction_db": (2, 1), "mounting_offset_deg": (2, 1)}
    for tr, m in zip(rows, summary["metrics"]):
        cells = {td["data-key"]: td for td in tr.find_all("td")}
        for key in ("subject", "baseline", "polarization"):
            assert cells[key]["data-value"] == m[key]
        for key, (digits, scale) in printed.items():
            value = m[key]
            if value is None:
                assert cells[key]["data-value"] == ""
                continue
            assert float(cells[key]["data-value"]) == value, key  # exact: repr round-trips a float
            text = cells[key].get_text()
            if key == "band_reduction_db" and m["bound"] == "undetermined":
                assert text == "undetermined"
                continue
            shown = float(re.search(r"-?\d+(?:\.\d+)?", text).group())
            assert abs(shown - value / scale) <= 0.5 * 10 ** -digits + 1e-9, (key, text, value)
        words = {"lower": "at least", "upper": "at most"}
        if m["bound"] in words:
            assert cells["band_reduction_db"].get_text().startswith(words[m["bound"]])


def test_checks_and_floor_tables(soup, summary):
    rows = soup.find(id="checks-table").find("tbody").find_all("tr")
    assert len(rows) == len(summary["checks"])
    for tr, c in zip(rows, summary["checks"]):
        cells = {td["data-key"]: td for td in tr.find_all("td")}
        assert float(cells["max_error_db"]["data-value"]) == c["max_error_db"]
        assert cells["passed"].get_text() == ("pass" if c["passed"] else "FAIL")
    floor_rows = soup.find(id="floor-table").find("tbody").find_all("tr")
    assert {tr.find("td")["data-value"] for tr in floor_rows} == set(summary["floor"])


def test_provenance_lists_every_file_hash(soup, summary, run_dir):
    root, _ = run_dir
    files = summary["settings"]["files"]
    assert files
    listed = {tr.find_all("td")[0].get_text(): tr.find_all("td")[1].get_text()
              for tr in soup.find(id="files-table").find("tbody").find_all("tr")}
    assert listed == files
    for rel, digest in files.items():
        # hashlib's SHA-256 of the file on disk (FIPS 180-4)
        assert hashlib.sha256((root / rel).read_bytes()).hexdigest() == digest
    settings_text = soup.find(id="settings-table").get_text()
    for needle in (summary["settings"]["software_version"], summary["settings"]["manifest"], "reporting band",
                   "valid band", "window"):
        assert needle in settings_text
    assert soup.find(id="gates-table") and soup.find(id="references-table")
    assert "check-sphere" in soup.find(id="manifest-text").get_text()


def test_uncertainty_statement_and_rf_caution(soup):
    unc = " ".join(soup.find(id="uncertainty-statement").get_text(" ").split())
    for needle in ("JCGM 100:2008", "k = 2", "correlated", "lower estimate", "0.5 dB", "Knott",
                   "at least", "at most", "undetermined", "95 %"):
        assert needle in unc, needle
    caution = " ".join(soup.find(id="rf-caution").get_text(" ").split())
    for needle in ("power amplifiers", "high-gain horns", "S = P G / (4 π r", "local regulations",
                   "RF safety rules", "indicative only"):
        assert needle in caution, needle


def assert_no_external_reference(soup):
    """No tag or attribute the report emits makes the browser fetch anything."""
    for name in ("link", "img", "iframe", "object", "embed", "video", "audio", "source", "base", "frame"):
        assert soup.find(name) is None, name
    url_attrs = ("src", "href", "data", "action", "poster", "srcset", "xlink:href", "background", "formaction")
    for tag in soup.find_all(True):
        for attr in url_attrs:
            if tag.has_attr(attr):
                assert attr == "href" and tag[attr].startswith("#"), (tag.name, attr, tag[attr])
        style = tag.get("style", "")
        assert "url(" not in style.lower(), tag.name
    for style in soup.find_all("style"):
        css = (style.string or "").lower()
        assert "url(" not in css and "@import" not in css
    for meta in soup.find_all("meta"):
        assert meta.get("http-equiv", "").lower() != "refresh"


def test_no_external_url_in_tags(soup):
    assert_no_external_reference(soup)


def test_external_url_scan_can_fail():
    bad = BeautifulSoup('<html><body><script src="https://cdn.example.org/p.js"></script></body></html>',
                        "html.parser")
    with pytest.raises(AssertionError):
        assert_no_external_reference(bad)


def test_render_without_campaign_omits_range_profile_with_a_note(run_dir):
    _, outcome = run_dir
    page = BeautifulSoup(report.render_report(outcome.result, None), "html.parser")
    note = page.find(id="fig-range-profile")
    assert note is not None and "plotly-graph-div" not in note.get("class", [])
    assert "omitted" in note.get_text()
    assert page.find(id=report.slug("fig-map", outcome.result.metrics[0]["subject"], "HH")) is not None
    assert_no_external_reference(page)


def test_reduction_wording_of_bounds():
    # README, The processing chain, step 6: subject at the floor -> lower bound, baseline -> upper, both -> undetermined
    assert report.reduction_text(12.345, "lower") == "at least 12.35"  # Python round-half-even prints 12.35 here
    assert report.reduction_text(3.0, "upper") == "at most 3.00"
    assert report.reduction_text(3.0, "undetermined") == "undetermined"
    assert report.reduction_text(-1.5, "none") == "-1.50"


def test_decimate_keeps_extremes_and_caps_points():
    rng = np.random.default_rng(3)
    x = np.linspace(0, 1, 100_001)
    y = rng.standard_normal(x.size)
    xd, yd = figures.decimate(x, y)
    assert xd.size <= figures.MAX_POINTS
    assert yd.max() == np.max(y) and yd.min() == np.min(y)  # numpy's extremes of the full trace
    assert np.all(np.diff(xd) > 0)
    idx = figures.stride_indices(1000, 400)
    assert idx.size <= 400 and idx[0] == 0 and idx[-1] == 999


def test_figures_decimate_what_they_send(run_dir):
    _, outcome = run_dir
    result = outcome.result
    m = result.metrics[0]
    fig = figures.fig_reduction_map(result, m["subject"], m["polarization"])
    z = np.asarray(fig.data[0].z)
    assert z.shape[0] <= figures.MAX_MAP[0] and z.shape[1] <= figures.MAX_MAP[1]
    ds = result.reductions[(m["subject"], m["polarization"])]
    assert z.shape == ds["reduction_db"].shape  # small enough: kept whole
    fig = figures.fig_rcs_vs_frequency(result, [m["baseline"], m["subject"]], m["polarization"], [0.0])
    for trace in fig.data:
        assert len(trace.x) <= figures.MAX_POINTS
    # the 0-degree bare trace equals 10 log10 |A|^2 of the result over the valid band
    bare = result.targets[m["baseline"]].sigma.sel(polarization=m["polarization"], angle=0.0).values
    np.testing.assert_allclose(fig.data[0].y, 10 * np.log10(bare[result.valid_mask]))


def test_report_command_from_the_store(run_dir, tmp_path):
    from cloakrcs.cli import main

    root, _ = run_dir
    url = f"sqlite:///{tmp_path / 'runs.db'}"
    outcome = run_process(root / "manifest.toml", tmp_path / "out", store_url=url)
    assert outcome.run_id is not None
    out = tmp_path / "stored.html"
    assert main(["report", str(outcome.run_id), "--store", url, "--out", str(out)]) == 0
    page = BeautifulSoup(out.read_text(encoding="utf-8"), "html.parser")
    summary = json.loads(outcome.paths["summary"].read_text(encoding="utf-8"))
    rows = page.find(id="summary-table").find("tbody").find_all("tr")
    assert [float(tr.find("td", attrs={"data-key": "band_reduction_db"})["data-value"]) for tr in rows] == \
        [m["band_reduction_db"] for m in summary["metrics"]]
    assert len(plotly_bundle_scripts(page)) == 1
    assert_no_external_reference(page)
    assert main(["report", "999999", "--store", url, "--out", str(tmp_path / "none.html")]) == 2


def test_static_export_png_and_pdf(run_dir, tmp_path):
    if report.find_chromium() is None:
        skip_or_fail("Chromium (Debian's chromium) is needed for PNG/PDF export")
    try:
        import kaleido  # noqa: F401
    except ImportError:
        skip_or_fail("kaleido (extra 'export') is needed for PNG export")
    _, outcome = run_dir
    specs = [s for s in report.build_figures(outcome.result, None) if s.figure is not None][:2]
    paths = report.export_png(specs, tmp_path / "png")
    assert [p.name for p in paths] == [f"{s.id}.png" for s in specs]
    for p in paths:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, section 5.2)
    pdf = report.export_pdf(outcome.paths["report"], tmp_path / "report.pdf")
    assert pdf.read_bytes()[:5] == b"%PDF-"  # PDF header (ISO 32000-1, section 7.5.2)
    assert pdf.stat().st_size > 20_000
