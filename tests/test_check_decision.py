"""The check target judged with its own uncertainty (process._checks).

Decision rule: a scored point fails when |error| - k u > tolerance, the guard band of
ILAC-G8:09/2019 (acceptance with the measurement uncertainty stated); u is the noise term
8.686 sqrt(floor / sigma) / sqrt(2) dB (metrics.interference_uncertainty_db, the first-order
dB error of a power next to a random-phase interferer) combined with the repeatability.
Inputs are built directly: a sphere check target (Mie series from cloakrcs.references) with
a known error, a known floor and seeded noise.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
import xarray as xr
from scipy import optimize, stats

from cloakrcs import metrics, references
from cloakrcs.constants import C0
from cloakrcs.process import ProcessSettings, TargetResult, _checks, check_failure_text

SHAPE = {"shape": "sphere", "radius_m": 0.05}


def _check_rows(f, amplitude, floor, rep=None, settings=None):
    """_checks on one sphere check target 'chk', HH, with amplitude (angle, f) and floor (f,) m^2."""
    spec = SimpleNamespace(is_check=True, shape=SHAPE, specular_deg=0.0)
    campaign = SimpleNamespace(frequency_hz=f, cube=lambda name: SimpleNamespace(spec=spec))
    angles = np.arange(amplitude.shape[0], dtype=float)
    coords = {"polarization": ["HH"], "angle": angles, "frequency": f}
    t = TargetResult(
        name="chk", role="subject", revision="chk", baseline=None,
        amplitude=xr.DataArray(amplitude[None], dims=("polarization", "angle", "frequency"), coords=coords),
        floor=xr.DataArray(floor[None], dims=("polarization", "frequency"),
                           coords={"polarization": ["HH"], "frequency": f}),
        rep_rel_u=None if rep is None else xr.DataArray(rep[None], dims=("polarization", "angle", "frequency"),
                                                        coords=coords),
        gate={"center_m": 4.0, "span_m": 0.6})
    rows = _checks(campaign, {"chk": t}, np.ones(f.size, bool), settings or ProcessSettings())
    assert len(rows) == 1
    return rows[0]


def _theory(f, n_angles):
    a = references.sphere_amplitude(f, SHAPE["radius_m"])
    return np.broadcast_to(a, (n_angles, f.size))


def test_interferer_12_db_below_passes_with_its_uncertainty():
    # a constant-modulus interferer 12 dB below the echo, its phase turning with frequency (a stray
    # echo 1.3 m from the target): the interference model behind interference_uncertainty_db
    f = np.linspace(8e9, 12e9, 401)
    a = _theory(f, 3)
    x = 10 ** (-12 / 20) * np.exp(-2j * (2 * np.pi * f / C0) * 1.3 + 1j * np.arange(3)[:, None])
    sigma_true = np.abs(a[0]) ** 2
    row = _check_rows(f, a * (1 + x), sigma_true * 10 ** (-12 / 10))
    # 20 log10(1 - 10^(-12/20)) = -2.5 dB: the plain max |error| <= 1 dB rule would fail it
    assert row["max_error_db"] == pytest.approx(-20 * np.log10(1 - 10 ** (-12 / 20)), abs=0.05)
    assert row["max_error_db"] > 2 * row["tolerance_db"]
    assert row["passed"] and row["failed_points"] == 0
    assert row["expanded_uncertainty_db"] > 2.0
    assert row["decision_rule"] == "fails when |error| - k u > tolerance at any scored point (k = 2)"
    for key in ("max_error_db", "rms_error_db", "mean_error_db", "tolerance_db", "passed", "points",
                "specular_deg", "error_curve_db", "shape"):
        assert key in row


def test_gaussian_noise_12_db_below_fails_points_at_the_rice_rate():
    # complex Gaussian noise 12 dB below: |1 + n| is Rice distributed (scipy.stats.rice,
    # b = 1 / s, scale s, s^2 = 10^(-1.2) / 2 per component). With u from the measured power,
    # u = 8.686 sqrt(floor / (sigma r^2)) / sqrt(2), a point fails where r > r_hi, the root of
    # 20 log10 r - 2 u(r) = tolerance (below r = 1 the guard band always covers the error at 12 dB).
    rng = np.random.default_rng(12)
    f = np.linspace(8e9, 12e9, 5001)
    n_angles = 40
    a = _theory(f, n_angles)
    snr = 10 ** (12 / 10)
    s = np.sqrt(1 / snr / 2)
    n = s * (rng.standard_normal(a.shape) + 1j * rng.standard_normal(a.shape))
    row = _check_rows(f, a * (1 + n), np.abs(a[0]) ** 2 / snr)
    c = 2 * 8.685889638 * np.sqrt(1 / snr) / np.sqrt(2)
    r_hi = optimize.brentq(lambda r: 20 * np.log10(r) - c / r - 1.0, 1.0, 3.0)
    r = np.linspace(0.01, 1.0, 10001)
    assert np.max(-20 * np.log10(r) - c / r) < 1.0  # no failures below r = 1
    p = stats.rice.sf(r_hi, 1 / s, scale=s)
    total = row["points"]
    assert total == a.size
    expected, sd = total * p, np.sqrt(total * p * (1 - p))
    assert 1e-3 < p < 1e-2  # about 0.5 % of independent points at 12 dB
    assert abs(row["failed_points"] - expected) < 5 * sd, (row["failed_points"], expected)


def test_two_db_calibration_error_with_small_noise_fails():
    rng = np.random.default_rng(4)
    f = np.linspace(8e9, 12e9, 401)
    a = _theory(f, 3)
    snr = 10 ** (40 / 10)
    n = np.sqrt(1 / snr / 2) * (rng.standard_normal(a.shape) + 1j * rng.standard_normal(a.shape))
    row = _check_rows(f, a * 10 ** (2 / 20) * (1 + n), np.abs(a[0]) ** 2 * 10 ** (2 / 10) / snr)
    assert not row["passed"]
    assert row["failed_points"] == row["points"]
    assert row["expanded_uncertainty_db"] == pytest.approx(2 * metrics.interference_uncertainty_db(40.0), rel=0.05)
    text = check_failure_text(row)
    assert text.startswith("CHECK TARGET FAILED: chk HH:") and "expanded uncertainty" in text and "(k = 2)" in text
    # a 0.9 dB error at the same noise passes: the guard band is small when the noise is
    ok = _check_rows(f, a * 10 ** (0.9 / 20) * (1 + n), np.abs(a[0]) ** 2 / snr)
    assert ok["passed"]


def test_repeatability_widens_the_guard_band():
    # the same 2 dB error with a 30 % relative repeatability (1.3 dB, 10 / ln 10 per unit):
    # 2 - 2 x 1.3 < 1 passes; with coverage_k = 0.5, 2 - 0.65 > 1 fails
    f = np.linspace(8e9, 12e9, 201)
    a = _theory(f, 2) * 10 ** (2 / 20)
    floor = np.abs(a[0]) ** 2 * 1e-6
    rep = np.full(a.shape, 0.3)
    row = _check_rows(f, a, floor, rep)
    assert row["passed"]
    assert row["expanded_uncertainty_db"] == pytest.approx(2 * np.hypot(10 / np.log(10) * 0.3,
                                                                        metrics.interference_uncertainty_db(60.0)))
    assert not _check_rows(f, a, floor, rep, ProcessSettings(coverage_k=0.5))["passed"]


def test_failure_text_of_a_row_without_uncertainty():
    row = {"target": "t", "polarization": "VV", "max_error_db": 1.5, "tolerance_db": 1.0}
    assert check_failure_text(row) == ("CHECK TARGET FAILED: t VV: max error 1.50 dB > tolerance 1 dB: the "
                                       "calibration or the gate is suspect")
