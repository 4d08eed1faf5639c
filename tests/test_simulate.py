"""Chamber simulator (cloakrcs.simulate) and the sample campaign (sample_measurements/)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from cloakrcs import references
from cloakrcs.commands import simulate as simulate_command
from cloakrcs.constants import C0
from cloakrcs.errors import InputError
from cloakrcs.simulate import (format_angle, load_simulation_config, model_amplitude, normalise_config,
                               simulate_campaign)
from cloakrcs.touchstone import read_touchstone

SAMPLE = Path(__file__).resolve().parents[1] / "sample_measurements"


def small_config(**over) -> dict:
    cfg = {
        "seed": 7,
        "polarizations": ["HH", "VV"],
        "campaign": {"name": "unit"},
        "chamber": {"range_m": 3.0, "offset_m": 0.4},
        "sweep": {"start_ghz": 8.0, "stop_ghz": 12.0, "points": 101},
        "system": {"gain_db": -20.0, "slope_db_per_ghz": -0.5, "ripple_db": 0.2, "phase_deg": 10.0},
        "coupling": {"level_db": -3.0},
        "clutter": [{"range_m": 5.0, "level_dbsm": -5.0}],
        "support": {"level_dbsm": -40.0, "change": 0.05},
        "noise": {"level_db": -60.0},
        "drift": {"amplitude_db": 0.02, "phase_deg": 0.2, "length_m": 1e-5},
        "gate": {"span_m": 0.5},
        "output": {"digits": 12},
        "target": [
            {"name": "empty", "role": "background", "repeats": 2},
            {"name": "sphere", "role": "reference", "model": "sphere", "radius_m": 0.05, "repeats": 2},
            {"name": "bare", "role": "subject", "model": "bare_cylinder", "radius_m": 0.04, "length_m": 0.2,
             "angles": {"start": 0, "stop": 20, "step": 10}, "size_m": 0.2},
            {"name": "r1", "role": "subject", "model": "coated_cylinder", "radius_m": 0.04, "length_m": 0.2,
             "thickness_m": 0.0015, "eps_r": [12.0, -0.3], "mu_r": [1.5, -1.2], "baseline": "bare",
             "revision": "R1", "angles": {"start": 0, "stop": 20, "step": 10},
             "seam": {"azimuth_deg": 10.0, "width_m": 0.002}},
        ],
    }
    cfg.update(over)
    return cfg


def ideal_config() -> dict:
    """No noise, no clutter, no coupling, no support, no drift, G = 1."""
    cfg = small_config()
    for key in ("system", "coupling", "support", "noise", "drift"):
        cfg.pop(key)
    cfg["clutter"] = []
    cfg["system"] = {"gain_db": 0.0}
    cfg["output"] = {"digits": 17}
    return cfg


def _all_bytes(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_same_seed_gives_identical_bytes_and_another_seed_differs(tmp_path):
    a = simulate_campaign(small_config(), tmp_path / "a")
    simulate_campaign(small_config(), tmp_path / "b")
    simulate_campaign(small_config(seed=8), tmp_path / "c")
    ba, bb, bc = (_all_bytes(tmp_path / x) for x in "abc")
    assert ba == bb
    assert len(a.files) == 2 * 2 + 2 * 2 + 2 * 3 * 2
    assert ba["raw/bare_HH_010.0.s1p"] != bc["raw/bare_HH_010.0.s1p"]
    assert ba["manifest.toml"] == bc["manifest.toml"]


def test_ideal_chamber_gives_the_signal_model_exactly(tmp_path):
    # README, Signal model with G = 1, C = c_i = n = 0: S = A exp(-j 2 k (R + offset)) / R^2
    res = simulate_campaign(ideal_config(), tmp_path)
    f = res.frequency_hz
    k = 2 * np.pi * f / C0
    R, off = 3.0, 0.4
    got = read_touchstone(tmp_path / "raw" / "sphere_VV_1.s1p")
    a = references.sphere_amplitude(f, 0.05)
    np.testing.assert_allclose(got.frequency_hz, np.linspace(8e9, 12e9, 101), rtol=1e-15)
    np.testing.assert_allclose(got.s[:, 0, 0], a * np.exp(-2j * k * (R + off)) / R ** 2, rtol=1e-13)
    # the magnitude is the Mie series of miepython 3.3 (PEC as m = -1000j; qback = sigma / (pi a^2))
    miepython = pytest.importorskip("miepython")
    i = 50
    qback = miepython.efficiencies_mx(-1000j, k[i] * 0.05)[2]
    assert abs(np.abs(got.s[i, 0, 0]) ** 2 * R ** 4 / (np.pi * 0.05 ** 2) - qback) < 2e-3 * qback
    empty = read_touchstone(tmp_path / "raw" / "empty_HH_2.s1p")
    assert np.all(empty.s == 0)
    bare = read_touchstone(tmp_path / "raw" / "bare_HH_020.0.s1p").s[:, 0, 0]
    model = model_amplitude(normalise_config(ideal_config())["target"][2], f, [20.0], "HH")[0]
    np.testing.assert_allclose(bare, model * np.exp(-2j * k * (R + off)) / R ** 2, rtol=1e-13)


def test_written_files_read_back_give_the_model(tmp_path):
    res = simulate_campaign(small_config(), tmp_path)
    f, k = res.frequency_hz, 2 * np.pi * res.frequency_hz / C0
    # the difference of a target and a background sweep, with noise and drift small, is the echo
    tgt = read_touchstone(tmp_path / "raw" / "r1_VV_010.0.s1p").s[:, 0, 0]
    bg = read_touchstone(tmp_path / "raw" / "empty_VV_1.s1p").s[:, 0, 0]
    g = 10 ** ((-20.0 - 0.5 * (f - 10e9) / 1e9) / 20) * np.exp(1j * np.deg2rad(10.0)) * (
        1 + (10 ** (0.2 / 20) - 1) * np.exp(-2j * np.pi * f / 0.25e9))
    echo = res.amplitudes["r1"]["VV"][1] * np.exp(-2j * k * 3.4) / 9.0
    err = np.abs((tgt - bg) / g - echo) / np.abs(echo)
    # residual: coupling x drift (~ 0.7 x 0.005) and noise, against an echo of ~ 0.01
    assert np.median(err) < 0.5
    # scikit-rf 2.2 reads the same file to the same values
    skrf = pytest.importorskip("skrf")
    net = skrf.Network(str(tmp_path / "raw" / "r1_VV_010.0.s1p"))
    np.testing.assert_allclose(net.s[:, 0, 0], tgt, rtol=1e-10)
    np.testing.assert_allclose(net.f, f, rtol=1e-12)


def test_clutter_level_in_equivalent_dbsm_and_noise_level(tmp_path):
    cfg = ideal_config()
    cfg["clutter"] = [{"range_m": 6.0, "level_dbsm": -10.0}]
    simulate_campaign(cfg, tmp_path / "c")
    s = read_touchstone(tmp_path / "c" / "raw" / "empty_HH_1.s1p").s[:, 0, 0]
    np.testing.assert_allclose(np.abs(s), math.sqrt(0.1) / 36.0, rtol=1e-12)  # sqrt(10^(L/10)) / r^2
    cfg = ideal_config()
    cfg["noise"] = {"level_db": -40.0}
    cfg["sweep"]["points"] = 2001
    simulate_campaign(cfg, tmp_path / "n")
    d = read_touchstone(tmp_path / "n" / "raw" / "empty_VV_1.s1p").s[:, 0, 0]
    rms = np.sqrt(np.mean(np.abs(d) ** 2))
    assert 0.9e-2 < rms < 1.1e-2  # complex Gaussian, rms |G| 10^(-40/20); 2001 samples: +-5 % at 3 sigma


def test_two_port_setup_carries_the_echo_in_s21(tmp_path):
    cfg = ideal_config()
    cfg["sweep"]["ports"] = 2
    res = simulate_campaign(cfg, tmp_path)
    t = read_touchstone(tmp_path / "raw" / "sphere_HH_1.s2p")
    assert t.s.shape == (101, 2, 2)
    np.testing.assert_array_equal(t.s[:, 1, 0], t.s[:, 0, 1])
    k = 2 * np.pi * res.frequency_hz / C0
    np.testing.assert_allclose(t.s[:, 1, 0], references.sphere_amplitude(res.frequency_hz, 0.05)
                               * np.exp(-2j * k * 3.4) / 9.0, rtol=1e-13)
    assert np.all(np.abs(t.s[:, 0, 0]) < 0.2)
    assert 'parameter = "S21"' in (tmp_path / "manifest.toml").read_text()


def test_manifest_is_read_by_the_campaign_loader(tmp_path):
    simulate_campaign(small_config(), tmp_path)
    from cloakrcs.campaign import inspect_campaign
    campaign, problems, warnings = inspect_campaign(tmp_path / "manifest.toml")
    assert not problems, problems
    assert campaign.cube("bare").data.sizes["angle"] == 3
    assert campaign.cube("empty").n_repeats == 2
    assert campaign.manifest.target("r1").baseline == "bare"


def test_planning_printout_has_far_field_and_floor(tmp_path, capsys):
    cfg_path = tmp_path / "sim.toml"
    cfg_path.write_text(
        'seed = 3\n[chamber]\nrange_m = 2.0\n[sweep]\nstart_ghz = 8.0\nstop_ghz = 12.0\npoints = 51\n'
        '[noise]\nlevel_db = -50.0\n'
        '[[target]]\nname = "empty"\nrole = "background"\n'
        '[[target]]\nname = "ref"\nrole = "reference"\nmodel = "sphere"\nradius_m = 0.05\n'
        '[[target]]\nname = "bare"\nrole = "subject"\nmodel = "bare_cylinder"\nradius_m = 0.04\n'
        'length_m = 0.3\nangle_deg = 0.0\n')

    class Args:
        config = str(cfg_path)
        out = str(tmp_path / "out")

    assert simulate_command.run(Args()) == 0
    text = capsys.readouterr().out
    # far field 2 D^2 / lambda at the top frequency (common practice): D = 0.3 m, 12 GHz -> 7.21 m
    far = 2 * 0.3 ** 2 / (C0 / 12e9)
    assert f"{far:.2f} m" in text and "NEAR FIELD" in text
    assert "2 D^2/lambda" in text and "floor" in text and "SCR" in text
    line = next(ln for ln in text.splitlines() if ln.startswith("bare") and " VV " in ln)
    med, floor, scr = (float(x) for x in line.split()[3:6])
    assert abs(med - floor - scr) < 0.11


@pytest.mark.parametrize("patch, text", [
    ({"colour": 1}, "unknown key 'colour'"),
    ({"sweep": {"start_ghz": 8.0, "stop_ghz": 12.0, "points": 11, "span": 3}}, "unknown key 'span'"),
    ({"chamber": {}}, "range_m"),
])
def test_bad_config_raises_input_error_naming_the_file(tmp_path, patch, text):
    base = ('[chamber]\nrange_m = 2.0\n[sweep]\nstart_ghz = 8.0\nstop_ghz = 12.0\npoints = 11\n'
            '[[target]]\nname = "empty"\nrole = "background"\n')
    import tomllib
    raw = tomllib.loads(base)
    raw.update(patch)
    with pytest.raises(InputError, match=text):
        normalise_config(raw, tmp_path / "x.toml")
    path = tmp_path / "bad.toml"
    path.write_text(base + '[[target]]\nname = "t"\nrole = "subject"\nmodel = "coated_cylinder"\n'
                    'radius_m = 0.04\nlength_m = 0.2\nthickness_m = 0.001\neps_r = [4.0, 1.0]\n')
    with pytest.raises(InputError) as err:
        load_simulation_config(path)
    assert str(err.value).startswith(str(path)) and "imaginary" in str(err.value)


def test_angle_field_format():
    assert [format_angle(a) for a in (0.0, 5.0, -30.0, 355.0, 12.5)] == ["000.0", "005.0", "-30.0", "355.0", "012.5"]


# ------------------------------------------------------------------ the sample campaign
def test_sample_campaign_layout_and_size():
    cfg = load_simulation_config(SAMPLE / "config.toml")
    files = [p for p in SAMPLE.rglob("*") if p.is_file()]
    assert sum(p.stat().st_size for p in files) < 15e6
    f = np.linspace(cfg["sweep"]["start_ghz"], cfg["sweep"]["stop_ghz"], cfg["sweep"]["points"]) * 1e9
    assert f.size >= 201
    unamb = C0 / (2 * (f[1] - f[0]))  # c0 / (2 df), README, The processing chain, step 2
    assert unamb >= 2 * cfg["chamber"]["range_m"]
    names = {t["name"]: t for t in cfg["target"]}
    assert sum(t["role"] == "subject" and "revision" in t for t in cfg["target"]) >= 3
    assert len(names["bare"]["angles"]) == 72 and names["empty"]["repeats"] >= 2
    assert len(list((SAMPLE / "raw").glob("bare_VV_*.s1p"))) == 72
    assert (SAMPLE / "manifest.toml").is_file() and (SAMPLE / "README.md").is_file()


def test_sample_truth_matches_a_fresh_evaluation_of_the_model():
    cfg = load_simulation_config(SAMPLE / "config.toml")
    names = {t["name"]: t for t in cfg["target"]}
    rcs = pd.read_csv(SAMPLE / "truth" / "rcs.csv")
    assert list(rcs.columns) == ["target", "polarization", "angle_deg", "frequency_hz", "rcs_dbsm"]
    picks = rcs.sample(12, random_state=1)
    for row in picks.itertuples():
        amp = model_amplitude(names[row.target], [row.frequency_hz], [row.angle_deg], row.polarization)[0, 0]
        assert abs(10 * np.log10(abs(amp) ** 2) - row.rcs_dbsm) < 6e-4
    red = pd.read_csv(SAMPLE / "truth" / "reduction.csv")
    assert list(red.columns) == ["subject", "baseline", "polarization", "angle_deg", "frequency_hz", "reduction_db"]
    # the band-averaged reduction (README, The processing chain, step 6: linear sums over band and angles, then dB) from rcs.csv
    metrics = json.loads((SAMPLE / "truth" / "metrics.json").read_text())
    lo, hi = (x * 1e9 for x in metrics["band_ghz"])
    band = rcs[(rcs.frequency_hz >= lo - 1) & (rcs.frequency_hz <= hi + 1)]
    for name, entry in metrics["subjects"].items():
        for pol, value in entry["band_averaged_reduction_db"].items():
            s = (10 ** (band[(band.target == name) & (band.polarization == pol)].rcs_dbsm / 10)).sum()
            b = (10 ** (band[(band.target == entry["baseline"]) & (band.polarization == pol)].rcs_dbsm / 10)).sum()
            assert abs(10 * np.log10(b / s) - value) < 2e-3
    values = [v for e in metrics["subjects"].values() for v in e["band_averaged_reduction_db"].values()]
    assert min(values) > 3 and max(values) < 25


def test_sample_campaign_is_exactly_what_its_config_makes(tmp_path):
    """The committed sample is the seeded output of its own config: re-simulating gives the same bytes."""
    simulate_campaign(load_simulation_config(SAMPLE / "config.toml"), tmp_path)
    for rel in ("manifest.toml", "truth/metrics.json", "raw/empty_HH_4.s1p", "raw/r3_VV_355.0.s1p",
                "raw/cal-sphere_VV_3.s1p"):
        assert (tmp_path / rel).read_bytes() == (SAMPLE / rel).read_bytes(), rel
