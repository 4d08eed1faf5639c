"""Analytic references against published formulas, limits and reference libraries."""

from __future__ import annotations

import argparse

import miepython
import numpy as np
import pytest
from scipy import integrate, special

from cloakrcs.commands import reference as reference_cmd
from cloakrcs.constants import C0
from cloakrcs.errors import InputError
from cloakrcs.references import (
    cylinder2d_amplitude,
    cylinder2d_echo_width,
    cylinder_amplitude,
    dihedral_amplitude,
    dihedral_matrix,
    disk_amplitude,
    load_table_reference,
    plate_amplitude,
    rcs_dbsm,
    reference_amplitude,
    required_keys,
    sphere_amplitude,
    theory_is_null,
    trihedral_amplitude,
)
from cloakrcs.spans import parse_span


def freq_for_ka(ka, a):
    return np.asarray(ka, dtype=float) * C0 / (2 * np.pi * a)


# ----------------------------------------------------------------------------- sphere
def test_sphere_matches_miepython_within_0p01_db():
    a = 0.05
    ka = np.geomspace(0.05, 100, 600)
    sigma = np.abs(sphere_amplitude(freq_for_ka(ka, a), a)) ** 2
    # miepython 3: a perfect conductor is an index with real part <= 0; qback = sigma / (pi a^2)
    qback = np.array([miepython.efficiencies_mx(-1000j, x)[2] for x in ka])
    err_db = 10 * np.log10(sigma / (np.pi * a * a * qback))
    assert np.max(np.abs(err_db)) < 0.01


def test_sphere_extremes_are_finite_and_near_their_limits():
    a = 0.05
    amp = sphere_amplitude(freq_for_ka([0.01, 300.0], a), a)
    assert np.all(np.isfinite(amp))
    k = 0.01 / a
    # Rayleigh limit sigma = 9 pi a^2 (ka)^4 (Mahafza & Elsherbeni eq. 11.27-11.30; Ruck);
    # its phase: electric plus magnetic dipole back-scatter, +(3/2) k^2 a^3 (derived, Jackson ch. 10)
    assert abs(rcs_dbsm(amp[0]) - 10 * np.log10(9 * np.pi * a * a * 0.01 ** 4)) < 0.01
    assert abs(np.angle(amp[0])) < 1e-3
    rayleigh = np.sqrt(4 * np.pi) * 1.5 * k * k * a ** 3
    assert abs(amp[0] / rayleigh - 1) < 1e-3
    # optical limit pi a^2 (same sources); GO phase: specular point at R - a, reflection -1
    go = -np.sqrt(np.pi) * a * np.exp(2j * 300.0)
    assert abs(rcs_dbsm(amp[1]) - 10 * np.log10(np.pi * a * a)) < 0.05
    assert abs(np.angle(amp[1] / go)) < 0.02


def test_sphere_resonance_peak_near_ka_1():
    a = 1.0
    ka = np.linspace(0.5, 2.0, 1501)
    q = np.abs(sphere_amplitude(freq_for_ka(ka, a), a)) ** 2 / (np.pi * a * a)
    # first resonance peak about 3.65 pi a^2 near ka = 1 (Ruck, Radar Cross Section Handbook;
    # Mahafza & Elsherbeni fig. 11.x, from memory for the exact ka)
    assert 3.6 < q.max() < 3.7
    assert 0.9 < ka[np.argmax(q)] < 1.1


def test_sphere_echoes_in_time_domain():
    # signal model exp(+j w t): A(f) exp(+j 2 k a) is an echo 2a/c0 early (README, Signal model);
    # specular point at -2a/c0, creeping wave about +pi a/c0 after the centre (Knott,
    # Shaeffer & Tuley, creeping waves; from memory)
    a = 0.1
    f = np.linspace(0.2e9, 30e9, 2000)
    amp = sphere_amplitude(f, a) * np.hanning(f.size)
    t = np.arange(-2e-9, 2.5e-9, 1e-12)
    h = np.abs(np.exp(2j * np.pi * np.outer(t, f)) @ amp)
    t_spec = t[np.argmax(h)]
    assert abs(t_spec - (-2 * a / C0)) < 5e-12
    late = t > 0.3e-9
    t_creep = t[late][np.argmax(h[late])]
    assert 0.95 * np.pi * a / C0 < t_creep < 1.15 * np.pi * a / C0


# ----------------------------------------------------------------------------- plate, disk
def test_plate_normal_incidence_and_first_null():
    w, h, f = 0.2, 0.15, 10e9
    lam = C0 / f
    t_null = np.degrees(np.arcsin(lam / (2 * w)))
    amp = plate_amplitude([f], [0.0, t_null / 2, t_null, 180.0], w, h)
    # Knott, Shaeffer & Tuley PO plate: sigma = 4 pi A^2 / lambda^2 at normal incidence (from memory)
    assert abs(rcs_dbsm(amp[0, 0]) - 10 * np.log10(4 * np.pi * (w * h) ** 2 / lam ** 2)) < 1e-9
    # flat plate phase -j: geometrical optics for a plane (the sphere's -1 with its two
    # Fresnel factors exp(-j pi/4) removed; derived)
    assert abs(np.angle(amp[0, 0]) + np.pi / 2) < 1e-12
    # first pattern null at sin t = lambda / (2 w) (same source)
    assert abs(amp[2, 0]) < 1e-12 * abs(amp[0, 0])
    assert abs(amp[1, 0]) > 0.3 * abs(amp[0, 0])
    assert abs(amp[3, 0] - amp[0, 0]) < 1e-12 * abs(amp[0, 0])  # the back face


def test_disk_normal_value_and_first_null():
    a, f = 0.1, 12e9
    lam, k = C0 / f, 2 * np.pi * f / C0
    j1_zero = special.jn_zeros(1, 1)[0]  # first zero of J1, scipy.special
    t_null = np.degrees(np.arcsin(j1_zero / (2 * k * a)))
    amp = disk_amplitude([f], [0.0, 10.0, t_null], a)
    # Mahafza & Elsherbeni eq. 11.35: 4 pi^3 a^4 / lambda^2 at normal incidence
    assert abs(rcs_dbsm(amp[0, 0]) - 10 * np.log10(4 * np.pi ** 3 * a ** 4 / lam ** 2)) < 1e-9
    # eq. 11.37 off normal: pi k^2 a^4 cos^2 t [2 J1(2ka sin t)/(2ka sin t)]^2
    t = np.radians(10.0)
    u = 2 * k * a * np.sin(t)
    expected = np.pi * k * k * a ** 4 * np.cos(t) ** 2 * (2 * special.j1(u) / u) ** 2
    assert abs(np.abs(amp[1, 0]) ** 2 / expected - 1) < 1e-9
    assert abs(amp[2, 0]) < 1e-9 * abs(amp[0, 0])


# ----------------------------------------------------------------------------- cylinders
def _po_cylinder_broadside(f, a, L):
    """Physical-optics surface integral over the lit half of a cylinder at broadside, with the
    kernel that gives a flat plate -j 2 sqrt(pi) area / lambda (Knott PO; derived)."""
    k, lam = 2 * np.pi * f / C0, C0 / f
    re = integrate.quad(lambda p: np.cos(p) * np.cos(2 * k * a * np.cos(p)), -np.pi / 2, np.pi / 2, limit=400)[0]
    im = integrate.quad(lambda p: np.cos(p) * np.sin(2 * k * a * np.cos(p)), -np.pi / 2, np.pi / 2, limit=400)[0]
    return -2j * np.sqrt(np.pi) / lam * L * a * (re + 1j * im)


def test_finite_cylinder_broadside_large_ka():
    a, L = 0.05, 0.5
    f = freq_for_ka(100.0, a)
    lam = C0 / f
    expected_db = 10 * np.log10(2 * np.pi * a * L * L / lam)  # Mahafza & Elsherbeni eq. 11.48
    flat = cylinder_amplitude([f], [0.0], a, L, "flat", "VV")[0, 0]
    up_vv = cylinder_amplitude([f], [0.0, 40.0], a, L, "upright", "VV")
    up_hh = cylinder_amplitude([f], [0.0], a, L, "upright", "HH")[0, 0]
    assert abs(rcs_dbsm(flat) - expected_db) < 1e-9
    assert abs(rcs_dbsm(up_vv[0, 0]) - expected_db) < 0.05
    assert abs(rcs_dbsm(up_hh) - expected_db) < 0.1
    assert up_vv[0, 0] == up_vv[1, 0]  # upright: broadside at every turntable angle
    # phase against the PO surface integral: -exp(+j pi/4) sqrt(2 pi a L^2/lambda) exp(+j 2ka)
    po = _po_cylinder_broadside(f, a, L)
    assert abs(flat / po - 1) < 0.01
    assert abs(np.angle(up_vv[0, 0] / po)) < 0.01
    assert abs(np.angle(up_hh / po)) < 0.02


def test_flat_cylinder_off_broadside_pattern():
    a, L, f = 0.02, 0.4, 10e9
    lam = C0 / f
    t_null = np.degrees(np.arcsin(lam / (2 * L)))
    amp = cylinder_amplitude([f], [0.0, t_null], a, L, "flat", "HH")
    # PO: first null of sinc(k L sin t) at sin t = lambda / (2 L) (Knott / Ruck, from memory)
    assert abs(amp[1, 0]) < 1e-12 * abs(amp[0, 0])
    assert np.all(cylinder_amplitude([f], [0.0, 5.0], a, L, "flat", "HV") == 0)


def test_cylinder2d_against_hankel2_series():
    a = 0.03
    ka = np.array([0.05, 0.7, 3.0, 25.0, 120.0])
    f = freq_for_ka(ka, a)
    lam = C0 / f
    n = np.arange(-200, 201)[None, :]
    x = ka[:, None]
    # Balanis, Advanced Engineering Electromagnetics, ch. 11: sigma_2D = (2 lambda/pi)|sum (-1)^n J_n/H2_n|^2
    keep = np.abs(n) <= ka[:, None] + 30
    with np.errstate(invalid="ignore", divide="ignore"):  # terms beyond `keep` overflow; dropped
        tm = np.where(keep, (-1.0) ** n * special.jv(n, x) / special.hankel2(n, x), 0).sum(axis=1)
        te = np.where(keep, (-1.0) ** n * special.jvp(n, x) / special.h2vp(n, x), 0).sum(axis=1)
    np.testing.assert_allclose(cylinder2d_echo_width(f, a, "VV"), 2 * lam / np.pi * np.abs(tm) ** 2, rtol=1e-9)
    np.testing.assert_allclose(cylinder2d_echo_width(f, a, "HH"), 2 * lam / np.pi * np.abs(te) ** 2, rtol=1e-9)


def test_cylinder2d_limits():
    a = 0.03
    # large ka: echo width -> pi a, GO amplitude -sqrt(pi a) exp(+j 2ka) (Balanis ch. 11; derived GO)
    amp = cylinder2d_amplitude(freq_for_ka([300.0], a), a, "VV")[0]
    go = -np.sqrt(np.pi * a) * np.exp(2j * 300.0)
    assert abs(amp / go - 1) < 0.003
    amp_te = cylinder2d_amplitude(freq_for_ka([300.0], a), a, "HH")[0]
    assert abs(amp_te / go - 1) < 0.01
    # small ka TM: n = 0 term with J0 ~ 1, Y0 ~ (2/pi)(ln(x/2) + gamma) (scipy.special / A&S 9.1.13):
    # sigma_2D ~ (4/k) / |1 - j (2/pi)(ln(ka/2) + gamma)|^2  (derived)
    ka = 0.01
    k = ka / a
    f = freq_for_ka([ka], a)
    tm_lim = (4 / k) / abs(1 - 1j * (2 / np.pi) * (np.log(ka / 2) + np.euler_gamma)) ** 2
    assert abs(cylinder2d_echo_width(f, a, "VV")[0] / tm_lim - 1) < 0.01
    # small ka TE: n = 0 and n = +/-1 terms give sum ~ -j 3 pi (ka)^2 / 4, so
    # sigma_2D ~ (4/k)(3 pi (ka)^2 / 4)^2 = (9 pi^2 / 4) k^3 a^4  (derived, small-argument asymptotics)
    te_lim = 9 * np.pi ** 2 / 4 * k ** 3 * a ** 4
    assert abs(cylinder2d_echo_width(f, a, "HH")[0] / te_lim - 1) < 0.01
    assert np.all(cylinder2d_amplitude(f, a, "VH") == 0)


# ----------------------------------------------------------------------------- dihedral, trihedral
def test_dihedral_peak_and_roll_dependence():
    a, b, f = 0.2, 0.15, 10e9
    lam = C0 / f
    peak = 8 * np.pi * a * a * b * b / lam ** 2  # effective-area relation (from memory)
    rolls = np.array([0.0, 10.0, 22.5, 45.0, 67.5, 90.0, -30.0])
    for r in rolls:
        m = dihedral_matrix([f], [0.0], a, b, r)
        rr = np.radians(r)
        # Lee & Pottier, Polarimetric Radar Imaging: A [[cos 2r, sin 2r], [sin 2r, -cos 2r]]
        assert abs(np.abs(m["HH"][0, 0]) ** 2 - peak * np.cos(2 * rr) ** 2) < 1e-9 * peak
        assert abs(np.abs(m["HV"][0, 0]) ** 2 - peak * np.sin(2 * rr) ** 2) < 1e-9 * peak
        assert m["HV"][0, 0] == m["VH"][0, 0]
        assert abs(m["HH"][0, 0] + m["VV"][0, 0]) < 1e-12 * np.sqrt(peak)
    # roll 0, fold horizontal: VV is plate-like (same as a plate of area sqrt(2) a b), HH inverted
    plate = plate_amplitude([f], [0.0], np.sqrt(2) * a, b)[0, 0]
    m0 = dihedral_matrix([f], [0.0], a, b, 0.0)
    assert abs(m0["VV"][0, 0] - plate) < 1e-12 * abs(plate)
    assert abs(m0["HH"][0, 0] + plate) < 1e-12 * abs(plate)
    # roll 90, fold vertical: the inversion moves to VV
    m90 = dihedral_matrix([f], [0.0], a, b, 90.0)
    assert abs(m90["VV"][0, 0] + plate) < 1e-9 * abs(plate)
    assert theory_is_null({"shape": "dihedral", "fold_m": a, "face_m": b, "roll_deg": 45}, "HH")
    assert theory_is_null({"shape": "dihedral", "fold_m": a, "face_m": b, "roll_deg": 45}, "VV")
    assert not theory_is_null({"shape": "dihedral", "fold_m": a, "face_m": b, "roll_deg": 45}, "HV")
    assert theory_is_null({"shape": "dihedral", "fold_m": a, "face_m": b}, "VH")
    assert theory_is_null({"shape": "sphere", "radius_m": 0.1}, "HV")
    assert not theory_is_null({"shape": "sphere", "radius_m": 0.1}, "VV")


def test_dihedral_turntable_pattern_near_peak():
    a, b, f = 0.2, 0.15, 10e9
    lam = C0 / f
    t_null = np.degrees(np.arcsin(lam / (2 * a)))
    # roll 0: the turntable turns in the plane of the fold; PO plate-like null at sin t = lambda/(2a)
    hh = dihedral_amplitude([f], [0.0, t_null], a, b, 0.0, "HH")
    assert abs(hh[1, 0]) < 1e-12 * abs(hh[0, 0])
    # roll 90: across the fold, GO double bounce sigma ~ sin^2(45 - |t|), zero at 45 (from memory)
    vv = dihedral_amplitude([f], [0.0, 20.0, 45.0], a, b, 90.0, "VV")
    ratio = np.abs(vv[1, 0]) ** 2 / np.abs(vv[0, 0]) ** 2
    assert abs(ratio - 2 * np.sin(np.radians(25.0)) ** 2) < 1e-9
    assert abs(vv[2, 0]) < 1e-9 * abs(vv[0, 0])


def test_trihedral_peaks():
    a, f = 0.15, 10e9
    lam = C0 / f
    # effective-area relations (from memory): 4 pi a^4/(3 lambda^2), 12 pi a^4/lambda^2
    tri = trihedral_amplitude([f], [0.0, 30.0], a, "triangular")
    sq = trihedral_amplitude([f], None, a, "square")
    assert tri.shape == (2, 1) and sq.shape == (1,)
    assert abs(np.abs(tri[0, 0]) ** 2 / (4 * np.pi * a ** 4 / (3 * lam ** 2)) - 1) < 1e-12
    assert abs(np.abs(sq[0]) ** 2 / (12 * np.pi * a ** 4 / lam ** 2) - 1) < 1e-12
    assert np.all(trihedral_amplitude([f], [0.0], a, "square", "HV") == 0)
    with pytest.raises(InputError):
        trihedral_amplitude([f], [0.0], a, "hexagonal")


# ----------------------------------------------------------------------------- table
def _write_table(path, rows, phase=True):
    head = "frequency_hz,angle_deg,polarization,rcs_dbsm" + (",phase_deg" if phase else "")
    path.write_text(head + "\n" + "\n".join(rows) + "\n")
    return path


def test_table_reference_interpolation_and_errors(tmp_path):
    rows = [
        "1e9,0,VV,0,0", "2e9,0,VV,10,90",
        "1e9,10,VV,-10,10", "2e9,10,VV,0,350",  # 350 deg unwraps to -10 along frequency
    ]
    table = load_table_reference(_write_table(tmp_path / "ref.csv", rows))
    amp = table.amplitude([1.5e9], [0.0, 5.0], "VV")
    # hand-computed linear interpolation of sigma (linear) and unwrapped phase
    assert abs(np.abs(amp[0, 0]) ** 2 - 5.5) < 1e-12
    assert abs(np.degrees(np.angle(amp[0, 0])) - 45.0) < 1e-9
    sigma_5 = 0.5 * (5.5 + 0.5 * (0.1 + 1.0))
    assert abs(np.abs(amp[1, 0]) ** 2 - sigma_5) < 1e-12
    phase_5 = 0.5 * (45.0 + 0.0)
    assert abs(np.degrees(np.angle(amp[1, 0])) - phase_5) < 1e-9
    with pytest.raises(InputError, match="outside"):
        table.amplitude([2.5e9], [0.0], "VV")
    with pytest.raises(InputError, match="outside"):
        table.amplitude([1.5e9], [20.0], "VV")
    with pytest.raises(InputError, match="HH"):
        table.amplitude([1.5e9], [0.0], "HH")
    bad = _write_table(tmp_path / "bad.csv", ["1e9,0,VV,0,0", "2e9,0,VV,ten,0"])
    with pytest.raises(InputError) as err:
        load_table_reference(bad)
    assert str(err.value).startswith(f"{bad}:3:")
    # through the dispatcher, relative to base_dir
    amp2 = reference_amplitude({"shape": "table", "file": "ref.csv"}, [1.5e9], [0.0], "VV", base_dir=tmp_path)
    assert abs(amp2[0, 0] - amp[0, 0]) < 1e-12


# ----------------------------------------------------------------------------- dispatcher
def test_dispatcher_keys_and_errors():
    f, t = [10e9], [0.0]
    a = 0.05
    assert np.allclose(reference_amplitude({"shape": "sphere", "radius_m": a}, f, t, "HH"),
                       sphere_amplitude(f, a)[None, :])
    assert np.all(reference_amplitude({"shape": "sphere", "radius_m": a}, f, t, "HV") == 0)
    assert required_keys("dihedral") == ("fold_m", "face_m")
    with pytest.raises(InputError, match="height_m"):
        reference_amplitude({"shape": "plate", "width_m": 0.1}, f, t, "VV")
    with pytest.raises(InputError, match="cone"):
        reference_amplitude({"shape": "cone"}, f, t, "VV")
    with pytest.raises(InputError, match="radius_m"):
        reference_amplitude({"shape": "sphere", "radius_m": -1}, f, t, "VV")
    with pytest.raises(InputError, match="orientation"):
        reference_amplitude({"shape": "cylinder", "radius_m": a, "length_m": 1, "orientation": "tilted"}, f, t, "VV")
    with pytest.raises(InputError):
        reference_amplitude({"shape": "sphere", "radius_m": a}, f, t, "XX")


# ----------------------------------------------------------------------------- spans and CLI
def test_parse_span():
    np.testing.assert_allclose(parse_span("2:18:161", "--freq-ghz"), np.linspace(2, 18, 161))  # numpy.linspace
    np.testing.assert_allclose(parse_span("10", "--freq-ghz"), [10.0])
    np.testing.assert_allclose(parse_span("10:10:1", "--freq-ghz"), [10.0])
    for bad in ("2:18", "a:b:3", "2:18:0", "2:18:1.5", "2:3:1", "nan"):
        with pytest.raises(InputError, match="--freq-ghz"):
            parse_span(bad, "--freq-ghz")


def _run_cli(argv, capsys):
    parser = argparse.ArgumentParser()
    reference_cmd.register(parser.add_subparsers())
    status = reference_cmd.run(parser.parse_args(argv))
    return status, capsys.readouterr().out.splitlines()


def test_reference_cli_output(capsys):
    status, lines = _run_cli(["reference", "sphere", "--radius-m", "0.05", "--freq-ghz", "2:18:161"], capsys)
    assert status == 0
    assert lines[0] == "frequency_hz,angle_deg,polarization,rcs_dbsm,phase_deg"
    assert len(lines) == 1 + 161
    first = lines[1].split(",")
    assert float(first[0]) == 2e9 and first[2] == "VV"
    a = 0.05
    qback = miepython.efficiencies_mx(-1000j, 2 * np.pi * 2e9 / C0 * a)[2]  # miepython 3
    assert abs(float(first[3]) - 10 * np.log10(qback * np.pi * a * a)) < 0.01

    status, lines = _run_cli(["reference", "plate", "--width-m", "0.2", "--height-m", "0.15",
                              "--freq-ghz", "10:10:1", "--angle-deg=-30:30:61"], capsys)
    assert status == 0 and lines[0].startswith("frequency_hz,angle_deg")
    assert len(lines) == 1 + 61
    row0 = lines[31].split(",")  # angle outer: row 31 is 0 degrees
    assert float(row0[1]) == 0.0
    lam = C0 / 10e9
    assert abs(float(row0[3]) - 10 * np.log10(4 * np.pi * (0.2 * 0.15) ** 2 / lam ** 2)) < 1e-6  # Knott PO plate

    with pytest.raises(InputError, match="face_m"):
        _run_cli(["reference", "dihedral", "--fold-m", "0.2", "--freq-ghz", "10"], capsys)
    with pytest.raises(InputError, match="--radius-m"):
        _run_cli(["reference", "sphere", "--radius-m", "big", "--freq-ghz", "10"], capsys)
