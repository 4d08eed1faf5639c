"""The repeatability term: relative standard uncertainty of power from repeated sweeps.

Reference: the experimental standard deviation of the mean, s(q_mean) = s(q_k) / sqrt(N)
(JCGM 100:2008, GUM, 4.2.3), applied to the repeats' powers q_k = |x_k|^2 and computed
directly with numpy (std with ddof=1), relative to the mean power.
"""

from __future__ import annotations

import numpy as np

from cloakrcs import calibrate


def _direct(x: np.ndarray, axis: int) -> np.ndarray:
    # GUM 4.2.3: s(q_mean) = s(q_k) / sqrt(N), here of the power of each repeat, over the mean power
    q = np.abs(x) ** 2
    n = x.shape[axis]
    return np.std(q, axis=axis, ddof=1) / np.sqrt(n) / np.mean(q, axis=axis)


def _old(x: np.ndarray, axis: int) -> np.ndarray:
    # the full complex variance of the mean: phase drift counted as if it changed the power
    _, var, _ = calibrate.mean_over_repeats(x, axis=axis)
    return 2 * np.sqrt(var) / np.abs(x.mean(axis=axis))


def test_small_amplitude_and_phase_drift_agrees_with_the_direct_definition():
    rng = np.random.default_rng(20261202)
    shape = (2, 36, 5, 201)  # (pol, angle, repeat, f)
    base = (rng.standard_normal((2, 36, 1, 201)) + 1j * rng.standard_normal((2, 36, 1, 201)))
    amp_db = rng.normal(0.0, 0.05, shape)  # 0.05 dB rms amplitude drift
    phase = np.deg2rad(rng.normal(0.0, 0.3, shape))  # 0.3 deg rms phase drift
    x = base * 10 ** (amp_db / 20) * np.exp(1j * phase)
    got = calibrate.power_repeatability(x, axis=2)
    ref = _direct(x, axis=2)
    assert got.shape == (2, 36, 201)
    np.testing.assert_allclose(got, ref, rtol=0.10)
    # the old formula overstates it when the phase drift is the larger part
    assert np.median(_old(x, 2) / ref) > 1.2


def test_pure_phase_drift_leaves_the_power_certain():
    rng = np.random.default_rng(7)
    shape = (1, 10, 4, 101)
    base = 1e-3 * (1 + 1j) * np.ones((1, 10, 1, 101))
    x = base * np.exp(1j * np.deg2rad(rng.normal(0.0, 0.3, shape)))
    got = calibrate.power_repeatability(x, axis=2)
    assert np.max(_direct(x, 2)) < 1e-12  # every repeat has the same power
    assert np.max(got / _old(x, 2)) < 1e-2  # second order in the phase only
    assert np.max(got) < 1e-4


def test_single_repeat_and_other_axis():
    x = np.ones((2, 3, 1, 5), complex)
    one = calibrate.power_repeatability(x, axis=2)
    assert one.shape == (2, 3, 5) and np.all(one == 0)
    rng = np.random.default_rng(3)
    y = (1 + 0.01 * rng.standard_normal((4, 6, 7))) * np.exp(0.5j)
    np.testing.assert_allclose(calibrate.power_repeatability(y, axis=1), _direct(y, 1), rtol=0.10)
