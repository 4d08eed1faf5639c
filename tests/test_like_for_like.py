"""Comparisons a user can trust, and nothing silent (README, Results store and revisions; Commands).

Small campaigns of point echoes (tests/conftest.py): every test here runs the command or the
engine on a campaign with one thing wrong and checks the one line that says so.
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest

from cloakrcs import metrics, store
from cloakrcs.campaign import inspect_campaign, load_campaign
from cloakrcs.cli import main
from cloakrcs.errors import InputError
from cloakrcs.pipeline import describe_metric
from cloakrcs.process import ProcessSettings, process_campaign
from cloakrcs.spans import parse_span
from conftest import point_echo, write_s1p

FREQ = np.linspace(8e9, 12e9, 401)


def edit(manifest, old, new):
    text = manifest.read_text()
    assert old in text, old
    manifest.write_text(text.replace(old, new, 1))
    return manifest


def run_cli(capsys, *argv):
    status = main([str(a) for a in argv])
    out = capsys.readouterr()
    return status, out.out, out.err


@pytest.fixture
def url(tmp_path):
    u = "sqlite:///" + (tmp_path / "store.sqlite").as_posix()
    yield u
    store.close_store(u)


# ---------------------------------------------------------------- printing what is (not) known

def test_quiet_hides_the_progress_bar_not_the_results(tiny_campaign, tmp_path, capsys):
    status, out, _ = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store", "--no-report",
                             "--quiet")
    assert status == 0
    assert "r1 vs bare VV: band reduction" in out


def test_undetermined_reduction_is_printed_as_undetermined():
    row = {"subject": "r1", "baseline": "bare", "polarization": "HV", "bound": "undetermined",
           "band_reduction_db": 0.0, "band_reduction_uncertainty_db": 0.3, "best_reduction_db": 0.0,
           "best_frequency_hz": 1e10, "bandwidth_hz": 0.0}
    text = describe_metric(row)
    assert "band reduction undetermined" in text and "0.00 +/-" not in text
    from cloakrcs.commands.history import format_history

    hist = format_history([{**row, "prototype": "p", "revision": "R1", "date": None, "worst_angle_deg": 0.0,
                            "worst_angle_reduction_db": 0.0, "check_error_db": None, "campaign": "c", "run_id": 1}])
    assert "undetermined" in hist and "0.00 +/-" not in hist


def test_sector_contents_are_printed_and_stored(tiny_campaign, tmp_path, capsys):
    # 3:-3 runs from 3 deg up through 180 to -3 deg: of -5, 0, 5 it holds 5 and -5 only
    status, out, _ = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store", "--no-report",
                             "--sector-deg", "3:-3")
    assert status == 0
    assert "sector 3:-3 deg (2 angles, 5 to -5 deg through 180 deg)" in out
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    m = summary["metrics"][0]
    assert m["sector_angles"] == 2 and m["sector_crosses_180"] and m["sector_range_deg"] == [5.0, -5.0]
    assert m["sector_deg"] == [3.0, -3.0] and m["band_hz"] == summary["settings"]["reporting_band_hz"]
    assert metrics.describe_sector([-5, 0, 5], (-30, 30))["text"] == "3 angles, -5 to 5 deg"


def test_band_messages_at_the_place_given(tiny_campaign, tmp_path, capsys):
    # the valid band of 8-12 GHz data gated over 0.6 m is 8.25-11.75 GHz (trim c0 / (2 span))
    status, _, err = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store",
                             "--no-report", "--band-ghz", "10:14")
    assert status == 0
    assert "warning: --band-ghz 10-14 GHz reaches beyond the valid band 8.25-11.75 GHz: the metrics use " \
           "10-11.75 GHz" in err
    status, _, err = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o2", "--no-store",
                             "--band-ghz", "14:13")
    assert status == 2 and err.count("\n") == 1
    assert "--band-ghz '14:13': START must be below STOP" in err and "manifest" not in err
    status, _, err = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o3", "--no-store",
                             "--band-ghz", "20:22")
    assert status == 2 and err.startswith("cloakrcs: --band-ghz 20-22 GHz lies outside the measured frequencies")
    # a [band] outside the data: a problem of the manifest's [band] line, found by inspect
    edit(tiny_campaign, "[gate]", "[band]\nstart_ghz = 20\nstop_ghz = 22\n\n[gate]")
    _, problems, _ = inspect_campaign(tiny_campaign)
    line = tiny_campaign.read_text().splitlines().index("[band]") + 1
    assert [str(p) for p in problems] == [f"{tiny_campaign}:{line}: [band] 20-22 GHz lies outside the measured "
                                          f"frequencies 8-12 GHz"]


def test_subject_missing_a_polarization_of_its_baseline_is_a_warning(tiny_campaign):
    for p in (tiny_campaign.parent / "raw").glob("r1_VV_*.s1p"):
        p.rename(p.with_name(p.name.replace("r1_VV", "r1-VV")))  # misnamed: the pattern no longer sees them
    campaign = load_campaign(tiny_campaign)
    assert any("target r1: no VV sweeps although its baseline bare has them" in w for w in campaign.warnings)


def test_stray_polarization_file_is_named(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    shutil.copy(raw / "bare_VV_+000.0.s1p", raw / "bare_VH_+000.0.s1p")
    _, problems, _ = inspect_campaign(tiny_campaign)
    msg = next(str(p) for p in problems if "target bare" in str(p))
    assert "bare_VH_+000.0.s1p introduces polarization VH, which no other file of the target has" in msg
    assert "missing" not in msg


def test_one_port_data_in_an_s2p_file_is_explained(tmp_path):
    from cloakrcs.touchstone import read_touchstone

    path = write_s1p(tmp_path / "sweep.s1p", FREQ[:9], np.ones(9, complex)).rename(tmp_path / "sweep.s2p")
    with pytest.raises(InputError, match="as a one-port file does .* must be named .s1p"):
        read_touchstone(path)


def test_echo_outside_its_gate_is_found_by_inspect_and_process(tiny_campaign, tmp_path, capsys):
    # every echo arrives 0.8 m late: a reference-plane offset (cables) the manifest forgot
    raw = tiny_campaign.parent / "raw"
    for pol in ("HH", "VV"):
        write_s1p(raw / f"sphere_{pol}.s1p", FREQ, point_echo(FREQ, 5.0, 0.1))
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"bare_{pol}_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 5.0, 0.3))
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 5.0, 0.1))
    status, out, _ = run_cli(capsys, "inspect", tiny_campaign)
    hits = [ln for ln in out.splitlines() if "echo peaks at" in ln]
    assert {h.split("target ")[1].split(":")[0] for h in hits} == {"cal-sphere", "bare"}
    assert all("5.000 m, outside its gate 3.900-4.500 m" in h and "--auto-gate" in h and "offset_m = +0.800" in h
               for h in hits)
    status, _, err = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store", "--no-report")
    assert "echo peaks at 5.000 m" in err
    # with the offset measured on the reference, the gates hold the echoes: no such warning
    campaign = load_campaign(tiny_campaign)
    res = process_campaign(campaign, ProcessSettings(auto_gate=True))
    # (the estimate adds the sphere's radius, its specular point leading its centre: 0.8 + 0.05 m here)
    assert res.settings["estimated_offset_m"] == pytest.approx(0.85, abs=0.01)
    assert not any("echo peaks" in w for w in res.warnings)


# ---------------------------------------------------------------- failed checks

def _add_check_target(manifest, amplitude):
    raw = manifest.parent / "raw"
    for pol in ("HH", "VV"):
        write_s1p(raw / f"check_{pol}.s1p", FREQ, point_echo(FREQ, 4.2, amplitude))
    manifest.write_text(manifest.read_text() + '\n[[target]]\nname = "check"\nrole = "subject"\nshape = "sphere"\n'
                                               'radius_m = 0.05\nfiles = "raw/check_{pol}.s1p"\n')


def test_failed_check_target_is_prominent(tiny_campaign, tmp_path, capsys):
    _add_check_target(tiny_campaign, 0.5)  # 14 dB above the sphere it claims to be
    status, out, err = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store")
    assert status == 0  # as documented: only --strict changes the exit status
    assert "*** CHECK TARGET FAILED: check HH: error 13.98 dB > tolerance 1 dB + expanded uncertainty" in err
    assert "max error 13.98 dB: the calibration or the gate is suspect ***" in err
    assert err.rstrip().splitlines()[-1].startswith("(exit status 0: use --strict")
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summary["check_failed"] is True and summary["failed_checks"] == ["check HH", "check VV"]
    assert any(w.startswith("CHECK TARGET FAILED: check VV") for w in summary["warnings"])
    html = (tmp_path / "o" / "report.html").read_text()
    assert 'id="check-failed"' in html and "CHECK TARGET FAILED: check HH" in html
    status, _, _ = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o2", "--no-store", "--no-report",
                           "--strict")
    assert status == 3


# ---------------------------------------------------------------- mounting offset (issue 12, correction 13)

def _lobes(angles, shift):
    a = np.radians(np.asarray(angles) - shift)
    return 10 * np.log10(1.1 + np.cos(3 * a)) + 3 * np.cos(a)


def test_mounting_offset_at_the_search_limit_or_uncorrelated_is_none():
    angles = np.arange(0, 360, 2.0)
    ok = metrics.assess_mounting_offset(angles, _lobes(angles, 0), _lobes(angles, 2.0))
    assert ok.offset_deg == pytest.approx(2.0, abs=0.3) and ok.reason is None
    far = metrics.assess_mounting_offset(angles, _lobes(angles, 0), _lobes(angles, 25.0))
    assert far.offset_deg is None and "search limit" in far.reason
    assert abs(far.raw_deg) == pytest.approx(10.0)  # what used to be printed
    rng = np.random.default_rng(3)
    weak = metrics.assess_mounting_offset(angles, _lobes(angles, 0), rng.standard_normal(angles.size))
    assert weak.offset_deg is None and "correlate too weakly" in weak.reason


def test_align_angles_says_it_did_nothing_and_why(tiny_campaign):
    res = process_campaign(load_campaign(tiny_campaign), ProcessSettings(align_angles=True))
    assert all(m["mounting_offset_deg"] is None and not m["angles_aligned"] for m in res.metrics)
    assert any("r1 VV: --align-angles did nothing: no reliable mounting offset against bare" in w
               for w in res.warnings)


# ---------------------------------------------------------------- like for like

def test_gate_span_mismatch_between_subject_and_baseline_is_warned(tiny_campaign):
    res = process_campaign(load_campaign(tiny_campaign), ProcessSettings(gate_overrides={"r1": {"span_m": 0.5}}))
    assert all("gated differently (span 0.5 m against 0.6 m)" in m["gate_mismatch"] for m in res.metrics)
    assert any("r1 and its baseline bare were gated differently" in w for w in res.warnings)
    assert all("WARNING: gated differently" in describe_metric(m) for m in res.metrics)


def _second_revision(tiny_campaign, name="tiny-2", amplitude=0.05):
    """A second campaign of the same prototype with revision R2 (files of its own)."""
    folder = tiny_campaign.parent / "second"
    raw = folder / "raw"
    for pol in ("HH", "VV"):
        for src in (tiny_campaign.parent / "raw").glob(f"*_{pol}*.s1p"):
            raw.mkdir(parents=True, exist_ok=True)
            if not src.name.startswith("r1"):
                shutil.copy(src, raw / src.name)
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 4.2, amplitude))
    text = tiny_campaign.read_text().replace('name = "tiny"', f'name = "{name}"').replace('"R1"', '"R2"')
    (folder / "manifest.toml").write_text(text)
    return folder / "manifest.toml"


def test_history_columns_compare_refusal_and_current_run(tiny_campaign, tmp_path, url, capsys):
    second = _second_revision(tiny_campaign)
    assert run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "a", "--store", url, "--no-report")[0] == 0
    assert run_cli(capsys, "process", second, "--out", tmp_path / "b", "--store", url, "--no-report",
                   "--sector-deg", "-5:0")[0] == 0
    status, out, _ = run_cli(capsys, "history", "--store", url)
    head = out.splitlines()[0]
    assert "band (GHz)" in head and "sector (deg)" in head
    r1 = next(ln for ln in out.splitlines() if " R1 " in ln)
    r2 = next(ln for ln in out.splitlines() if " R2 " in ln)
    assert "8.25-11.75" in r1 and "all" in r1 and "-5:0" in r2
    rows = store.history(url)
    assert len({r["settings_key"] for r in rows}) == 2
    # different sectors: compare refuses, in one line naming the difference
    status, _, err = run_cli(capsys, "compare", "R1", "R2", "--store", url)
    assert status == 2 and err.count("\n") == 1 and "sector (deg) all vs -5:0" in err and "--allow-different" in err
    status, out, _ = run_cli(capsys, "compare", "R1", "R2", "--store", url, "--allow-different")
    assert status == 0 and "WARNING: compared with --allow-different" in out and "sector (deg) all vs -5:0" in out
    # same settings: compared without a word; 20 log10(0.1 / 0.05) = 6.02 dB (point echoes, amplitude ratio)
    assert run_cli(capsys, "process", second, "--out", tmp_path / "c", "--store", url, "--no-report")[0] == 0
    diffs = store.compare(url, "R1", "R2")
    assert diffs[0]["settings_differ"] == [] and diffs[0]["difference_db"] == pytest.approx(20 * np.log10(2), abs=0.01)
    # choosing the current run of R2: the -5:0 run (2) again, so compare refuses again
    assert run_cli(capsys, "revision", "current", "test sleeve", "R2", "2", "--store", url)[0] == 0
    assert [r["run_id"] for r in store.history(url) if r["revision"] == "R2"] == [2, 2]
    with pytest.raises(InputError, match="processed differently"):
        store.compare(url, "R1", "R2")
    status, _, err = run_cli(capsys, "revision", "current", "test sleeve", "R2", "1", "--store", url)
    assert status == 2 and "run 1 holds no metrics of revision 'R2' (runs that do: 2, 3)" in err
    assert run_cli(capsys, "revision", "current", "test sleeve", "R2", "--newest", "--store", url)[0] == 0
    assert {r["run_id"] for r in store.history(url) if r["revision"] == "R2"} == {3}


def test_revision_note_on_unknown_revision_and_repeated_key_are_refused(tiny_campaign, tmp_path, url, capsys):
    assert run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "a", "--store", url, "--no-report")[0] == 0
    status, _, err = run_cli(capsys, "revision", "note", "test sleeve", "R9", "planned", "--store", url)
    assert status == 2 and err.count("\n") == 1 and "no revision 'R9' of prototype 'test sleeve' (known: R1)" in err
    assert [r["revision"] for r in store.revision_info(url)] == ["R1"]
    status, _, err = run_cli(capsys, "revision", "set", "test sleeve", "R1", "t_mm=1", "t_mm=2", "--store", url)
    assert status == 2 and "'t_mm' is given twice" in err
    assert store.revision_info(url)[0]["parameters"] == {}


def test_same_raw_files_under_a_second_manifest_are_announced_and_linked(tiny_campaign, tmp_path, url, capsys):
    assert run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "a", "--store", url, "--no-report")[0] == 0
    other = tiny_campaign.with_name("lab.toml")
    other.write_text(tiny_campaign.read_text().replace('name = "tiny"', 'name = "tiny as typed in the lab"'))
    status, out, _ = run_cli(capsys, "process", other, "--out", tmp_path / "b", "--store", url, "--no-report")
    n = len(load_campaign(tiny_campaign).file_hashes)
    assert f"these {n} files (of {n}) are already stored under campaign 'tiny' (id 1)" in out
    assert [r["linked_campaign_id"] for r in store.list_runs(url)] == [None, 1]


def test_processing_without_a_background_is_allowed_with_a_warning(tiny_campaign):
    text = tiny_campaign.read_text()
    start = text.index('[[target]]\nname = "empty"')
    tiny_campaign.write_text(text[:start] + text[text.index("[[target]]", start + 5):])
    _, problems, warnings = inspect_campaign(tiny_campaign)
    assert problems == []
    assert any("processing without background subtraction, by the time gate alone; clutter and coupling inside "
               "each gate remain" in w for w in warnings)
    res = process_campaign(load_campaign(tiny_campaign))
    # bare 0.3 vs r1 0.1 (amplitudes): 20 log10(3) = 9.54 dB, the coupling at 1 m lies outside the gates
    assert res.metrics[0]["band_reduction_db"] == pytest.approx(20 * np.log10(3), abs=0.01)
    assert res.settings["gates"]["r1"]["floor_method"].startswith("no background")


def test_sector_median_and_percentiles_in_summary(tiny_campaign, tmp_path, capsys):
    raw = tiny_campaign.parent / "raw"
    for k, ang in enumerate((-5.0, 0.0, 5.0)):  # a reduction that differs by angle: 3, 9.5 and 16 dB
        write_s1p(raw / f"r1_VV_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 4.2, 0.3 / 10 ** ((3 + 6.5 * k) / 20)))
    status, _, _ = run_cli(capsys, "process", tiny_campaign, "--out", tmp_path / "o", "--no-store",
                           "--percentiles", "25,75")
    assert status == 0
    m = next(r for r in json.loads((tmp_path / "o" / "summary.json").read_text())["metrics"]
             if r["polarization"] == "VV")
    import pandas as pd

    red = pd.read_csv(tmp_path / "o" / "reduction.csv")
    band = m["band_hz"]
    sel = red[(red.polarization == "VV") & (red.frequency_hz >= band[0]) & (red.frequency_hz <= band[1])]
    # numpy's percentile (linear interpolation) over the points of the band and sector
    for key, q in (("median", 50), ("p25", 25), ("p75", 75)):
        assert m["sector_reduction_db"][key] == pytest.approx(np.percentile(sel.reduction_db, q), abs=1e-3)
    assert m["sector_reduction_db"]["median"] == pytest.approx(9.5, abs=0.01)
    assert m["sector_rcs_dbsm"]["median"] is not None
    html = (tmp_path / "o" / "report.html").read_text()
    assert 'id="sector-statistics"' in html and "p25" in html


# ---------------------------------------------------------------- reference conventions

def test_reference_angles_by_count_or_by_step(capsys):
    np.testing.assert_allclose(parse_span("-30:30/0.5", "--angle-deg"), np.linspace(-30, 30, 121))
    np.testing.assert_allclose(parse_span("-30:30:121", "--angle-deg"), np.linspace(-30, 30, 121))
    with pytest.raises(InputError, match="whole, non-negative number of STEPs"):
        parse_span("0:10/3", "--angle-deg")
    status, out, err = run_cli(capsys, "reference", "trihedral", "--edge-m", "0.1", "--freq-ghz", "10",
                               "--angle-deg", "-10:10/5")
    assert status == 0 and len(out.splitlines()) == 1 + 5
    assert "angle-independent" in err
    values = {ln.split(",")[3] for ln in out.splitlines()[1:]}
    assert len(values) == 1  # the same peak value at every angle, which is what the warning says


def test_trihedral_reference_at_several_angles_is_warned(tiny_campaign):
    edit(tiny_campaign, 'shape = "sphere"\nradius_m = 0.05\nfiles = "raw/sphere_{pol}.s1p"',
         'shape = "trihedral"\nedge_m = 0.1\nfiles = "raw/bare_{pol}_{angle}.s1p"')
    _, _, warnings = inspect_campaign(tiny_campaign)
    assert any("the trihedral model is its peak RCS only, the same at every angle, but the target was measured "
               "at 3 angles" in w for w in warnings)


# ---------------------------------------------------------------- dashboard (views without a browser)

def test_dashboard_empty_states_floor_legend_paths_and_trend(tiny_campaign, tmp_path):
    from cloakrcs.dashboard import plots
    from cloakrcs.dashboard.callbacks import upload_relative
    from cloakrcs.dashboard.layout import build_layout

    page = build_layout([], None)

    def find(node, id_):
        if getattr(node, "id", None) == id_:
            return node
        for child in (getattr(node, "children", None) or []) if isinstance(getattr(node, "children", None), list) \
                else [getattr(node, "children", None)]:
            if child is not None and not isinstance(child, str):
                hit = find(child, id_)
                if hit is not None:
                    return hit
        return None

    for gid in ("fig-profile", "fig-preview", "fig-trend", "fig-red-map"):
        fig = find(page, gid).figure
        assert fig.layout.annotations and fig.layout.annotations[0].text.endswith(".")  # a sentence, not axes
    assert find(build_layout([{"label": "run 1", "value": 1}], 1), "empty-banner").style == {"display": "none"}
    res = process_campaign(load_campaign(tiny_campaign))
    floors = [t.name for t in plots.fig_floor(res, "VV").data if t.name.endswith("floor")]
    assert floors == ["bare floor", "r1 floor"] and all(t.showlegend is not False
                                                         for t in plots.fig_floor(res, "VV").data)
    root = tmp_path / "uploads"
    msg = f"{root}/0123456789abcdef/manifest.toml:24: target bare: range 4.2 m is short"
    assert upload_relative(msg, root) == "manifest.toml:24: target bare: range 4.2 m is short"
    rows = [{"revision": "R1", "polarization": "VV", "run_id": 1, "band_reduction_db": 9.0, "bound": "none",
             "band_reduction_uncertainty_db": 0.4, "settings_key": "aaaa", "settings_label": "sector all"},
            {"revision": "R2", "polarization": "VV", "run_id": 2, "band_reduction_db": 12.0, "bound": "lower",
             "band_reduction_uncertainty_db": 0.5, "settings_key": "aaaa", "settings_label": "sector all"},
            {"revision": "R2", "polarization": "VV", "run_id": 3, "band_reduction_db": 13.0, "bound": "none",
             "band_reduction_uncertainty_db": 0.5, "settings_key": "bbbb", "settings_label": "sector -20:20"}]
    fig = plots.fig_trend(rows, "band_reduction_db", "band-averaged reduction (dB)")
    lines = [t for t in fig.data if t.x and t.x[0] is not None]
    assert len(lines) == 2  # two settings groups, never joined
    first = next(t for t in lines if list(t.x) == ["R1", "R2"])
    assert list(first.error_y.array) == [0.4, 0.5] and list(first.marker.symbol) == ["circle", "triangle-up"]
    assert "sector all" in fig.layout.annotations[0].text and "sector -20:20" in fig.layout.annotations[0].text
