"""Background subtraction, drift correction, substitution calibration and the clutter/noise floor.

Arrays are complex numpy arrays with frequency on the last axis, leading axes
(polarization, angle[, repeat]). Ranges in metres, frequencies in Hz, engineering
exp(+j w t). See README, The processing chain, steps 1, 3 and 5.

Calibration (substitution): with D the gated, background-subtracted sweep and A the
complex scattering amplitude (m), D_ref = G' A_ref exp(-j 2 k R_ref) / R_ref^2 where G'
holds the system response and the reference-plane offset. The factor
K = A_ref,theory / (D_ref R_ref^2 exp(+j 2 k R_ref)) then gives any target's amplitude as
A_t = K D_t R_t^2 exp(+j 2 k R_t), which is README's
A_ref * D_t / D_ref * (R_t / R_ref)^2 * exp(+j 2 k (R_t - R_ref)).
"""

from __future__ import annotations

import numpy as np

from . import timedomain
from .constants import C0

FLOOR_SMOOTHING_CELLS = 5  # floor averaged over a frequency window this many inverse gate durations wide
NOISE_SEGMENTS = 16  # the no-repeat noise estimate splits the range profile into up to this many segments
NOISE_SEGMENT_SAMPLES = 100  # ... each holding at least this many samples (bins x sweeps)
DRIFT_LEVEL_DB = 20.0  # drift fit uses profile bins outside the gate within this many dB of their peak


def mean_over_repeats(sweeps: np.ndarray, axis: int = -2) -> tuple[np.ndarray, np.ndarray, int]:
    """(complex mean over the repeat axis, variance of that mean per point, repeat count).

    The variance of the mean is sum |x - mean|^2 / (N (N - 1)), in the sweeps' units squared;
    zero for a single sweep. It holds phase drift too: the uncertainty of the power comes
    from :func:`power_repeatability`.
    """
    n = sweeps.shape[axis]
    mean = sweeps.mean(axis=axis)
    if n < 2:
        return mean, np.zeros(mean.shape), n
    dev = sweeps - np.expand_dims(mean, axis)
    var_mean = np.sum(np.abs(dev) ** 2, axis=axis) / (n * (n - 1))
    return mean, var_mean, n


def power_repeatability(gated: np.ndarray, axis: int = -2) -> np.ndarray:
    """Relative standard uncertainty (dimensionless, 1-sigma) of the power |mean|^2 of repeated
    gated sweeps (..., repeat, ..., nf), from their spread along ``axis``; zero for one sweep.

    To first order a repeat's power differs from the mean's by 2 |mean| times the component of
    its deviation along the mean's phase, p_r = Re(conj(mean) dev_r) / |mean|; a deviation at
    right angles to the mean (pure phase drift between repeats) leaves the power unchanged. So
    u_rel = 2 sqrt(sum_r p_r^2 / (N (N - 1))) / |mean|: the experimental standard deviation of
    the mean of the repeats' powers (JCGM 100:2008, 4.2.3), relative to the mean power.
    """
    n = gated.shape[axis]
    mean = gated.mean(axis=axis, keepdims=True)
    mag = np.maximum(np.abs(mean), 1e-300)
    if n < 2:
        return np.zeros(np.squeeze(mag, axis=axis).shape)
    along = np.real(np.conj(mean) * (gated - mean)) / mag
    u = 2 * np.sqrt(np.sum(along ** 2, axis=axis, keepdims=True) / (n * (n - 1))) / mag
    return np.squeeze(u, axis=axis)


def background_angle_index(bg_angles, target_angles) -> np.ndarray:
    """Index of the background sweep that serves each target angle: the same angle, or its single sweep."""
    if len(bg_angles) == 1:
        return np.zeros(len(target_angles), int)
    from .campaign import wrap_angle_deg

    keys = {round(float(a), 6): i for i, a in enumerate(wrap_angle_deg(bg_angles))}
    return np.array([keys[round(float(a), 6)] for a in wrap_angle_deg(target_angles)], int)


def background_at_angles(bg_mean: np.ndarray, bg_angles, target_angles) -> np.ndarray:
    """Background (pol, angle, f) at the target's angles: the same angle, or its single sweep."""
    return bg_mean[:, background_angle_index(bg_angles, target_angles), :]


def drift_aligned_background(frequency_hz, target, background, center_m, span_m, window="kaiser",
                             kaiser_beta=6.0, pad_factor=4) -> np.ndarray:
    """Background scaled by the complex gain that best maps it onto the target outside the gate.

    Per sweep, alpha = sum(T B*) / sum(|B|^2) over range-profile bins outside the target's
    gate (with a guard of half a span) where the background is within DRIFT_LEVEL_DB of its
    strongest echo there (coupling, chamber echoes): a least-squares fit of the system's gain
    and phase drift between the two sweeps. Returns alpha * background.
    """
    r, pt = timedomain.range_profile(frequency_hz, target, window, kaiser_beta, pad_factor)
    _, pb = timedomain.range_profile(frequency_hz, background, window, kaiser_beta, pad_factor)
    period = r[-1] + (r[1] - r[0])
    d = np.abs((r - center_m + period / 2) % period - period / 2)
    outside = d > span_m
    mag = np.abs(pb) * outside
    strong = mag >= mag.max(axis=-1, keepdims=True) * 10 ** (-DRIFT_LEVEL_DB / 20)
    strong &= outside
    num = np.sum(pt * np.conj(pb) * strong, axis=-1)
    den = np.sum(np.abs(pb) ** 2 * strong, axis=-1)
    alpha = np.where(den > 0, num / np.where(den > 0, den, 1), 1.0)
    return alpha[..., None] * background


def range_phase(frequency_hz, range_m) -> np.ndarray:
    """exp(+j 2 k R): moves a sweep's phase reference from the VNA plane to range R."""
    return np.exp(2j * (2 * np.pi * np.asarray(frequency_hz) / C0) * range_m)


def calibration_factor(frequency_hz, ref_gated, ref_theory, range_ref_m) -> np.ndarray:
    """K (..., nf) = A_theory / (D_ref R_ref^2 exp(+j 2 k R_ref)); A_t = K D_t R_t^2 exp(+j 2 k R_t)."""
    return ref_theory / (ref_gated * range_ref_m ** 2 * range_phase(frequency_hz, range_ref_m))


def calibrated_amplitude(frequency_hz, factor, gated, range_m) -> np.ndarray:
    """Complex amplitude A (m) of a target at range_m from its gated sweeps and K (broadcast)."""
    return factor * gated * (range_m ** 2) * range_phase(frequency_hz, range_m)


def geometric_mean_factor(k_hh, k_vv) -> np.ndarray:
    """sqrt(K_HH K_VV), on the branch halfway between the two along the shorter arc.

    The phase is arg K_HH (unwrapped over frequency) plus half of arg(K_VV / K_HH) (wrapped to
    (-pi, pi] at the first frequency, then unwrapped), so it is continuous over frequency and
    never takes the opposite branch when the two phases straddle +/-180 degrees (halving two
    separately unwrapped phases can land 180 degrees off, a sign flip). Calibrates HV/VH
    without a cross-polarized reference: an approximation, flagged as such.
    """
    k_hh, k_vv = np.asarray(k_hh), np.asarray(k_vv)
    mag = np.sqrt(np.abs(k_hh) * np.abs(k_vv))
    phase = np.unwrap(np.angle(k_hh)) + 0.5 * np.unwrap(np.angle(k_vv * np.conj(k_hh)))
    return mag * np.exp(1j * phase)


def echo_delays_m(frequency_hz, sweeps: np.ndarray, reference: np.ndarray, mask=None) -> np.ndarray:
    """One-way range shift (m) of each sweep (..., nf) against ``reference`` (nf,).

    With X = sweep * conj(reference) = |.| exp(-j 2 k d), d comes from the mean phase step of
    X between neighbouring frequencies (each step is -4 pi df d / c0; no unwrapping needed,
    unambiguous for |d| < c0 / (4 df)); positive d = farther from the antenna. ``mask`` (nf,)
    restricts the fit to a contiguous part of the band (the valid band: gated band edges are
    distorted).
    """
    f = np.asarray(frequency_hz, dtype=float)
    df = (f[-1] - f[0]) / (f.size - 1)
    x = sweeps * np.conj(reference)
    if mask is not None:
        x = x[..., np.asarray(mask, dtype=bool)]
    step = np.sum(x[..., 1:] * np.conj(x[..., :-1]), axis=-1)
    return -np.angle(step) * C0 / (4 * np.pi * df)


def aligned_angle_mean(frequency_hz, sweeps: np.ndarray, range_m: float, mask=None) -> tuple[np.ndarray, np.ndarray]:
    """Mean over angles of the sweeps (angle, nf) of an angle-independent reference (a sphere,
    an upright cylinder), each first moved to the angles' mean range; and the shifts d (angle,)
    in m, relative to their mean.

    A reference off the turntable axis is nearer or farther at each angle; a plain complex
    mean then loses |mean exp(-j 2 k d)|, J0(2 k delta) over a full turn for an off-axis
    distance delta (0.5 dB at 12 GHz for 1 mm). Each sweep's shift (:func:`echo_delays_m`,
    first against the first sweep, then against the aligned mean, over ``mask`` of the band) is
    removed with exp(+j 2 k d) and ((R + d) / R)^2 before averaging.
    """
    f = np.asarray(frequency_hz, dtype=float)
    k = 2 * np.pi * f / C0
    d = echo_delays_m(f, sweeps, sweeps[0], mask)
    for _ in range(2):
        d = d - d.mean()
        aligned = sweeps * np.exp(2j * k * d[:, None]) * ((range_m + d[:, None]) / range_m) ** 2
        mean = aligned.mean(axis=0)
        d = d + echo_delays_m(f, aligned, mean, mask)
    d = d - d.mean()
    aligned = sweeps * np.exp(2j * k * d[:, None]) * ((range_m + d[:, None]) / range_m) ** 2
    return aligned.mean(axis=0), d


OFF_AXIS_MAX_CONDITION = 10.0  # the off-axis fit is reported only when this well conditioned


def off_axis_distance_m(angles_deg, shifts_m) -> float | None:
    """Distance (m) of a reference's centre from the turntable axis, from its range shift per angle.

    A centre at distance delta and azimuth phi from the axis is at range R - delta cos(t + phi)
    at turntable angle t: shifts d(t) = c + a cos t + b sin t, fitted by least squares, give
    delta = sqrt(a^2 + b^2). None when fewer than three angles or when they span too narrow an
    arc to separate the terms (condition number of the fit above OFF_AXIS_MAX_CONDITION).
    """
    t = np.deg2rad(np.asarray(angles_deg, dtype=float))
    if t.size < 3:
        return None
    design = np.column_stack([np.ones_like(t), np.cos(t), np.sin(t)])
    if np.linalg.cond(design) > OFF_AXIS_MAX_CONDITION:
        return None
    (_, a, b), *_ = np.linalg.lstsq(design, np.asarray(shifts_m, dtype=float), rcond=None)
    return float(np.hypot(a, b))


def noise_variance_from_profile(frequency_hz, sweeps, window="kaiser", kaiser_beta=6.0) -> np.ndarray:
    """Per-point noise variance (pol,) of sweeps (pol, ..., nf) without repeats, in the sweeps' units
    squared (|S|^2 per frequency point): a rough estimate.

    The unpadded range profile's bins are split into up to NOISE_SEGMENTS contiguous segments
    (each with at least NOISE_SEGMENT_SAMPLES bins x sweeps); each
    segment's median of |profile|^2 over its bins, sweeps and angles is taken, and the quietest
    segment, with every segment whose median lies within three standard errors of it, gives the
    median: there only noise lives (coupling near range 0, the echoes and their window sidelobes
    raise the others). Complex Gaussian noise power per bin is exponentially
    distributed, so its mean is median / ln 2 (the exponential distribution's median is
    ln 2 times its mean); a bin of the window-normalised profile holds s^2 sum(w^2) / sum(w)^2 of
    the per-point variance s^2. Still rough: it is biased high where sidelobes reach every segment
    (an echo more than about 80 dB above the noise per point), and with few samples per segment
    (one short sweep) a single estimate can come out a few dB low (its median over many sweeps
    is within a few tenths of a dB).
    """
    w = timedomain.frequency_window(window, sweeps.shape[-1], kaiser_beta)
    # unpadded profile bins hold sum(w s e^(..)) / sum(w)
    _, p = timedomain.range_profile(frequency_hz, sweeps, window, kaiser_beta, pad_factor=1)
    power = np.abs(p) ** 2
    power = np.moveaxis(power, -1, 1).reshape(power.shape[0], power.shape[-1], -1)  # (pol, bin, sweep)
    n_segments = max(1, min(NOISE_SEGMENTS, power.shape[1] * power.shape[2] // NOISE_SEGMENT_SAMPLES, power.shape[1]))
    segments = np.array_split(np.arange(power.shape[1]), n_segments)
    medians = np.stack([np.median(power[:, seg, :].reshape(power.shape[0], -1), axis=-1) for seg in segments])
    # segments whose median is within three standard errors of the quietest one hold noise too:
    # the median of n independent exponential samples has relative standard error
    # 1 / (ln 2 sqrt(n)); neighbouring bins of a windowed profile are correlated, so n counts
    # bins over the window's equivalent noise bandwidth N sum(w^2) / sum(w)^2 (in bins)
    enbw = w.size * np.sum(w ** 2) / w.sum() ** 2
    n_seg = min(len(seg) for seg in segments) * power.shape[2] / enbw
    quiet = medians <= medians.min(axis=0) * (1 + 3 / (np.log(2) * np.sqrt(n_seg)))
    per_bin = np.array([np.median(power[i][np.concatenate([seg for seg, q in zip(segments, quiet[:, i]) if q])])
                        for i in range(power.shape[0])]) / np.log(2)
    return per_bin * w.sum() ** 2 / np.sum(w ** 2)


def moving_average(x: np.ndarray, width: int) -> np.ndarray:
    """Centred moving average over the last axis, edges padded with the end values.

    The same as scipy.ndimage.uniform_filter1d(x, width, mode="nearest") (a test checks it).
    """
    if width <= 1:
        return x
    left = width // 2
    right = width - 1 - left
    padded = np.concatenate([np.repeat(x[..., :1], left, axis=-1), x, np.repeat(x[..., -1:], right, axis=-1)],
                            axis=-1)
    c = np.cumsum(padded, axis=-1)
    c = np.concatenate([np.zeros(x.shape[:-1] + (1,)), c], axis=-1)
    return (c[..., width:] - c[..., :-width]) / width


def gated_noise_power(frequency_hz, bg_sweeps, center_m, span_m, **gate) -> tuple[np.ndarray, str]:
    """Per-sweep gated noise power (pol, nf) seen in one sweep, in the sweeps' units squared, and how
    it was estimated.

    With repeated background sweeps (pol, angle, repeat, nf): the gated deviations from their
    mean, sum |g(B_r) - g(B_mean)|^2 / (N - 1), averaged over angles (the chamber floor does not
    depend on the turntable angle). Without repeats: the noise variance from the profile
    (:func:`noise_variance_from_profile`) times :func:`timedomain.gate_noise_gain`. Smoothed over a
    frequency window FLOOR_SMOOTHING_CELLS inverse gate durations wide, after dividing by the gate's
    noise gain (which rises towards the band edges, where the gate's normalisation divides by a
    falling response): the smoothed quantity is then flat for white noise, and the gain is
    multiplied back, so the average does not spill the edges' rise into the band (a bias of
    several dB at the valid band's edges otherwise).
    """
    f = np.asarray(frequency_hz)
    n_rep = bg_sweeps.shape[2]
    gain = timedomain.gate_noise_gain(f, center_m, span_m, **gate)
    if n_rep >= 2:
        gated = timedomain.time_gate(f, bg_sweeps, center_m, span_m, **gate)
        dev = gated - gated.mean(axis=2, keepdims=True)
        power = np.sum(np.abs(dev) ** 2, axis=2) / (n_rep - 1)
        power = power.mean(axis=1)
        how = f"repeated background sweeps ({n_rep} repeats x {bg_sweeps.shape[1]} angle(s))"
    else:
        var = noise_variance_from_profile(f, bg_sweeps[:, :, 0, :], gate.get("window", "kaiser"),
                                          gate.get("kaiser_beta", 6.0))
        power = var[:, None] * gain[None, :]
        how = "gated noise estimated from the background's range profile (no repeats: rough)"
    cell_hz = C0 / (2 * span_m)
    width = max(1, int(round(FLOOR_SMOOTHING_CELLS * cell_hz / (f[1] - f[0]))))
    power = moving_average(power / gain, min(width, power.shape[-1])) * gain
    return power, how
