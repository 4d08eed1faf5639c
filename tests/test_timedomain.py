"""Range profiles, windows and time gating (cloakrcs.timedomain).

References: the band-pass radar relations c0/(2B) and c0/(2df) (common practice; e.g. Knott,
Radar Cross Section Measurements, ch. on range gating, from memory), c0 from the SI definition,
scipy.signal.windows, and scikit-rf 2.2 ``Network.time_gate`` (skrf/time.py read in the venv).
"""

import warnings

import numpy as np
import pytest
import scipy.signal.windows as sw

from cloakrcs.errors import InputError
from cloakrcs.timedomain import (
    find_echo_range, frequency_window, gate_distortion, gate_far_edge_ok, gate_noise_gain, gate_shape, range_profile,
    transform_length,
    resolution_m, time_gate, unambiguous_range_m, uniform_step_hz, valid_band_mask,
)

C0_SI = 299_792_458.0  # m/s, exact by the SI definition of the metre
F = np.linspace(8e9, 12e9, 401)  # 8-12 GHz, df = 10 MHz: B = 4 GHz
K = 2 * np.pi * F / C0_SI


def echo(r, a=1.0):
    """Ideal point echo at one-way range r (engineering convention exp(+j w t)): a exp(-j 2 k r)."""
    return a * np.exp(-2j * K * np.asarray(r, dtype=float)[..., None])


def db(x):
    return 20 * np.log10(np.abs(x))


# --------------------------------------------------------------------------- grid and radar relations

def test_resolution_and_unambiguous_range_against_radar_formulas():
    # common practice radar relations: resolution c0/(2B), unambiguous range c0/(2 df); values by hand
    assert resolution_m(F) == pytest.approx(299_792_458.0 / (2 * 4e9), rel=1e-12)  # 0.0374740572 m
    assert unambiguous_range_m(F) == pytest.approx(14.9896229, rel=1e-12)
    assert uniform_step_hz(F) == pytest.approx(10e6, rel=1e-12)


def test_point_echo_profile_peaks_at_its_range():
    ranges = np.array([0.73, 4.2137, 9.9, 14.2])
    r_axis, p = range_profile(F, echo(ranges))  # vectorised over the leading axis
    m = transform_length(F.size, 4)
    assert p.shape == (4, m) and 4 * F.size <= m < 4.1 * F.size
    assert r_axis[-1] < unambiguous_range_m(F)
    # profile axis r = c0 t / 2 over [0, c0/(2 df)), step c0/(2 m df)
    np.testing.assert_allclose(np.diff(r_axis), C0_SI / (2 * m * 10e6), rtol=1e-12)
    peak = r_axis[np.argmax(np.abs(p), axis=-1)]
    assert np.all(np.abs(peak - ranges) <= 0.5 * (r_axis[1] - r_axis[0]) + 1e-12)
    # unit echo peaks at ~1 (window-sum scaling); the rest is scalloping at pad 4
    assert np.all(np.abs(p).max(-1) <= 1 + 1e-12) and np.all(np.abs(p).max(-1) > 0.98)
    # refined peak: measured below 1e-3 of a resolution cell at pad 8 (Kaiser 6)
    for r in ranges:
        assert abs(find_echo_range(F, echo(r)) - r) < 1e-3 * resolution_m(F)


def test_rect_profile_nulls_one_cell_from_the_peak():
    # Dirichlet kernel of a rectangular band (DFT textbook result): the first nulls of a point echo
    # lie at +/- 1/(N df) in delay, i.e. +/- c0/(2 N df) in range; the whole profile is the kernel
    # |sin(pi N x) / (N sin(pi x))| at x = (j - j0) / m
    pad = 4
    m = transform_length(F.size, pad)
    dr = C0_SI / (2 * m * 10e6)
    r0 = 500 * dr  # on the grid
    _, p = range_profile(F, echo(r0), window="rect", pad_factor=pad)
    assert abs(p[500]) == pytest.approx(1.0, abs=1e-12)
    x = (np.arange(m) - 500) / m
    with np.errstate(invalid="ignore", divide="ignore"):
        kernel = np.abs(np.sin(np.pi * F.size * x) / (F.size * np.sin(np.pi * x)))
    kernel[500] = 1.0
    np.testing.assert_allclose(np.abs(p), kernel, atol=1e-9)
    # with an exact multiple (pad 1: m = N) the first nulls fall on the neighbouring samples
    _, p1 = range_profile(F, echo(100 * C0_SI / (2 * F.size * 10e6)), window="rect", pad_factor=1)
    assert abs(p1[99]) < 1e-9 and abs(p1[101]) < 1e-9


def test_find_echo_range_search_window_and_several_sweeps():
    s = echo(np.array([2.0, 2.0])) * 10 + echo(np.array([6.3, 6.3]))  # (2, nf)
    assert abs(find_echo_range(F, s) - 2.0) < 1e-3 * resolution_m(F)
    assert abs(find_echo_range(F, s, search=(4.0, 8.0)) - 6.3) < 1e-2 * resolution_m(F)
    with pytest.raises(InputError, match="search range"):
        find_echo_range(F, s, search=(20.0, 30.0))


# --------------------------------------------------------------------------- windows

@pytest.mark.parametrize("n", [1, 2, 7, 64, 401])
def test_windows_against_scipy_and_their_formulas(n):
    # scipy.signal.windows, symmetric versions
    np.testing.assert_allclose(frequency_window("kaiser", n, 6.0), sw.kaiser(n, 6.0, sym=True), rtol=1e-14)
    np.testing.assert_allclose(frequency_window("hann", n), sw.hann(n, sym=True), atol=1e-15)
    np.testing.assert_array_equal(frequency_window("rect", n), sw.boxcar(n))
    if n > 1:
        x = np.arange(n)
        # Kaiser: I0(beta sqrt(1 - (2x/(N-1) - 1)^2)) / I0(beta) (Harris 1978, Proc. IEEE 66(1); from memory)
        kaiser = np.i0(8.0 * np.sqrt(1 - (2 * x / (n - 1) - 1) ** 2)) / np.i0(8.0)
        np.testing.assert_allclose(frequency_window("kaiser", n, 8.0), kaiser, rtol=1e-12)
        # Hann: 0.5 - 0.5 cos(2 pi x / (N-1)) (Harris 1978; from memory)
        np.testing.assert_allclose(frequency_window("hann", n), 0.5 - 0.5 * np.cos(2 * np.pi * x / (n - 1)),
                                   atol=1e-15)


def test_unknown_window_refused():
    with pytest.raises(InputError, match="unknown window"):
        frequency_window("hamming", 10)
    with pytest.raises(InputError, match="unknown window"):
        time_gate(F, echo(4.0), 4.0, 1.0, window="triangle")


# --------------------------------------------------------------------------- gate shape

def test_gate_shape_flat_top_edges_and_wrap():
    r = np.arange(15000) * 1e-3  # period 15 m, step 1 mm
    g = gate_shape(r, 4.0, 1.0, 0.2)
    assert np.all(g[np.abs(r - 4.0) <= 0.4] == 1.0)  # flat top of width span - edge
    assert np.all(g[np.abs(r - 4.0) >= 0.6] == 0.0)  # zero beyond (span + edge)/2
    np.testing.assert_allclose(g[[3500, 4500]], 0.5, atol=1e-12)  # -6 dB points at centre +/- span/2
    # raised cosine on the edge: 0.5 (1 + cos(pi x)) with x the fraction across the edge
    np.testing.assert_allclose(g[4450], 0.5 * (1 + np.cos(np.pi * 0.25)), atol=1e-12)
    # circular: a gate at 0.2 m reaches around into the end of the axis
    gw = gate_shape(r, 0.2, 1.0, 0.2)
    assert gw[-100] == 1.0 and gw[14000] == 0.0  # r = 14.9 m is 0.3 m from 0.2 m across the wrap
    assert np.array_equal(gate_shape(r, 4.0, 1.0, 0.0), (np.abs(r - 4.0) <= 0.5).astype(float))


# --------------------------------------------------------------------------- gating

def test_isolated_echo_at_the_centre_comes_back_exactly():
    s = echo(np.full((2, 3), 4.2)) * np.array([1.0, 2j, -0.5])[:, None]  # (2, 3, nf) leading axes
    for window, pad in [("kaiser", 4), ("hann", 1), ("rect", 2)]:
        out = time_gate(F, s, 4.2, 1.0, window=window, pad_factor=pad)
        assert out.shape == s.shape
        assert np.abs(out - s).max() < 1e-9


def test_gate_is_vectorised_over_leading_axes():
    s = echo(np.array([[4.0, 4.3], [3.9, 1.0]])) + echo(np.array([[1.5, 7.0], [2.0, 7.5]]), 10)
    out = time_gate(F, s, 4.1, 1.0)
    for i in range(2):
        for j in range(2):
            np.testing.assert_allclose(out[i, j], time_gate(F, s[i, j], 4.1, 1.0), rtol=0, atol=1e-12)


TARGET, CLUTTER = 4.2, (1.5, 7.0)


def _scene():
    return echo(TARGET) + echo(CLUTTER[0], 10 ** 1.5) + echo(CLUTTER[1], 10 ** 1.5)  # clutter +30 dB


def test_gate_keeps_target_and_removes_30db_clutter_hann_default_trim():
    # Hann, span 1 m, default trim c0/(2 span) = 150 MHz per edge: measured 0.033 dB, 0.18 deg
    span = 1.0
    out = time_gate(F, _scene(), TARGET, span, window="hann")
    m = valid_band_mask(F, span)
    ratio = out[m] / echo(TARGET)[m]
    assert np.abs(db(ratio)).max() < 0.05
    assert np.abs(np.degrees(np.angle(ratio))).max() < 0.3


def test_gate_keeps_target_and_removes_30db_clutter_kaiser():
    # Kaiser 6 keeps a pedestal of 1/I0(6) = 0.015 at the band ends: the clutter's band-edge step
    # leaks through the gate into about two inverse gate durations of each edge, where the window
    # (hence the distortion we divide by) is small. With span 0.5 m, edge_fraction 0.5 and a trim
    # of 2 c0/(2 span) the target is back within 0.022 dB and 0.12 deg (measured).
    span = 0.5
    out = time_gate(F, _scene(), TARGET, span, edge_fraction=0.5)
    m = valid_band_mask(F, span, trim_hz=2 * C0_SI / (2 * span))
    ratio = out[m] / echo(TARGET)[m]
    assert np.abs(db(ratio)).max() < 0.05
    assert np.abs(np.degrees(np.angle(ratio))).max() < 0.2
    # mid-band (1-3 GHz away from the edges) the clutter alone is suppressed by > 60 dB
    clutter = time_gate(F, _scene() - echo(TARGET), TARGET, span, edge_fraction=0.5)
    assert db(clutter[100:301]).max() < -60


def test_sphere_like_pair_inside_the_flat_top_is_kept():
    # README, Signal model: specular echo at R - a, creeping wave at about R + pi a / 2 (a = 0.1 m)
    a = 0.1
    s = echo(TARGET - a) + echo(TARGET + np.pi * a / 2, 0.3)
    for span in (1.0, 1.5):
        out = time_gate(F, s, TARGET, span)
        m = valid_band_mask(F, span)
        bias = 10 * np.log10(np.sum(np.abs(out[m]) ** 2) / np.sum(np.abs(s[m]) ** 2))
        assert abs(bias) < 0.1  # measured 0.002 dB (span 1 m), 0.0005 dB (1.5 m)


def test_gate_distortion_is_window_times_rolloff_without_range_phase():
    d = gate_distortion(F, 4.2, 1.0, window="rect")
    # rect window, mid-band: the flat gate passes the echo unchanged, phase untouched
    np.testing.assert_allclose(d[150:251], 1.0, atol=1e-3)
    dk = gate_distortion(F, 4.2, 1.0)
    np.testing.assert_allclose(dk[150:251], sw.kaiser(401, 6.0)[150:251], atol=1e-3)
    # the gate at another centre gives the same distortion (range phase removed), up to padding sampling
    np.testing.assert_allclose(gate_distortion(F, 4.2 + 0.75 * C0_SI / (2 * transform_length(401, 4) * 1e7), 1.0), dk,
                               atol=2e-3)


def test_normalise_off_leaves_the_window_applied():
    out = time_gate(F, echo(4.2), 4.2, 1.0, window="hann", normalise=False)
    np.testing.assert_allclose(out, gate_distortion(F, 4.2, 1.0, window="hann") * echo(4.2), atol=1e-12)


# --------------------------------------------------------------------------- scikit-rf cross-checks

def _skrf_gate(s, **kw):
    skrf = pytest.importorskip("skrf")
    net = skrf.Network(frequency=skrf.Frequency.from_f(F, unit="hz"), s=s.reshape(-1, 1, 1))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return net, net.time_gate(t_unit="s", **kw).s[:, 0, 0]


def test_matches_skrf_time_gate_with_the_same_gate_shape():
    # scikit-rf 2.2 time_gate, method 'fft': s -> window -> fftshift(ifft) * gate -> fft(ifftshift)
    # -> / window, gate = scipy window over the samples from start to stop. Ours with pad_factor=1,
    # window "rect" (= its fft_window "boxcar": the window it divides out again is then 1) and
    # normalise off is the same computation once the gate is the same: our flat-topped raised-cosine
    # gate is exactly scipy's Tukey window over [centre - (span+edge)/2, centre + (span+edge)/2] with
    # alpha = 2 edge / (span + edge), when those ends fall on time samples. Reached: 2e-15 (rounding).
    dr = C0_SI / (2 * F.size * 10e6)  # range step without padding
    centre, full, ef = 100 * dr, 40 * dr, 0.2  # skrf's time axis is centred on 0: keep below c0/(4 df) = 7.49 m
    span = full / (1 + ef)
    s = echo(3.9) + echo(1.2, 30) + echo(5.5, 10)
    ours = time_gate(F, s, centre, span, window="rect", pad_factor=1, edge_fraction=ef, normalise=False)
    _, ref = _skrf_gate(s, center=2 * centre / C0_SI, span=2 * full / C0_SI,
                        window=("tukey", 2 * ef / (1 + ef)), fft_window="boxcar")
    assert np.abs(ours - ref).max() < 1e-12


def test_agrees_with_skrf_default_kaiser_gate_where_it_must():
    # scikit-rf 2.2 defaults: Kaiser(6)-shaped gate over the span, fft_window 'cosine' divided out
    # again, no renormalisation. Its gate is not flat-topped (by design), so results differ off centre;
    # what must agree:
    span = 1.0
    m = valid_band_mask(F, span)
    mid = slice(100, 301)
    # (1) the echo at the centre is kept at equal amplitude: skrf 0.035 dB low (its Kaiser gate is
    #     below 1 one sample off its peak and the echo's main lobe spans several samples), ours exact
    net, ref = _skrf_gate(echo(TARGET), center=2 * TARGET / C0_SI, span=2 * span / C0_SI)
    ours = time_gate(F, echo(TARGET), TARGET, span)
    assert np.abs(db(ref[mid])).max() < 0.05 and np.abs(db(ours[m])).max() < 1e-9
    # (2) the +30 dB clutter outside is removed by both: mid-band below -60 dB of the target
    clutter = _scene() - echo(TARGET)
    _, ref = _skrf_gate(clutter, center=2 * TARGET / C0_SI, span=2 * span / C0_SI)
    ours = time_gate(F, clutter, TARGET, span)
    assert db(ref[mid]).max() < -60 and db(ours[mid]).max() < -60
    # (3) same time axis: skrf's fftshifted t equals ours, 2 r / c0, modulo the period 1/df
    r_axis, p = range_profile(F, _scene(), window="rect", pad_factor=1)
    t = net.frequency.t
    np.testing.assert_allclose(np.sort(t % (1 / 10e6)), 2 * r_axis / C0_SI, rtol=0, atol=1e-21)
    # (4) same profile magnitude and peak positions (skrf s_time: unwindowed band-pass ifft)
    skrf_net, _ = _skrf_gate(_scene(), center=2 * TARGET / C0_SI, span=2 * span / C0_SI)
    order = np.argsort(t % (1 / 10e6))
    np.testing.assert_allclose(np.abs(p), np.abs(skrf_net.s_time[:, 0, 0])[order], rtol=1e-9, atol=1e-12)
    # (5) the design difference (README, The processing chain, step 2): an echo 0.3 m off centre, inside our flat top,
    #     is attenuated ~8.8 dB by skrf's Kaiser gate and kept by ours (mid-band)
    _, ref = _skrf_gate(echo(TARGET + 0.3), center=2 * TARGET / C0_SI, span=2 * span / C0_SI)
    ours = time_gate(F, echo(TARGET + 0.3), TARGET, span)
    assert db(ref[mid]).max() < -8 and np.abs(db(ours[mid])).max() < 0.01


# --------------------------------------------------------------------------- valid band, far edge, input errors

def test_valid_band_mask_trims_one_inverse_gate_duration():
    span = 1.0  # c0/(2 span) = 149.9 MHz: points 0..14 and 386..400 go (10 MHz step)
    m = valid_band_mask(F, span)
    trim = C0_SI / (2 * span)
    assert not m[:15].any() and m[15:386].all() and not m[386:].any()
    assert np.all(F[m] - F[0] >= trim) and np.all(F[-1] - F[m] >= trim)
    m2 = valid_band_mask(F, span, trim_hz=1e9)
    assert F[m2][0] == pytest.approx(9e9) and F[m2][-1] == pytest.approx(11e9)
    with pytest.raises(InputError, match=r"8-12 GHz.*MHz.*0\.05 m"):
        valid_band_mask(F, 0.05)  # trim 3 GHz per edge: nothing left


def test_gate_far_edge_against_unambiguous_range():
    ru = 14.9896229
    # a hard-edged gate ends at centre + span/2; soft edges (20 % of the span each) reach span/2 + 0.1 further
    assert gate_far_edge_ok(F, ru - 0.51, 1.0, edge_fraction=0.0)
    assert not gate_far_edge_ok(F, ru - 0.49, 1.0, edge_fraction=0.0)
    assert gate_far_edge_ok(F, ru - 0.61, 1.0) and not gate_far_edge_ok(F, ru - 0.59, 1.0)
    with pytest.raises(InputError, match="unambiguous range"):
        time_gate(F, echo(14.6), 14.6, 1.0)


def test_grid_errors_name_the_file():
    bad = F.copy()
    bad[123] += 0.01 * 10e6  # 1 % of a step
    with pytest.raises(InputError, match=r"^target_000\.s1p: .*not uniform.*point 123") as err:
        uniform_step_hz(bad, path="target_000.s1p")
    assert "\n" not in str(err.value)
    bad = F.copy()
    bad[200] = bad[199]
    with pytest.raises(InputError, match=r"^bg\.s1p: .*not increasing"):
        uniform_step_hz(bad, path="bg.s1p")
    with pytest.raises(InputError, match="at least 2 points"):
        uniform_step_hz([9e9], path="x.s1p")
    uniform_step_hz(F + 1e-8 * 10e6 * np.sin(np.arange(F.size)))  # within the 1e-6 df tolerance
    with pytest.raises(InputError, match="not uniform"):
        time_gate(np.r_[F[:-1], F[-1] + 3e6], echo(4.0), 4.0, 1.0)


def test_bad_shapes_and_parameters_refused():
    with pytest.raises(InputError, match="last axis"):
        range_profile(F, np.ones((401, 2)))
    with pytest.raises(InputError, match="pad_factor"):
        time_gate(F, echo(4.0), 4.0, 1.0, pad_factor=0)
    with pytest.raises(InputError, match="span"):
        time_gate(F, echo(4.0), 4.0, -1.0)
    with pytest.raises(InputError, match="edge_fraction"):
        time_gate(F, echo(4.0), 4.0, 1.0, edge_fraction=1.5)


def test_gate_noise_gain_equals_gating_every_unit_sweep():
    # the gate is linear: applying it to the identity gives its matrix H; white noise leaves
    # sum_n |H(f, n)|^2 (linear-systems identity), which the FFT shortcut must reproduce
    f = np.linspace(8e9, 12e9, 301)
    for window, pad in (("kaiser", 4), ("hann", 1), ("rect", 2)):
        h = time_gate(f, np.eye(f.size, dtype=complex), 4.0, 0.6, window=window, pad_factor=pad)
        brute = np.sum(np.abs(h) ** 2, axis=0)
        np.testing.assert_allclose(gate_noise_gain(f, 4.0, 0.6, window=window, pad_factor=pad), brute, rtol=1e-9)
