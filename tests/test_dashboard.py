"""Dashboard layouts and callbacks (dashboard/), without a browser."""

from __future__ import annotations

import io
import json
import stat
import threading
import zipfile
from pathlib import Path

import numpy as np
import plotly.io as pio
import pytest

from cloakrcs.campaign import load_campaign
from cloakrcs.errors import InputError
from cloakrcs.process import process_campaign
from cloakrcs.dashboard import upload as U
from cloakrcs.dashboard.app import create_app
from cloakrcs.dashboard.callbacks import Views, parse_parameters
from cloakrcs.dashboard.data import MemorySource
from cloakrcs.dashboard.jobs import JobManager
from cloakrcs.dashboard.layout import VIEWS

SAMPLE = Path(__file__).resolve().parents[1] / "sample_measurements" / "manifest.toml"


@pytest.fixture(scope="module")
def sample():
    if not SAMPLE.exists():
        pytest.skip("sample campaign not generated")
    campaign = load_campaign(SAMPLE)
    return campaign, process_campaign(campaign)


@pytest.fixture
def views(sample):
    src = MemorySource()
    run_id = src.add(*sample)
    return Views(src), run_id


def _ids(component) -> set:
    out = set()
    stack = [component]
    while stack:
        c = stack.pop()
        if c is None or isinstance(c, (str, int, float)):
            continue
        if isinstance(c, (list, tuple)):
            stack.extend(c)
            continue
        if getattr(c, "id", None):
            out.add(c.id)
        stack.append(getattr(c, "children", None))
    return out


def _text(component) -> str:
    return json.dumps(json.loads(pio.json.to_json_plotly(component)), ensure_ascii=False)


def test_layout_has_eight_views_and_caution(sample):
    src = MemorySource()
    src.add(*sample)
    app = create_app(src)
    page = app.layout()
    ids = _ids(page)
    for needed in ("run", "caution", "tabs", "upload", "fig-profile", "fig-rcs-freq", "fig-red-map", "fig-trend",
                   "rev-table", "fig-safety", "gate-interval", "gate-cancel", "fig-img", "fig-img-diff",
                   "img-tracks", "fig-bi-polar", "fig-bi-extinction"):
        assert needed in ids
    assert [label for _k, label in VIEWS] == ["Campaign", "Range & gate", "RCS", "Reduction", "Revisions", "Images",
                                             "Bistatic", "RF safety"]
    assert "local regulations" in _text(page).lower()  # the caution sits outside the tabs: visible on every view


def test_rcs_vs_frequency_shows_stored_values(views, sample):
    v, rid = views
    _c, r = sample
    fig = v.rcs_frequency(rid, ["bare", "r3"], "HH", [0.0])
    names = [t.name for t in fig.data]
    assert "bare 0°" in names and "r3 0°" in names
    trace = fig.data[names.index("bare 0°")]
    # dBsm = 10 log10(sigma / 1 m^2) (IEEE Std 686 radar definitions, from memory); recomputed here with numpy
    sig = np.abs(r.targets["bare"].amplitude.sel(polarization="HH", angle=0.0).values[r.valid_mask]) ** 2
    np.testing.assert_allclose(np.asarray(trace.y, float), 10 * np.log10(sig), rtol=1e-9)
    assert len(trace.x) <= 2000


def test_controls_change_figures(views):
    v, rid = views
    assert v.rcs_frequency(rid, ["bare"], "HH", [0.0]).layout.title.text.endswith("HH")
    assert v.rcs_frequency(rid, ["bare"], "VV", [0.0]).layout.title.text.endswith("VV")
    polar = v.rcs_polar(rid, ["bare", "r1"], "VV", [10e9])
    assert len(polar.data) == 2
    m = v.rcs_map(rid, "bare", "HH")
    z = np.asarray(m.data[0].z)
    assert z.shape[0] <= 200 and z.shape[1] <= 400
    fig_check, fig_floor, fig_cov = v.campaign_figures(rid, "VV")
    assert "VV" in fig_check.layout.title.text and "VV" in fig_floor.layout.title.text


def test_reduction_view_marks_bounds_and_band_average(views, sample):
    v, rid = views
    _c, r = sample
    limited = [m for m in r.metrics if m["bound"] != "none"]
    subject, pol = (limited[0]["subject"], limited[0]["polarization"]) if limited else ("r3", "HH")
    curve, fmap, facts = v.reduction(rid, subject, pol)
    row = next(m for m in r.metrics if m["subject"] == subject and m["polarization"] == pol)
    assert any(f"{row['band_reduction_db']:.2f}" in (a.text or "") for a in curve.layout.annotations)
    if limited:
        assert any(t.name == "floor-limited" for t in fmap.data)
    assert f"{row['band_reduction_db']:.2f} ± {row['band_reduction_uncertainty_db']:.2f} dB" in _text(facts)
    # the budget beside the number: every component, the combined and the expanded uncertainty (GUM layout)
    text = _text(facts)
    for c in row["uncertainty_budget"]["band_reduction_db"]["components"]:
        assert c["component"] in text
    assert "expanded uncertainty (k = 2)" in text


def test_campaign_summary_lists_targets_and_check(views, sample):
    v, rid = views
    summary, warn = v.campaign_summary(rid)
    text = _text(summary)
    for name in sample[1].targets:
        assert name in text
    assert "check-sphere" in text and "pass" in text


def test_range_profile_draws_the_gate(views):
    v, rid = views
    fig = v.range_profile(rid, "bare", "HH", 0.0, 4.4, 0.4, "hann")
    gate = [t for t in fig.data if (t.name or "").startswith("gate")]
    assert gate and "4.400" in gate[0].name
    # the gate's -6 dB (0.5) points sit at centre +/- span/2 (flat-topped gate, README, The processing chain, step 2)
    x, y = np.asarray(gate[0].x), np.asarray(gate[0].y)
    inside = x[y >= 0.5]
    assert inside.min() == pytest.approx(4.2, abs=0.03) and inside.max() == pytest.approx(4.6, abs=0.03)


def test_regate_in_background_then_keep(views):
    v, rid = views
    job = v.start_regate(rid, "bare", 4.3, 0.4, "hann", "*")
    v.jobs._jobs[job]  # registered
    for _ in range(600):
        if v.job_status(job)[1] != "running":
            break
        threading.Event().wait(0.05)
    assert v.job_status(job)[1] == "done"
    new = v.jobs.get(job).value
    assert new.settings["window"] == "hann"
    assert all(g["span_m"] == 0.4 for g in new.settings["gates"].values())
    fig, table = v.preview(job, "bare", "HH", 0.0)
    assert [t.name for t in fig.data] == ["stored run", "new settings"]
    new_id = v.keep(job)
    assert new_id != rid and v.source.result(new_id) is new


def test_job_cancel_and_failure_keep_the_server_alive():
    jobs = JobManager()
    go = threading.Event()

    def slow(tick):
        for i in range(1000):
            go.wait(0.01)
            tick(f"step {i}")

    job = jobs.start("test", 1000, slow)
    jobs.cancel(job)
    for _ in range(300):
        if jobs.get(job).state != "running":
            break
        threading.Event().wait(0.01)
    assert jobs.get(job).state == "cancelled"

    def bad(_tick):
        raise InputError("no such target", "m.toml", 3)

    job = jobs.start("test", 1, bad)
    for _ in range(300):
        if jobs.get(job).state != "running":
            break
        threading.Event().wait(0.01)
    assert jobs.get(job).state == "failed" and jobs.get(job).error == "m.toml:3: no such target"


def test_revision_notes_and_parameters_are_saved(views):
    v, rid = views
    fig, table, proto = v.revisions(rid, "band_reduction_db")
    assert [row["revision"] for row in table] == ["R1", "R2", "R3"]
    assert len(fig.data) == 2  # HH and VV
    new = [dict(row) for row in table]
    new[0]["note"] = "seam taped"
    new[1]["parameters"] = "thickness_mm = 1.8; mu_loss = 1.0"
    assert "R1" in v.edit_revisions(rid, new, table)
    info = {i["revision"]: i for i in v.source.revision_info("mast sleeve")}
    assert info["R1"]["note"] == "seam taped"
    assert info["R2"]["parameters"] == {"thickness_mm": "1.8", "mu_loss": "1.0"}
    with pytest.raises(InputError):
        parse_parameters("thickness")


def test_safety_view(views):
    v, _rid = views
    out, fig = v.safety(40, 20, 2.0, 10.0, "general public")
    # S = P G / (4 pi r^2) = 10 * 100 / (16 pi) = 19.9 W/m^2 (far-field formula), 10 W/m^2 public level
    # (ICNIRP 2020 Table 5, from memory): 199 %
    assert "19.9 W/m²" in _text(out) and "199 %" in _text(out)
    assert "above the reference level in this far-field estimate" in _text(out)
    out, _fig = v.safety(40, 20, 2.0, 0.01, "general public")
    assert "outside 30 MHz-300 GHz" in _text(out)
    # the default 1 m is inside a 20 dBi horn's far-field distance at 10 GHz: 2 D^2 / lambda = 1.2 m with
    # G = 0.5 (pi D / lambda)^2 (aperture gain, Balanis, Antenna Theory; from memory)
    out, fig = v.safety(30, 20, 1.0, 10.0, "general public")
    assert "near field" in _text(out) and "1.22 m" in _text(out)
    assert "below the reference level in this far-field estimate" in _text(out)
    assert "compliant" not in _text(out)
    assert any("far-field distance" in (tr.name or "") for tr in fig.data)
    out, _fig = v.safety(30, 20, 1.0, 10.0, "general public", 0.05)  # a given aperture: 2 D^2/lambda = 0.17 m
    assert "Near field:" not in _text(out) and "Beyond the far-field distance" in _text(out)


# ---------------------------------------------------------------- upload

def _zip(files: dict[str, bytes], symlink: str | None = None) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in files.items():
            zf.writestr(name, data)
        if symlink:
            info = zipfile.ZipInfo(symlink)
            info.external_attr = (stat.S_IFLNK | 0o777) << 16  # how Info-ZIP stores a link (APPNOTE 4.4.15)
            zf.writestr(info, "/etc/passwd")
    return buf.getvalue()


def _campaign_zip(folder: Path, prefix: str = "") -> bytes:
    return _zip({prefix + str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()})


def test_upload_adds_a_campaign(tiny_campaign, tmp_path):
    import base64

    src = MemorySource(tmp_path / "uploads")
    v = Views(src)
    data = _campaign_zip(tiny_campaign.parent, "tiny/")
    job = v.start_upload("data:application/zip;base64," + base64.b64encode(data).decode(), "tiny.zip")
    for _ in range(600):
        if v.job_status(job)[1] != "running":
            break
        threading.Event().wait(0.05)
    assert v.job_status(job)[1] == "done", v.job_status(job)
    run_id = v.jobs.get(job).value
    assert src.result(run_id).campaign == "tiny"
    assert len(list((tmp_path / "uploads").iterdir())) == 1


@pytest.mark.parametrize("files, symlink, message", [
    ({"../evil.txt": b"x"}, None, "escapes the upload folder"),
    ({"/etc/evil.txt": b"x"}, None, "absolute path"),
    ({"manifest.toml": b""}, "raw/link.s1p", "symbolic link"),
    ({"manifest.toml": b"0" * (4 * 1024 * 1024)}, None, "compression ratio"),
    ({"readme.txt": b"hello"}, None, "no manifest.toml"),
])
def test_upload_refuses_unsafe_zips(tmp_path, files, symlink, message):
    with pytest.raises(InputError) as err:
        U.unpack_campaign(_zip(files, symlink), tmp_path, "bad.zip")
    assert message in str(err.value) and "\n" not in str(err.value)
    assert not (tmp_path / "evil.txt").exists() and not Path("/etc/evil.txt").exists()


def test_upload_size_limits(tmp_path, monkeypatch):
    monkeypatch.setattr(U, "MAX_UNCOMPRESSED_BYTES", 1000)
    with pytest.raises(InputError, match="unpack to"):
        U.unpack_campaign(_zip({"manifest.toml": b"a" * 2000}), tmp_path, "big.zip")
    with pytest.raises(InputError, match="not a zip"):
        U.unpack_campaign(b"PK not really", tmp_path, "x.zip")
    with pytest.raises(InputError, match=r"\.zip"):
        U.unpack_campaign(b"", tmp_path, "x.tar")


def test_upload_bad_manifest_gives_the_command_line_message(tiny_campaign, tmp_path):
    text = tiny_campaign.read_text().replace('role = "reference"', 'role = "refrence"')
    tiny_campaign.write_text(text)
    with pytest.raises(InputError) as cli_err:
        load_campaign(tiny_campaign)  # what `cloakrcs process` prints
    with pytest.raises(InputError) as err:
        U.unpack_campaign(_campaign_zip(tiny_campaign.parent), tmp_path / "up", "bad.zip")
    assert err.value.message == cli_err.value.message
    assert str(err.value).startswith("bad.zip:manifest.toml:")


def test_upload_manifest_cannot_reach_outside_its_folder(tiny_campaign, tmp_path):
    # an uploaded manifest may not read files elsewhere on the server (DEVELOPERS.md, "Security")
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    (outside / "secret.s1p").write_text("# Hz S RI R 50\n1 0 0\n2 0 0\n")
    for pattern in ("../../elsewhere/secret.s1p", str(outside / "secret.s1p")):
        text = tiny_campaign.read_text().replace("raw/bare_{pol}_{angle}.s1p", pattern)
        tiny_campaign.write_text(text)
        with pytest.raises(InputError) as err:
            U.unpack_campaign(_campaign_zip(tiny_campaign.parent), tmp_path / "up", "evil.zip")
        assert "outside" in str(err.value) or "must be relative" in str(err.value)
        tiny_campaign.write_text(text.replace(pattern, "raw/bare_{pol}_{angle}.s1p"))


# ---------------------------------------------------------------- store and serve

def test_dashboard_over_a_sqlite_store(tiny_campaign, tmp_path):
    from cloakrcs import store

    url = "sqlite:///" + (tmp_path / "results.sqlite").as_posix()
    campaign = load_campaign(tiny_campaign)
    run_id = store.record_run(url, campaign, process_campaign(campaign))
    app = create_app(url)
    v = app.views
    assert [o["value"] for o in v.run_options()] == [run_id]
    fig = v.range_profile(run_id, "bare", "HH", 0.0, 4.2, 0.6, "kaiser")  # campaign rebuilt from the store
    assert any((t.name or "").startswith("gate") for t in fig.data)
    assert v.source.upload_root == tmp_path / "uploads"
    fig, table, _p = v.revisions(run_id, "bandwidth_hz")
    assert [row["revision"] for row in table] == ["R1"]


def test_serve_binds_loopback_by_default():
    from cloakrcs.cli import build_parser

    args = build_parser().parse_args(["serve"])
    assert (args.host, args.port) == ("127.0.0.1", 8050)
    args = build_parser().parse_args(["serve", "--host", "0.0.0.0", "--port", "9000", "--store", "x.sqlite"])
    assert (args.host, args.port, args.store) == ("0.0.0.0", 9000, "x.sqlite")


def test_images_view_shows_image_difference_and_tracked_centres(sample):
    # The view draws what cloakrcs.imaging computes: the peak of the shown image is the engine's peak
    # pixel in dBsm, and the tracked-centre table lists the run's revisions (bare first).
    import numpy as np

    from cloakrcs import imaging

    src = MemorySource()
    run_id = src.add(*sample)
    app = create_app(src)
    iv = app.views.images
    opts, default, pols, pol = iv.controls(run_id)
    assert default == "r1" and pol == "VV" and {"bare", "r1", "r2", "r3"} <= {o["value"] for o in opts}
    fig, base, diff, change, centres, tracks, status = iv.images(run_id, "r3", "VV", "-15:15", None, 30, "auto")
    img = imaging.image_of_result(sample[1], "r3", "VV", (-15, 15))
    heat = fig.data[0]
    assert np.nanmax(np.asarray(heat.z, dtype=float)) == pytest.approx(float(np.max(img.rcs_dbsm)), abs=1e-6)
    assert heat.zmax - heat.zmin == pytest.approx(30)
    assert "Difference r3 - bare" in diff.layout.title.text and "Change" in change.layout.title.text
    text = _text(tracks)
    assert "bare (dBsm)" in text and "R3 (dBsm)" in text
    assert "resolution" in status
    bad = iv.images(run_id, "r3", "VV", "40:41", None, 30, "auto")
    assert "needs at least 3" in bad[-1]
