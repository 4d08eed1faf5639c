"""Manifest and campaign validation: every problem is one line naming the file and what is wrong."""

from __future__ import annotations

import json
import re
import shutil

import numpy as np
import pytest

from cloakrcs.campaign import inspect_campaign, load_campaign, wrap_angle_deg
from cloakrcs.cli import main
from cloakrcs.constants import C0
from cloakrcs.errors import InputError

from conftest import point_echo, write_s1p


def edit(manifest, old, new, count=1):
    text = manifest.read_text()
    assert old in text, old
    manifest.write_text(text.replace(old, new, count))
    return manifest


def problems_of(manifest):
    _, problems, warnings = inspect_campaign(manifest)
    return [str(p) for p in problems], warnings


def only_problem(manifest, *fragments):
    """The campaign has problems, one of which names the manifest/file and holds every fragment."""
    msgs, _ = problems_of(manifest)
    assert msgs, "expected a problem"
    hits = [m for m in msgs if all(f in m for f in fragments)]
    assert hits, msgs
    for m in msgs:
        assert "\n" not in m
    with pytest.raises(InputError):
        load_campaign(manifest)
    return hits[0]


def test_valid_campaign_loads(tiny_campaign):
    camp = load_campaign(tiny_campaign)
    bare = camp.cube("bare")
    assert bare.data.dims == ("polarization", "angle", "repeat", "frequency")
    assert bare.polarizations == ["HH", "VV"]
    np.testing.assert_array_equal(bare.angles_deg, [-5.0, 0.0, 5.0])
    assert camp.cube("empty").n_repeats == 2
    assert len(camp.file_hashes) == 4 + 2 + 6 + 6
    # the values read are those written (round trip through the Touchstone text)
    f = camp.frequency_hz
    np.testing.assert_allclose(bare.data.sel(polarization="VV", angle=0.0).values[0], point_echo(f, 4.2, 0.3), rtol=1e-9)
    nets = bare.to_networks()
    assert len(nets) == 6
    msgs, warnings = problems_of(tiny_campaign)
    assert msgs == []


def test_wrap_angles():
    # README, The processing chain, conventions: angles wrapped to (-180, 180]
    np.testing.assert_array_equal(wrap_angle_deg([0, 360, 180, -180, 190, -190, 540]), [0, 0, 180, 180, -170, 170, 180])


def test_invalid_toml_names_line(tiny_campaign):
    edit(tiny_campaign, 'range_m = 4.2', 'range_m = = 4.2')
    msg = only_problem(tiny_campaign, str(tiny_campaign), "invalid TOML")
    assert re.search(r"manifest\.toml:\d+: ", msg)


@pytest.mark.parametrize("old,new,fragment", [
    ('role = "subject"\nfiles = "raw/bare', 'role = "target"\nfiles = "raw/bare', "'role' = 'target' is not one of"),
    ('size_m = 0.3', 'size_m = 0.3\ncolour = "red"', "unknown key 'colour'"),
    ('name = "r1"', 'name = "bare"', "duplicate target name 'bare'"),
    ('range_m = 4.2\n', '\n', "missing required key 'range_m'"),
    ('shape = "sphere"', 'shape = "blob"', "unknown shape 'blob'"),
    ('radius_m = 0.05\n', '\n', "missing required key 'radius_m'"),
    ('baseline = "bare"', 'baseline = "cal-sphere"', "is a reference, not a subject"),
])
def test_manifest_problems(tiny_campaign, old, new, fragment):
    edit(tiny_campaign, old, new)
    msg = only_problem(tiny_campaign, str(tiny_campaign), fragment)
    assert re.match(re.escape(str(tiny_campaign)) + r"(:\d+)?: ", msg)


def test_no_background_is_a_warning_not_a_problem(tiny_campaign):
    # processing by the gate alone is allowed (tests/test_like_for_like.py processes it)
    edit(tiny_campaign, 'role = "background"', 'role = "subject"')
    msgs, warnings = problems_of(tiny_campaign)
    assert not any("no background target" in m for m in msgs)
    assert any("no background target" in w for w in warnings)


def test_pattern_matches_nothing(tiny_campaign):
    edit(tiny_campaign, "raw/r1_{pol}_{angle}.s1p", "raw/r9_{pol}_{angle}.s1p")
    only_problem(tiny_campaign, str(tiny_campaign), "target r1", "matches no file")


def test_two_files_same_angle_without_repeat(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    shutil.copy(raw / "bare_HH_+000.0.s1p", raw / "bare_HH_0.s1p")
    only_problem(tiny_campaign, "target bare", "two files for HH at 0 deg", "{repeat}")


def test_angles_coincide_once_wrapped(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    for pol in ("HH", "VV"):
        shutil.copy(raw / f"bare_{pol}_+000.0.s1p", raw / f"bare_{pol}_360.0.s1p")
    only_problem(tiny_campaign, "target bare", "angles coincide once wrapped")


def test_malformed_touchstone_names_data_file_and_line(tiny_campaign):
    bad = tiny_campaign.parent / "raw" / "r1_VV_+005.0.s1p"
    lines = bad.read_text().splitlines()
    lines[5] = lines[5] + " 0.5"  # an extra value on one data row
    bad.write_text("\n".join(lines) + "\n")
    msg = only_problem(tiny_campaign, str(bad))
    assert f"{bad}:6:" in msg


def test_frequency_grids_differ(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    f2 = np.linspace(8e9, 12e9, 801)
    for pol in ("HH", "VV"):
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", f2, point_echo(f2, 4.2, 0.1))
    msg = only_problem(tiny_campaign, "target r1", "frequency grid", "801 points", "401 points")
    assert "r1_" in msg


def test_grid_differs_within_target(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    f2 = np.linspace(8e9, 12.1e9, 401)
    write_s1p(raw / "r1_VV_+005.0.s1p", f2, point_echo(f2, 4.2, 0.1))
    only_problem(tiny_campaign, str(raw / "r1_VV_+005.0.s1p"), "frequency grid", "differs")


def test_non_uniform_grid(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    f2 = np.linspace(8e9, 12e9, 401)
    f2[50] += 1e5
    for pol in ("HH", "VV"):
        write_s1p(raw / f"sphere_{pol}.s1p", f2, point_echo(f2, 4.2, 0.1))
    only_problem(tiny_campaign, "sphere_HH.s1p", "uniform")


def test_background_coverage(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    f = np.linspace(8e9, 12e9, 401)
    for p in raw.glob("empty_*"):
        p.unlink()
    for pol in ("HH", "VV"):
        for ang in (0.0, 5.0):
            write_s1p(raw / f"empty_{pol}_{ang:+06.1f}.s1p", f, point_echo(f, 1.0, 0.01))
    edit(tiny_campaign, "raw/empty_{pol}_{repeat}.s1p", "raw/empty_{pol}_{angle}.s1p")
    only_problem(tiny_campaign, "target bare", "background empty has neither a sweep at every angle", "-5 deg")


def test_background_missing_polarization(tiny_campaign):
    for p in (tiny_campaign.parent / "raw").glob("empty_HH_*"):
        p.unlink()
    only_problem(tiny_campaign, "background empty has no HH sweep")


def test_reference_missing_polarization(tiny_campaign):
    (tiny_campaign.parent / "raw" / "sphere_HH.s1p").unlink()
    edit(tiny_campaign, 'radius_m = 0.05', 'radius_m = 0.05\ncalibrates = ["HH", "VV"]')
    only_problem(tiny_campaign, "target cal-sphere", "no sweep for HH")


def test_baseline_does_not_cover(tiny_campaign):
    (tiny_campaign.parent / "raw" / "bare_VV_+005.0.s1p").unlink()
    (tiny_campaign.parent / "raw" / "bare_HH_+005.0.s1p").unlink()
    only_problem(tiny_campaign, "target r1", "baseline bare does not cover angle 5 deg")


def test_reference_without_shape(tiny_campaign):
    edit(tiny_campaign, 'shape = "sphere"\nradius_m = 0.05\n', '')
    only_problem(tiny_campaign, "target cal-sphere", "needs a 'shape'")


def test_calibrates_null_channel(tiny_campaign):
    # Lee & Pottier BSA dihedral matrix: at roll 45 deg HH = VV = 0
    edit(tiny_campaign, 'shape = "sphere"\nradius_m = 0.05\n',
         'shape = "dihedral"\nfold_m = 0.2\nface_m = 0.15\nroll_deg = 45.0\ncalibrates = ["HH"]\n')
    only_problem(tiny_campaign, "target cal-sphere", "cannot calibrate HH", "null")


def test_echo_parameter_differs(tiny_campaign):
    edit(tiny_campaign, 'size_m = 0.3', 'size_m = 0.3\nparameter = "S21"')
    only_problem(tiny_campaign, "target bare", "parameter S21 needs more than 1 ports")


def test_echo_parameter_differs_from_background(tmp_path):
    from cloakrcs import touchstone

    f = np.linspace(8e9, 12e9, 401)
    raw = tmp_path / "raw"
    raw.mkdir()
    s = np.zeros((401, 2, 2), complex)
    s[:, 1, 0] = point_echo(f, 4.2, 0.1)
    s[:, 0, 0] = point_echo(f, 4.2, 0.1)
    for name in ("empty", "sphere", "bare"):
        touchstone.write_touchstone(raw / f"{name}.s2p", f, s)
    (tmp_path / "m.toml").write_text("""
[campaign]
name = "p"
[chamber]
range_m = 4.2
[[target]]
name = "empty"
role = "background"
files = "raw/empty.s2p"
[[target]]
name = "sphere"
role = "reference"
shape = "sphere"
radius_m = 0.05
files = "raw/sphere.s2p"
[[target]]
name = "bare"
role = "subject"
parameter = "S11"
files = "raw/bare.s2p"
""")
    msgs, _ = problems_of(tmp_path / "m.toml")
    assert any("target bare" in m and "differs from its background empty" in m for m in msgs), msgs
    assert any("target bare" in m and "differs from reference sphere" in m for m in msgs), msgs


def test_gate_past_unambiguous_range(tiny_campaign):
    # unambiguous range c0 / (2 df) (README, The processing chain, step 2, standard FFT sampling)
    df = 4e9 / 400
    unamb = C0 / (2 * df)
    edit(tiny_campaign, "span_m = 0.6", f"span_m = 0.6\ncenter_m = {unamb - 0.1:.3f}")
    only_problem(tiny_campaign, "gate far edge", "unambiguous range")


def test_warnings(tiny_campaign):
    edit(tiny_campaign, "range_m = 4.2", "range_m = 4.2\nbistatic_deg = 15.0")
    edit(tiny_campaign, "size_m = 0.3", "size_m = 1.0")
    edit(tiny_campaign, "span_m = 0.6", "span_m = 0.1")
    msgs, warnings = problems_of(tiny_campaign)
    assert msgs == []
    text = "\n".join(warnings)
    # far field 2 D^2 / lambda (common practice): D = 1 m at 12 GHz is 80 m, beyond the 4.2 m range
    assert "far field distance 2 D^2/lambda = 80.06 m" in text
    assert "bistatic angle 15 deg" in text
    assert "does not hold both the sphere's specular echo" in text


def test_inspect_cli_json(tiny_campaign, capsys):
    assert main(["inspect", str(tiny_campaign), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    names = {t["name"]: t for t in out["targets"]}
    assert names["bare"]["n_files"] == 6
    assert names["bare"]["polarizations"] == ["HH", "VV"]
    assert names["bare"]["angles_deg"] == [-5.0, 0.0, 5.0]
    assert names["empty"]["frequency_hz"] == {"start": 8e9, "stop": 12e9, "points": 401}
    # down-range resolution c0 / (2 B) (README, The processing chain, step 2)
    assert out["resolution_m"] == pytest.approx(C0 / (2 * 4e9))


def test_inspect_cli_text_and_exit_status(tiny_campaign, capsys):
    assert main(["inspect", str(tiny_campaign)]) == 0
    out = capsys.readouterr().out
    assert "down-range resolution" in out and "cal-sphere" in out and "problems: 0" in out
    edit(tiny_campaign, 'role = "subject"\nfiles = "raw/bare', 'role = "nothing"\nfiles = "raw/bare')
    (tiny_campaign.parent / "raw" / "sphere_HH.s1p").write_bytes(b"\x00\x01binary")
    assert main(["inspect", str(tiny_campaign)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) >= 2
    assert all(line.startswith(str(tiny_campaign.parent)) for line in err)
    assert "Traceback" not in "\n".join(err)


def test_missing_manifest_one_line(tmp_path, capsys):
    assert main(["inspect", str(tmp_path / "nope.toml")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.endswith("manifest not found") and "\n" not in err


def test_empty_and_non_utf8_manifest(tmp_path, capsys):
    (tmp_path / "e.toml").write_bytes(b"")
    assert main(["inspect", str(tmp_path / "e.toml")]) == 2
    assert "manifest is empty" in capsys.readouterr().err
    (tmp_path / "l.toml").write_bytes("[campaign]\nname = 'caf\xe9'\n".encode("latin-1"))
    assert main(["inspect", str(tmp_path / "l.toml")]) == 2
    assert "l.toml:2: manifest is not UTF-8" in capsys.readouterr().err
