"""Cloak metrics against hand calculations and the formulas of README, The processing chain, steps 5 to 7."""

from __future__ import annotations

import numpy as np
import pytest

from cloakrcs import metrics


def test_band_reduction_sums_linear_before_db():
    # README, The processing chain, step 6: 10 log10(sum sigma_baseline / sum sigma_subject), linear sums first
    b = np.array([[1.0, 1.0], [1.0, 1.0]])
    s = np.array([[0.1, 0.01], [0.1, 0.01]])
    band = metrics.corrected_reduction(b, np.zeros(2), s, np.zeros(2), [8e9, 9e9], 1e9, 2.0)["band_db"]
    assert band == pytest.approx(10 * np.log10(4 / 0.22))
    # not the mean of the per-point dB values (15 dB here)
    assert band != pytest.approx(15.0)


def test_sector_curve_and_worst_angle():
    b = np.ones((3, 4))
    s = np.array([[0.1] * 4, [0.01] * 4, [0.5] * 4])
    cr = metrics.corrected_reduction(b, np.zeros(4), s, np.zeros(4), np.linspace(8e9, 9e9, 4), 1e9, 2.0)
    np.testing.assert_allclose(cr["curve_db"], 10 * np.log10(3 / 0.61))
    assert int(np.argmin(cr["angle_db"])) == 2 and cr["angle_db"][2] == pytest.approx(10 * np.log10(2))


def test_bandwidth_edges_interpolated():
    f = np.linspace(8e9, 12e9, 41)
    curve = 20 - np.abs(f - 10e9) / 1e8  # 20 dB at 10 GHz, falling 1 dB per 100 MHz
    bw = metrics.bandwidth_above(f, curve, 10.0)
    assert bw.best_db == pytest.approx(20) and bw.best_hz == pytest.approx(10e9)
    # R(f) >= 10 dB from 9 to 11 GHz, exactly (linear interpolation between samples)
    assert bw.start_hz == pytest.approx(9e9) and bw.stop_hz == pytest.approx(11e9)
    assert bw.width_hz == pytest.approx(2e9) and not bw.truncated
    assert bw.fractional == pytest.approx(2 / 10)
    off_grid = metrics.bandwidth_above(f, curve, 10.45)
    assert off_grid.start_hz == pytest.approx(9.045e9) and off_grid.stop_hz == pytest.approx(10.955e9)


def test_bandwidth_truncated_and_zero():
    f = np.linspace(8e9, 12e9, 41)
    rising = np.linspace(0, 20, 41)
    bw = metrics.bandwidth_above(f, rising, 10.0)
    assert bw.truncated and bw.stop_hz == pytest.approx(12e9) and bw.start_hz == pytest.approx(10e9)
    low = metrics.bandwidth_above(f, np.full(41, 5.0), 10.0)
    assert low.width_hz == 0 and low.fractional == 0 and not low.truncated


def test_sector_wraps():
    a = np.array([0, 90, 150, 180, 200, 210, 300, 355.0])
    # README, The processing chain, conventions: 150:-150 is the 60 degrees behind the target
    np.testing.assert_array_equal(metrics.sector_mask(a, (150, -150)), [0, 0, 1, 1, 1, 1, 0, 0])
    np.testing.assert_array_equal(metrics.sector_mask(a, (-30, 30)), [1, 0, 0, 0, 0, 0, 0, 1])
    assert metrics.sector_mask(a, None).all()


def test_bounds():
    s = np.array([True, False, True, False])
    b = np.array([False, True, True, False])
    assert list(metrics.point_bounds(s, b)) == ["lower", "upper", "undetermined", "none"]
    sig, lim = metrics.bounded_sigma(np.array([1e-6, 1.0]), np.array([1e-6, 1e-6]), 10.0)
    # a floor-limited point takes its upper limit (|m| + z sqrt(N / 2))^2, z the 95 % normal quantile
    np.testing.assert_allclose(sig, [(1e-3 + 1.6448536269514722 * np.sqrt(0.5e-6)) ** 2, 1.0])
    assert list(lim) == [True, False]


def test_interference_error_values():
    # README, The processing chain, steps 5 and 7 (derived): 20 log10(1 +/- 10^(-SNR/20)); +2.4/-3.3 dB at 10 dB (common practice),
    # about +0.8/-0.9 dB at 20 dB, +/-0.09 dB at 40 dB
    up, down = metrics.interference_bounds_db([10, 20, 40])
    np.testing.assert_allclose(up, [2.39, 0.83, 0.086], atol=0.01)
    np.testing.assert_allclose(down, [-3.30, -0.92, -0.087], atol=0.01)
    # random phase: 8.686 * 10^(-SNR/20) / sqrt(2) dB
    assert metrics.interference_uncertainty_db(20) == pytest.approx(8.686 * 0.1 / np.sqrt(2), rel=1e-3)


def test_interference_uncertainty_matches_monte_carlo():
    # the random-phase standard uncertainty against a direct simulation (numpy, 200k phases)
    rng = np.random.default_rng(0)
    x = 10 ** (-30 / 20)
    err_db = 20 * np.log10(np.abs(1 + x * np.exp(2j * np.pi * rng.random(200_000))))
    assert np.std(err_db) == pytest.approx(float(metrics.interference_uncertainty_db(30)), rel=0.02)


def test_correlated_sum_uncertainty():
    f = np.arange(10) * 1e6
    u = np.ones((1, 10))
    # one cell holds all: fully correlated, added linearly (GUM JCGM 100:2008, r = 1)
    assert metrics.correlated_sum_uncertainty(u, f, 100e6) == pytest.approx(10.0)
    # every sample its own cell: independent, added in quadrature
    assert metrics.correlated_sum_uncertainty(u, f, 1e6) == pytest.approx(np.sqrt(10))
    # two angles, one cell each: quadrature across angles
    assert metrics.correlated_sum_uncertainty(np.ones((2, 10)), f, 100e6) == pytest.approx(10 * np.sqrt(2))


def test_mounting_offset_finer_than_a_step():
    angles = np.arange(0, 360, 5.0)
    def pattern(a, shift):
        t = np.radians(a - shift)
        return 10 * np.log10(2.0 + np.cos(t) + 0.5 * np.cos(3 * t))
    est = metrics.mounting_offset_deg(angles, pattern(angles, 0), pattern(angles, 7.3))
    assert est == pytest.approx(7.3, abs=0.5)
    est = metrics.mounting_offset_deg(angles, pattern(angles, 0), pattern(angles, -2.0))
    assert est == pytest.approx(-2.0, abs=0.5)


def test_resample_angles_periodic():
    a = np.arange(0, 360, 10.0)
    v = np.cos(np.radians(a))
    out = metrics.resample_angles(a, v, np.array([355.0, 5.0, -5.0]))
    np.testing.assert_allclose(out, [0.5 * (np.cos(np.radians(350)) + 1)] * 2 + [0.5 * (np.cos(np.radians(350)) + 1)])


def test_parse_sector():
    assert metrics.parse_sector("-30:30") == (-30.0, 30.0)
    with pytest.raises(Exception, match="START:STOP"):
        metrics.parse_sector("thirty")


def test_mounting_offset_confidence():
    angles = np.arange(0, 360, 5.0)
    t = np.radians(angles)
    lobed = 10 * np.log10(2.0 + np.cos(t) + 0.5 * np.cos(3 * t))
    shifted = 10 * np.log10(2.0 + np.cos(t - np.radians(4)) + 0.5 * np.cos(3 * (t - np.radians(4))))
    assert metrics.mounting_offset(angles, lobed, shifted)[1] > 0.9
    # unrelated structure (a lobe where the baseline has none): no offset to trust
    rng = np.random.default_rng(0)
    flat = 0.05 * rng.standard_normal(angles.size)
    seam = np.where(np.abs(angles - 180) < 20, 3.0, 0.0)
    assert metrics.mounting_offset(angles, flat, seam)[1] < metrics.OFFSET_MIN_CORRELATION
