"""Coated-cylinder model of the bare object and its cloaked revisions (cloakrcs.cloak_model)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from cloakrcs import cloak_model as cm
from cloakrcs import references
from cloakrcs.constants import C0
from cloakrcs.errors import InputError

F = np.linspace(2e9, 14e9, 25)
A_CORE = 0.04
L = 0.2


def _direct_pec_echo_width(f, a, pol):
    """Balanis, Advanced Engineering Electromagnetics, ch. 11:
    TM sigma_2D = (2 lambda/pi) |sum eps_n (-1)^n J_n(ka)/H2_n(ka)|^2, TE with derivatives."""
    lam = C0 / f
    x = 2 * np.pi * f / C0 * a
    n = np.arange(0, 80)[None, :]
    eps = np.where(n == 0, 1.0, 2.0) * (-1.0) ** n
    xx = x[:, None]
    if pol == "VV":
        t = special.jv(n, xx) / special.hankel2(n, xx)
    else:
        t = special.jvp(n, xx) / special.h2vp(n, xx)
    return 2 * lam / np.pi * np.abs((eps * t).sum(axis=1)) ** 2


@pytest.mark.parametrize("pol", ["VV", "HH"])
def test_zero_thickness_coating_is_the_pec_series(pol):
    amp = cm.coated_cylinder_amplitude_2d(F, A_CORE, A_CORE, 10 - 2j, 3 - 1j, pol)
    # scipy.special series written out here (Balanis ch. 11)
    np.testing.assert_allclose(np.abs(amp) ** 2, _direct_pec_echo_width(F, A_CORE, pol), rtol=1e-9)
    # the project's PEC reference, same phase convention
    np.testing.assert_allclose(amp, references.cylinder2d_amplitude(F, A_CORE, pol), rtol=1e-9)


@pytest.mark.parametrize("pol", ["VV", "HH"])
def test_free_space_coating_is_the_bare_core(pol):
    coated = cm.coated_cylinder_amplitude_2d(F, A_CORE, A_CORE + 0.006, 1.0, 1.0, pol)
    np.testing.assert_allclose(coated, references.cylinder2d_amplitude(F, A_CORE, pol), rtol=1e-9, atol=1e-14)


@pytest.mark.parametrize("pol", ["VV", "HH"])
def test_bare_cylinder_matches_reference_3d_and_optics(pol):
    bare = cm.bare_cylinder_amplitude({"radius_m": A_CORE, "length_m": L}, F, [0.0, 90.0], pol)
    ref = references.cylinder_amplitude(F, [0.0, 90.0], A_CORE, L, "upright", pol)
    np.testing.assert_allclose(bare, ref, rtol=1e-9)
    # large ka: sigma -> 2 pi a L^2 / lambda (Mahafza & Elsherbeni eq. 11.48), within 0.5 dB at ka > 8
    ka = 2 * np.pi * F / C0 * A_CORE
    po = 2 * np.pi * A_CORE * L ** 2 / (C0 / F)
    big = ka > 8
    assert np.all(np.abs(10 * np.log10(np.abs(bare[0, big]) ** 2 / po[big])) < 0.5)


@pytest.mark.parametrize("pol", ["VV", "HH"])
def test_lossless_coating_conserves_energy_and_lossy_absorbs(pol):
    # per mode, a lossless scatterer has |1 + 2 a_n| = 1, i.e. Re(a_n) = -|a_n|^2, so that the
    # 2-D optical theorem sigma_ext = sigma_sca holds (Bohren & Huffman ch. 8; Ishimaru; from memory)
    lossless = cm.coated_cylinder_coefficients(F, A_CORE, A_CORE + 0.003, 9.0, 1.6, pol)
    np.testing.assert_allclose(np.abs(1 + 2 * lossless), 1.0, atol=1e-9)
    k = 2 * np.pi * F / C0
    sca = (4 / k) * (np.abs(lossless[:, :1]) ** 2 + 2 * (np.abs(lossless[:, 1:]) ** 2).sum(axis=1)[:, None])[:, 0]
    ext = -(4 / k) * (lossless[:, 0].real + 2 * lossless[:, 1:].real.sum(axis=1))
    np.testing.assert_allclose(ext, sca, rtol=1e-8)
    lossy = cm.coated_cylinder_coefficients(F, A_CORE, A_CORE + 0.003, 9.0 - 0.5j, 1.6 - 1.2j, pol)
    assert np.all(np.abs(1 + 2 * lossy[:, :5]) < 1 - 1e-4)


@pytest.mark.parametrize("pol", ["VV", "HH"])
def test_vanishing_core_is_the_homogeneous_dielectric_cylinder(pol):
    # Bohren & Huffman, Absorption and Scattering of Light by Small Particles, eqs. 8.30 / 8.38
    # (from memory), non-magnetic cylinder of relative index m, written for exp(+j w t) with H2:
    # TM: b_n = [J(mx) J'(x) - m J'(mx) J(x)] / [J(mx) H'(x) - m J'(mx) H(x)]
    # TE: a_n = [m J'(x) J(mx) - J(x) J'(mx)] / [m J(mx) H'(x) - J'(mx) H(x)]; ours is -(that).
    b = 0.01
    eps = 4.0 - 0.4j
    m = np.sqrt(eps)
    f = np.linspace(3e9, 12e9, 7)
    ours = cm.coated_cylinder_coefficients(f, 1e-7, b, eps, 1.0, pol, n_max=12)
    x = (2 * np.pi * f / C0 * b)[:, None]
    n = np.arange(13)[None, :]
    J, Jd = special.jv(n, x), special.jvp(n, x)
    H, Hd = special.hankel2(n, x), special.h2vp(n, x)
    Jm, Jmd = special.jv(n, m * x), special.jvp(n, m * x)
    if pol == "VV":
        bh = (Jm * Jd - m * Jmd * J) / (Jm * Hd - m * Jmd * H)
    else:
        bh = (m * Jd * Jm - J * Jmd) / (m * Jm * Hd - Jmd * H)
    # TM n = 0 excepted: a thin conducting wire along E never vanishes (its effect decays only like
    # 1/ln(ka); Balanis ch. 11), so that term must differ, and does
    first = 1 if pol == "VV" else 0
    np.testing.assert_allclose(ours[:, first:], -bh[:, first:], rtol=1e-6, atol=1e-12)
    if pol == "VV":
        assert np.all(np.abs(ours[:, 0] + bh[:, 0]) > 1e-3)


def test_absorbing_sleeve_reduces_and_varies_with_frequency():
    f = np.linspace(8e9, 12e9, 41)
    bare = cm.bare_cylinder_amplitude({"radius_m": A_CORE, "length_m": L}, f, [0.0], "VV")[0]
    sleeve = cm.coated_cylinder_amplitude({"radius_m": A_CORE, "length_m": L, "thickness_m": 0.0015,
                                           "eps_r": [12.0, -0.3], "mu_r": [1.5, -1.2]}, f, [0.0], "VV")[0]
    red = 20 * np.log10(np.abs(bare) / np.abs(sleeve))
    assert red.min() > 3 and red.max() > 15 and red.max() - red.min() > 3
    assert np.all(np.abs(np.diff(red)) < 1.5)  # smooth in frequency: no numerical jumps


def test_seam_strip_is_physical_optics_and_hidden_behind():
    f = np.array([10e9])
    k = 2 * np.pi * f / C0
    w, b = 0.003, 0.0415
    amp = cm.seam_amplitude_2d(f, [30.0, 30.0 + 180.0, 40.0], b, w, azimuth_deg=30.0)
    # PO strip, normal incidence: sigma_2D = k w^2 (Knott, Shaeffer & Tuley; from memory)
    assert abs(np.abs(amp[0, 0]) ** 2 - k[0] * w * w) < 1e-12
    assert amp[1, 0] == 0  # behind the conducting core
    # specular point b in front of the axis: phase advance exp(+j 2 k b) against a flat strip at the axis
    flat = cm.seam_amplitude_2d(f, [30.0], 1e-12, w, azimuth_deg=30.0)
    np.testing.assert_allclose(amp[0, 0] / flat[0, 0], np.exp(2j * k[0] * b), rtol=1e-9)
    # seam rotates with the mounting: mount_deg shifts the pattern
    shifted = cm.seam_amplitude_2d(f, [40.0], b, w, azimuth_deg=30.0, mount_deg=10.0)
    np.testing.assert_allclose(shifted, amp[:1], rtol=1e-12)


def test_bolt_is_an_optical_sphere_when_facing():
    f = np.array([10e9])
    r = 0.008
    amp = cm.bolt_amplitude(f, [90.0, 270.0], A_CORE, r, azimuth_deg=90.0)
    # optical sphere sigma = pi r^2 (Ruck, Radar Cross Section Handbook; Mahafza & Elsherbeni)
    assert abs(np.abs(amp[0, 0]) ** 2 - np.pi * r * r) < 1e-12
    assert amp[1, 0] == 0


def test_bare_pattern_is_not_flat_but_nearly_so():
    ang = np.arange(0, 360, 5.0)
    params = {"radius_m": A_CORE, "length_m": L, "bolt": {"azimuth_deg": 90.0, "radius_m": 0.008}}
    sig = 10 * np.log10(np.abs(cm.bare_cylinder_amplitude(params, [10e9], ang, "HH")[:, 0]) ** 2)
    spread = sig.max() - sig.min()
    assert 0.05 < spread < 2.0


def test_cross_polarization_is_zero():
    z = cm.coated_cylinder_amplitude({"radius_m": A_CORE, "length_m": L, "thickness_m": 0.001,
                                      "eps_r": 5.0, "mu_r": 1.0}, F, [0.0], "HV")
    assert np.all(z == 0)


@pytest.mark.parametrize("params, text", [
    ({"radius_m": 0.04, "length_m": 0.2, "thickness_m": 0.001, "eps_r": [4.0, 0.5]}, "positive imaginary"),
    ({"radius_m": 0.04, "length_m": 0.2, "thickness_m": 0.001, "colour": "red"}, "unknown key"),
    ({"radius_m": -0.04, "length_m": 0.2, "thickness_m": 0.001}, "radius_m"),
    ({"radius_m": 0.04, "length_m": 0.2, "thickness_m": 0.001, "eps_r": [1, 2, 3]}, "eps_r"),
])
def test_bad_parameters_raise_input_error(params, text):
    with pytest.raises(InputError, match=text):
        cm.coated_cylinder_amplitude(params, F, [0.0], "VV")
