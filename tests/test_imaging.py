"""ISAR imaging (cloakrcs.imaging): calibration, geometry, resolution, Parseval, difference, CLEAN, tracking, CLI."""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest

from cloakrcs import imaging, load_campaign, process_campaign, scatterers, simulate, timedomain
from cloakrcs.constants import C0

POINTS = [{"x_m": 0.10, "y_m": 0.06, "rcs_dbsm": -20.0}, {"x_m": -0.08, "y_m": -0.07, "rcs_dbsm": -26.0},
          {"x_m": 0.0, "y_m": 0.0, "rcs_dbsm": -15.0}]
SPHERE_A = 0.1


def _config(points=POINTS, noise_db=-70.0):
    return {"seed": 5, "polarizations": ["VV"], "campaign": {"name": "pts", "prototype": "pts"},
            "chamber": {"range_m": 3.0}, "sweep": {"start_ghz": 8.0, "stop_ghz": 12.0, "points": 201},
            "angles": {"start": -12.0, "stop": 12.0, "step": 0.5}, "noise": {"level_db": noise_db},
            "gate": {"span_m": 0.6},
            "target": [{"name": "empty", "role": "background", "repeats": 4},
                       {"name": "cal", "role": "reference", "model": "sphere", "radius_m": 0.0762, "repeats": 2},
                       {"name": "pts", "role": "subject", "model": "points", "scatterers": points},
                       {"name": "twin", "role": "subject", "model": "points", "scatterers": points,
                        "baseline": "pts"},
                       {"name": "ball", "role": "subject", "model": "sphere", "radius_m": SPHERE_A}]}


@pytest.fixture(scope="module")
def chain(tmp_path_factory):
    """A simulated campaign of known point scatterers and a sphere, through the whole chain."""
    out = tmp_path_factory.mktemp("points")
    sim = simulate.simulate_campaign(_config(), out)
    campaign = load_campaign(sim.manifest_path)
    return sim, campaign, process_campaign(campaign)


def _synthetic(points, f, angles):
    return scatterers.points_amplitude(points, f, angles, "VV")


def test_point_scatterers_come_back_within_a_cell_and_1_db(chain):
    # Known truth: the positions and RCS given to the simulator; the amplitude is calibrated on a
    # sphere through the Mie series (miepython-checked references), so the dBsm scale is external.
    _sim, _c, result = chain
    for method in ("polar", "backprojection"):
        img = imaging.image_of_result(result, "pts", settings=imaging.ImageSettings(method=method))
        found = imaging.scattering_centres(img, 10)
        for p in POINTS:
            near = [c for c in found if math.hypot((c["down_range_m"] - p["x_m"]) / img.down_range_resolution_m,
                                                   (c["cross_range_m"] - p["y_m"]) / img.cross_range_resolution_m) <= 1]
            assert near, (method, p)
            best = max(near, key=lambda c: c["rcs_dbsm"])
            assert abs(best["rcs_dbsm"] - p["rcs_dbsm"]) < 1.0, (method, p, best)
            assert not best["floor_limited"]
        # the three points are the three strongest centres
        assert sorted(round(c["rcs_dbsm"]) for c in found[:3]) == [-26, -20, -15]


def test_cross_range_sign_follows_the_turntable(chain):
    # Geometry (plane rotation): a point on the side that moves towards the antenna as the angle
    # grows has a decreasing down-range; measured here on the raw range profiles, independently of
    # the imaging code, then the image must put that point at positive cross-range.
    sim, campaign, result = chain
    cube = campaign.cube("pts")
    f = campaign.frequency_hz
    one = [{"x_m": 0.0, "y_m": 0.12, "rcs_dbsm": -10.0}]
    amp = _synthetic(one, f, cube.angles_deg)
    k = 2 * np.pi * f / C0
    sweeps = amp * np.exp(-2j * k * 3.0)
    r_lo = timedomain.find_echo_range(f, sweeps[0], pad_factor=32)
    r_hi = timedomain.find_echo_range(f, sweeps[-1], pad_factor=32)
    assert r_hi < r_lo  # at +12 deg the point is nearer the antenna than at -12 deg
    assert abs((r_lo - r_hi) - 2 * 0.12 * math.sin(math.radians(12))) < 0.005
    img = imaging.make_image(amp, f, cube.angles_deg, gate_span_m=0.6)
    ix, iy = np.unravel_index(np.argmax(img.power), img.power.shape)
    assert img.y_m[iy] == pytest.approx(0.12, abs=img.cross_range_resolution_m / 4)
    assert img.x_m[ix] == pytest.approx(0.0, abs=img.down_range_resolution_m / 4)
    # the simulator's bolt (cloak_model: faces the antenna at turntable angle = its azimuth) agrees:
    # 20 deg past facing the antenna it is receding, so it images at negative cross-range
    from cloakrcs import cloak_model

    ang = np.arange(10.0, 30.01, 0.5)
    bolt = cloak_model.bolt_amplitude(f, ang, 0.05, 0.01, azimuth_deg=0.0)
    img = imaging.make_image(bolt, f, ang, gate_span_m=0.6)
    ix, iy = np.unravel_index(np.argmax(img.power), img.power.shape)
    assert img.y_m[iy] == pytest.approx(-0.05 * math.sin(math.radians(20)), abs=img.cross_range_resolution_m / 3)
    assert img.x_m[ix] == pytest.approx(-(0.05 * math.cos(math.radians(20)) + 0.01),
                                        abs=img.down_range_resolution_m / 3)


def test_sphere_images_at_its_specular_point(chain):
    # Geometric optics: a sphere's specular point lies a towards the antenna from its centre, with
    # sigma = pi a^2 in the optical region (Knott, Radar Cross Section Measurements; ka = 21 here);
    # the creeping wave (about pi a / 2 behind the centre) is resolved apart.
    _sim, _c, result = chain
    img = imaging.image_of_result(result, "ball")
    top = imaging.scattering_centres(img, 3)[0]
    assert top["down_range_m"] == pytest.approx(-SPHERE_A, abs=img.down_range_resolution_m / 4)
    assert top["cross_range_m"] == pytest.approx(0.0, abs=img.cross_range_resolution_m / 4)
    assert top["rcs_dbsm"] == pytest.approx(10 * math.log10(math.pi * SPHERE_A ** 2), abs=1.0)


def _width(x, p):
    p = p / p.max()
    i = int(np.argmax(p))
    j = i
    while p[j] >= 0.5:
        j += 1
    right = x[j - 1] + (p[j - 1] - 0.5) / (p[j - 1] - p[j]) * (x[j] - x[j - 1])
    j = i
    while p[j] >= 0.5:
        j -= 1
    left = x[j + 1] - (p[j + 1] - 0.5) / (p[j + 1] - p[j]) * (x[j + 1] - x[j])
    return right - left


@pytest.mark.parametrize("window", ["kaiser", "hann", "rect"])
def test_measured_widths_match_the_stated_resolutions(window):
    # Stated: down-range k_f c0/(2B), cross-range k_t lambda_c/(4 sin(dtheta/2)) -> lambda_c/(2 dtheta)
    # (Mensa, High Resolution Radar Cross-Section Imaging; Knott, Radar Cross Section Measurements),
    # k the window's -3 dB main-lobe width: 0.89 bins rectangular, 1.44 Hann (Harris 1978, Proc.
    # IEEE 66(1), Table 1; from memory).
    f = np.linspace(8e9, 12e9, 201)
    ang = np.arange(-10.0, 10.01, 0.25)
    amp = _synthetic([{"x_m": 0.0, "y_m": 0.0, "rcs_dbsm": -20.0}], f, ang)
    for method in ("polar", "backprojection"):
        img = imaging.make_image(amp, f, ang, imaging.ImageSettings(method=method, window=window, pad_factor=16),
                                 gate_span_m=0.5)
        ix, iy = np.unravel_index(np.argmax(img.power), img.power.shape)
        wx = _width(img.x_m, img.power[:, iy])
        wy = _width(img.y_m, img.power[ix, :])
        assert wx == pytest.approx(img.down_range_resolution_m, rel=0.05), method
        assert wy == pytest.approx(img.cross_range_resolution_m, rel=0.05), method
    lam_c = C0 / img.center_frequency_hz
    assert img.nominal_down_range_m == pytest.approx(C0 / (2 * 4e9))
    assert img.nominal_cross_range_m == pytest.approx(lam_c / (2 * math.radians(20)), rel=0.01)  # small sector
    expected_k = {"rect": 0.89, "hann": 1.44, "kaiser": None}[window]
    if expected_k:
        n = ang.size
        assert imaging.main_lobe_factor(imaging.window_samples(window, n)) * n / (n - 1) == pytest.approx(
            expected_k, abs=0.02)


def test_image_obeys_parseval_against_the_gated_data(chain):
    # Parseval's theorem (Oppenheim & Schafer, Discrete-Time Signal Processing): the image energy
    # sum |I|^2 dx dy equals the k-space energy of the windowed calibrated data, here summed over the
    # polar samples with their area element q dq dtheta, divided by (sum W dqx dqy)^2.
    _sim, _c, result = chain
    s = imaging.ImageSettings(method="polar")
    img = imaging.image_of_result(result, "pts", settings=s)
    t = result.targets["pts"]
    f = img.frequency_hz
    fm = np.isin(result.frequency_hz, f)
    a = t.amplitude.sel(polarization="VV").values[:, fm]
    wf, wt = imaging._weights(s, f.size, t.amplitude.angle.size)
    q = 2 * f / C0
    area = q[None, :] * (q[1] - q[0]) * math.radians(0.5)
    w = wt[:, None] * wf[None, :]
    k_energy = np.sum(np.abs(w * a) ** 2 * area) / np.sum(w * area) ** 2
    dx, dy = img.x_m[1] - img.x_m[0], img.y_m[1] - img.y_m[0]
    assert np.sum(img.power) * dx * dy == pytest.approx(k_energy, rel=0.02)


def test_difference_of_identical_targets_is_at_the_floor(chain):
    # Identical point sets measured twice: the complex difference holds only the two sweeps' noise,
    # whose mean power per pixel is the sum of the two image floors (GUM: independent noise adds in
    # power); where both images clear the floor by 30 dB, noise up to 10 times its mean power
    # (probability e^-10 per pixel for complex Gaussian noise) stays 20 dB under the signal, so the
    # change is within the interference bound 2 x 20 log10(1 + 10^(-20/20)) = 1.7 dB (common practice).
    _sim, _c, result = chain
    s_img = imaging.image_of_result(result, "twin")
    b_img = imaging.image_of_result(result, "pts", extent_m=s_img.settings.extent_m)
    d = imaging.difference(s_img, b_img)
    mean = np.mean(np.abs(d["difference"]) ** 2)
    assert 10 * math.log10(mean / d["floor_m2"]) == pytest.approx(0.0, abs=3.0)
    assert np.max(np.abs(d["difference"]) ** 2) < 10 ** (-4.0) * np.max(s_img.power)  # 40 dB under the peak
    strong = (s_img.power > 1000 * s_img.floor_m2) & (b_img.power > 1000 * b_img.floor_m2)
    assert strong.sum() > 50
    assert np.nanmax(np.abs(d["change_db"][strong])) < 1.7


def test_clean_stops_at_the_floor_and_flags_floor_limited_centres():
    # Hogbom (1974) CLEAN stopping rule tied to the floor: components stop once the residual peak is
    # below floor + stop margin; centres less than the floor margin above the floor are flagged.
    f = np.linspace(8e9, 12e9, 201)
    ang = np.arange(-10.0, 10.01, 0.5)
    pts = [{"x_m": 0.0, "y_m": 0.0, "rcs_dbsm": -20.0}, {"x_m": 0.1, "y_m": -0.08, "rcs_dbsm": -47.0}]
    amp = _synthetic(pts, f, ang)
    floor_pixel = 10 ** (-55 / 10)
    img = imaging.make_image(amp, f, ang, gate_span_m=0.5)
    img.floor_m2 = floor_pixel
    comps, res, stop = imaging.clean(img)
    assert stop == pytest.approx(floor_pixel * 10 ** 0.3)
    assert np.max(np.abs(res) ** 2) < stop
    found = imaging.scattering_centres(img, 5)
    weak = [c for c in found if abs(c["down_range_m"] - 0.1) < 0.03 and abs(c["cross_range_m"] + 0.08) < 0.03]
    assert weak and weak[0]["floor_limited"]  # 8 dB above the floor: within the 10 dB margin
    assert not found[0]["floor_limited"]


def test_tracking_matches_within_a_resolution_cell():
    cell = {"down_range_resolution_m": 0.05, "cross_range_resolution_m": 0.04}
    bare = [{"down_range_m": 0.07, "cross_range_m": -0.03, "rcs_dbsm": -14.0, **cell},
            {"down_range_m": -0.04, "cross_range_m": 0.0, "rcs_dbsm": -5.0, **cell}]
    r3 = [{"down_range_m": 0.08, "cross_range_m": -0.02, "rcs_dbsm": -27.0, **cell},  # within a cell
          {"down_range_m": -0.04, "cross_range_m": 0.10, "rcs_dbsm": -30.0, **cell}]  # 2.5 cells away: new
    tracks = imaging.track_centres([{"revision": "bare", "centres": bare}, {"revision": "R3", "centres": r3}])
    by_pos = {(round(t["down_range_m"], 2), round(t["cross_range_m"], 2)): t for t in tracks}
    assert by_pos[(0.07, -0.03)]["values"]["R3"]["rcs_dbsm"] == -27.0
    assert "R3" not in by_pos[(-0.04, 0.0)]["values"]
    assert set(by_pos[(-0.04, 0.10)]["values"]) == {"R3"}
    text = imaging.describe_tracks(tracks, ["bare", "R3"])
    assert any("(+0.070, -0.030) m went from -14.0 dBsm in bare to -27.0 dBsm in R3" in t for t in text)


def _cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "cloakrcs.cli", *args], capture_output=True, text=True, cwd=cwd,
                          timeout=300)


def test_cli_image_writes_the_contract(chain, tmp_path):
    import xarray as xr

    sim, _c, _r = chain
    out = tmp_path / "img"
    p = _cli("image", str(sim.manifest_path), "--target", "twin", "--pol", "VV", "--sector-deg", "-10:10",
             "--scatterers", "4", "--out", str(out))
    assert p.returncode == 0, p.stderr
    lines = (out / "scatterers.csv").read_text().splitlines()
    assert lines[0].startswith("target,polarization,down_range_m,cross_range_m,rcs_dbsm,")
    assert len(lines) == 1 + 4
    top = lines[1].split(",")
    assert top[:2] == ["twin", "VV"] and float(top[4]) == pytest.approx(-15.0, abs=1.0)
    ds = xr.open_dataset(out / "image.nc", engine="scipy")
    assert ds["rcs_dbsm"].dims == ("down_range_m", "cross_range_m")
    assert ds["down_range_m"].attrs["units"] == "m" and ds["rcs_dbsm"].attrs["units"] == "dBsm"
    assert ds.attrs["down_range_resolution_m"] > 0 and ds.attrs["cross_range_resolution_m"] > 0
    assert ds.attrs["sector_start_deg"] == pytest.approx(-10) and "change_db" in ds  # baseline 'pts'
    ds.close()
    assert "<script>" in (out / "image.html").read_text()[:5_000_000]
    bad = _cli("image", str(sim.manifest_path), "--target", "nope", "--out", str(tmp_path / "x"))
    assert bad.returncode == 2 and "no target 'nope'" in bad.stderr and len(bad.stderr.strip().splitlines()) == 1
    both = _cli("image", "--target", "twin", "--out", str(tmp_path / "y"))
    assert both.returncode == 2 and "MANIFEST or --run" in both.stderr


def test_process_stores_centres_and_history_tracks_them(chain, tmp_path):
    from cloakrcs import store

    _sim, campaign, result = chain
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    run_id = store.record_run(url, campaign, result)
    loaded = store.load_result(url, run_id)["result"]
    assert len(loaded.centres) == len(result.centres) > 0
    assert {c["target"] for c in loaded.centres} == {"pts", "twin", "ball"}
    rows = store.centres(url, "pts")
    assert rows and rows[0]["run_id"] == run_id
    p = _cli("history", "pts", "--centres", "--store", url)
    assert p.returncode == 0, p.stderr
    assert "scattering centres" in p.stdout and "pts" in p.stdout and "twin" in p.stdout
    p = _cli("image", "--run", str(run_id), "--target", "pts", "--store", url, "--out", str(tmp_path / "r"))
    assert p.returncode == 0, p.stderr
