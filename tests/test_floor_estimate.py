"""The gated noise floor on simulated sweeps whose noise variance is known.

Sweeps hold a strong coupling term near range 0, two chamber echoes, a point echo in the gate
and complex white Gaussian noise of known variance (numpy, fixed seeds). The exact gated noise
power per frequency is that variance times timedomain.gate_noise_gain, which
tests/test_timedomain checks against gating unit sweeps one by one.
"""

from __future__ import annotations

import numpy as np
import pytest

from cloakrcs import calibrate, timedomain
from cloakrcs.constants import C0

F = np.linspace(8e9, 12e9, 401)
CENTER, SPAN = 4.0, 0.6
SIGMA_N = 1e-4  # rms of the complex noise per frequency point: variance 1e-8


def _sweeps(seed: int, repeats: int, angles: int = 40) -> np.ndarray:
    """(1, angle, repeat, f): coupling 70 dB, echoes 50 dB and 30 dB above the noise per point."""
    rng = np.random.default_rng(seed)
    k = 2 * np.pi * F / C0
    static = (0.3 * np.exp(-2j * k * 0.3) + 3e-2 * (np.exp(-2j * k * 2.2) + np.exp(-2j * k * 6.0))
              + 3e-3 * np.exp(-2j * k * CENTER))
    shape = (1, angles, repeats, F.size)
    noise = SIGMA_N / np.sqrt(2) * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape))
    return static + noise


def test_noise_variance_without_repeats_within_1_db():
    # the mean of complex Gaussian noise power is median / ln 2 (exponential distribution,
    # median = ln 2 x mean: e.g. Papoulis & Pillai, Probability, Random Variables and
    # Stochastic Processes, the exponential law)
    for seed in (1, 2, 3):
        var = calibrate.noise_variance_from_profile(F, _sweeps(seed, 1)[:, :, 0, :])
        assert 10 * np.log10(var[0] / SIGMA_N ** 2) == pytest.approx(0.0, abs=1.0), seed
    # the median over every range bin (coupling and clutter sidelobes included) is far off here
    x = _sweeps(1, 1)[:, :, 0, :]
    _, p = timedomain.range_profile(F, x, pad_factor=1)
    w = timedomain.frequency_window("kaiser", F.size)
    all_bins = np.median(np.abs(p) ** 2) / np.log(2) * w.sum() ** 2 / np.sum(w ** 2)
    assert 10 * np.log10(all_bins / SIGMA_N ** 2) > 3.0


def test_noise_variance_of_pure_noise_single_sweeps_unbiased():
    # one short sweep of noise alone: few samples per segment, so one estimate scatters by
    # a dB or more; over 60 seeded sweeps the median estimate is within 0.5 dB of the truth
    est = []
    for seed in range(60):
        rng = np.random.default_rng(1000 + seed)
        x = SIGMA_N / np.sqrt(2) * (rng.standard_normal((1, 1, F.size)) + 1j * rng.standard_normal((1, 1, F.size)))
        est.append(10 * np.log10(calibrate.noise_variance_from_profile(F, x)[0] / SIGMA_N ** 2))
    assert np.median(est) == pytest.approx(0.0, abs=0.5)


def test_gated_floor_with_repeats_exact_at_valid_band_edges():
    # exact: variance x gate_noise_gain (the gate is linear; white noise of variance s^2 comes
    # out with power s^2 sum_n w_n^2 |G[k - n]|^2 / |distortion|^2 per frequency)
    exact = SIGMA_N ** 2 * timedomain.gate_noise_gain(F, CENTER, SPAN)
    valid = np.flatnonzero(timedomain.valid_band_mask(F, SPAN))
    power, how = calibrate.gated_noise_power(F, _sweeps(7, 6, angles=72), CENTER, SPAN)
    assert "repeated" in how
    err = 10 * np.log10(power[0] / exact)
    for i in (valid[0], valid[1], valid[-2], valid[-1]):
        assert err[i] == pytest.approx(0.0, abs=0.5), (F[i], err[i])
    assert np.max(np.abs(err[valid])) <= 0.5
    # the gain rises towards the edges, so a plain moving average of the power (as wide as the
    # floor's: FLOOR_SMOOTHING_CELLS inverse gate durations) is biased there by more than 2 dB
    assert exact[valid[0]] > 1.5 * exact[F.size // 2]
    width = int(round(calibrate.FLOOR_SMOOTHING_CELLS * C0 / (2 * SPAN) / (F[1] - F[0])))
    plain = calibrate.moving_average(exact, width)
    assert 10 * np.log10(plain[valid[0]] / exact[valid[0]]) > 2.0


def test_gated_floor_without_repeats_follows_the_gain():
    exact = SIGMA_N ** 2 * timedomain.gate_noise_gain(F, CENTER, SPAN)
    power, how = calibrate.gated_noise_power(F, _sweeps(8, 1), CENTER, SPAN)
    assert "no repeats" in how
    err = 10 * np.log10(power[0] / exact)
    # the shape is the gain's exactly (a constant variance times it); the level within 1 dB
    assert np.ptp(err) < 1e-9
    assert err[0] == pytest.approx(0.0, abs=1.0)
