"""Cloak metrics: reduction, band and sector averages, bandwidth, worst angle, bounds, uncertainty.

Conventions (README, The processing chain, step 6): sigma arrays are linear m^2 shaped
(angle, frequency); reduction = 10 log10(sigma_baseline / sigma_subject) dB, positive
means less scattering. Band and sector averages sum linear sigma first, then take dB.
Angles are wrapped to (-180, 180]; a sector START > STOP crosses +/-180.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .campaign import wrap_angle_deg
from .errors import InputError

DB = 10.0 / np.log(10.0)  # 4.3429...: dB per neper of power
BOUNDS = ("none", "lower", "upper", "undetermined")


def sector_mask(angle_deg, sector_deg: tuple[float, float] | None) -> np.ndarray:
    """Angles inside START:STOP (wrapped to (-180, 180]); START > STOP crosses +/-180; None = all."""
    a = wrap_angle_deg(angle_deg)
    if sector_deg is None:
        return np.ones(a.shape, bool)
    lo, hi = (float(wrap_angle_deg(x)) for x in sector_deg)
    if sector_deg[1] - sector_deg[0] >= 360:
        return np.ones(a.shape, bool)
    if lo <= hi:
        return (a >= lo - 1e-9) & (a <= hi + 1e-9)
    return (a >= lo - 1e-9) | (a <= hi + 1e-9)


def parse_sector(text: str) -> tuple[float, float]:
    """'START:STOP' in degrees (e.g. '-30:30', '150:-150')."""
    try:
        start, stop = (float(x) for x in text.split(":"))
    except ValueError:
        raise InputError(f"--sector-deg {text!r}: expected START:STOP in degrees, e.g. -30:30") from None
    return start, stop


def describe_sector(angle_deg, sector_deg: tuple[float, float] | None) -> dict:
    """What a sector holds: ``count`` of angles, ``first_deg`` and ``last_deg`` going
    counter-clockwise from START to STOP (wrapped angles), ``crosses_180`` and a ``text`` such as
    "61 angles, -30 to 30 deg" or "13 angles, 150 to -150 deg through 180 deg"."""
    a = np.asarray(wrap_angle_deg(angle_deg), float)
    inside = np.sort(a[sector_mask(a, sector_deg)])
    if inside.size == 0:
        return {"count": 0, "first_deg": None, "last_deg": None, "crosses_180": False, "text": "no angle"}
    crosses = False
    if sector_deg is not None and sector_deg[1] - sector_deg[0] < 360:
        lo, hi = (float(wrap_angle_deg(x)) for x in sector_deg)
        if lo > hi:  # runs from lo up through 180 to hi
            upper, lower = inside[inside >= lo - 1e-9], inside[inside <= hi + 1e-9]
            inside = np.concatenate([upper, lower])
            crosses = upper.size > 0 and lower.size > 0
    first, last = float(inside[0]), float(inside[-1])
    text = (f"{inside.size} angle{'s' if inside.size != 1 else ''}, {first:g} to {last:g} deg"
            + (" through 180 deg" if crosses else ""))
    return {"count": int(inside.size), "first_deg": first, "last_deg": last, "crosses_180": bool(crosses),
            "text": text}


def sector_statistics(values_db, percentiles=(10.0, 90.0)) -> dict:
    """Median and percentiles (numpy's linear interpolation) of dB values over every point given."""
    v = np.asarray(values_db, float).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        return {"median": None, **{f"p{q:g}": None for q in percentiles}}
    return {"median": float(np.median(v)), **{f"p{q:g}": float(np.percentile(v, q)) for q in percentiles}}


def point_bounds(subject_limited: np.ndarray, baseline_limited: np.ndarray) -> np.ndarray:
    """Per-point bound label: lower (subject at floor), upper (baseline at floor), undetermined (both)."""
    out = np.full(np.shape(subject_limited), "none", dtype=object)
    out[subject_limited & ~baseline_limited] = "lower"
    out[~subject_limited & baseline_limited] = "upper"
    out[subject_limited & baseline_limited] = "undetermined"
    return out


BOUND_PROBABILITY = 0.95  # one-sided probability with which a per-point bound holds
BOUND_Z = 1.6448536269514722  # the standard normal quantile at BOUND_PROBABILITY (scipy.stats.norm.ppf)


def floor_limits(sigma, floor, margin_db: float, z: float = BOUND_Z):
    """Per point: (floor-limited mask, upper limit, lower limit) of the true sigma (m^2).

    sigma = |s + n|^2 is measured with complex Gaussian noise n of power ``floor`` N. The noise's
    component along s is normal with variance N / 2 and |s + n| >= |s| + that component, so
    |s| <= |m| + z sqrt(N / 2) holds with probability at least Phi(z) (BOUND_PROBABILITY): the upper
    limit. The lower limit (|m| - z sqrt(N / 2), at least 0) is rougher; a point is floor-limited
    when its lower limit is below floor + margin, i.e. when it may not be clear of the floor.
    """
    amp = np.sqrt(np.asarray(sigma, float))
    h = z * np.sqrt(np.asarray(floor, float) / 2)
    upper = (amp + h) ** 2
    lower = np.maximum(amp - h, 0.0) ** 2
    return lower < floor * 10 ** (margin_db / 10), upper, lower


def bounded_sigma(sigma: np.ndarray, floor: np.ndarray, margin_db: float) -> tuple[np.ndarray, np.ndarray]:
    """(sigma with floor-limited points replaced by their upper limit, the floor-limited mask).

    A reduction computed with a subject point so replaced is a lower bound that holds with
    probability BOUND_PROBABILITY (:func:`floor_limits`); with a baseline point replaced, an upper bound.
    """
    limited, upper, _ = floor_limits(sigma, floor, margin_db)
    return np.where(limited, upper, sigma), limited


def sum_noise_u(sigma, floor, frequency_hz, cell_hz: float, axis=None):
    """Standard uncertainty of noise-corrected sums of sigma - floor (m^2): per point the power of
    |s + n|^2 varies by sqrt(2 sigma N + N^2) for complex Gaussian noise of power N; points within a
    correlation cell (an inverse gate duration) add linearly, cells and angles in quadrature.

    ``axis`` None: the whole (angle, frequency) sum; 0: per frequency (over angles); 1: per angle.
    """
    sigma = np.atleast_2d(np.asarray(sigma, float))
    floor = np.broadcast_to(floor, sigma.shape)
    u = np.sqrt(np.maximum(2 * np.maximum(sigma - floor, 0) * floor + floor ** 2, 0))
    if axis == 0:
        return np.sqrt(np.sum(u ** 2, axis=0))
    per_angle = _correlated_per_angle(u, frequency_hz, cell_hz)
    return per_angle if axis == 1 else float(np.sqrt(np.sum(per_angle ** 2)))


def significant_ratio_db(b_sum, s_sum, u_b, u_s, k: float):
    """(10 log10(b / s) dB, bound label) of noise-corrected sums with standard uncertainties.

    A sum below k u is not clear of the floor: it is replaced by max(sum, 0) + k u, an upper
    limit of it, and the ratio becomes a lower bound (subject), an upper bound (baseline) or
    undetermined (both). Works element-wise on arrays.
    """
    b_sum, s_sum = np.asarray(b_sum, float), np.asarray(s_sum, float)
    s_lim = s_sum < k * np.asarray(u_s)
    b_lim = b_sum < k * np.asarray(u_b)
    s_val = np.where(s_lim, np.maximum(s_sum, 0) + k * np.asarray(u_s), s_sum)
    b_val = np.where(b_lim, np.maximum(b_sum, 0) + k * np.asarray(u_b), b_sum)
    with np.errstate(divide="ignore", invalid="ignore"):
        value = 10 * np.log10(b_val / np.maximum(s_val, 1e-300))
    return value, point_bounds(s_lim, b_lim)


def corrected_reduction(sigma_b, floor_b, sigma_s, floor_s, frequency_hz, cell_hz: float, k: float) -> dict:
    """The band and sector metrics from noise-corrected sums (README, The processing chain, step 6).

    Inputs (angle, frequency) over the sector and the band; floors (frequency,) m^2. The floor's
    noise power is subtracted before summing (E|s + n|^2 = |s|^2 + N), so a cloak near the floor is
    not made to look worse than it is; a sum not clear of the floor at k standard uncertainties
    makes its metric a bound (:func:`significant_ratio_db`). Returns band_db, band_bound,
    curve_db (f), curve_bound (f), angle_db (angle) and the sums.
    """
    sb, ss = np.asarray(sigma_b, float), np.asarray(sigma_s, float)
    nb, ns = np.broadcast_to(floor_b, sb.shape), np.broadcast_to(floor_s, ss.shape)
    band_db, band_bound = significant_ratio_db(
        np.sum(sb - nb), np.sum(ss - ns), sum_noise_u(sb, nb, frequency_hz, cell_hz),
        sum_noise_u(ss, ns, frequency_hz, cell_hz), k)
    curve_db, curve_bound = significant_ratio_db(
        np.sum(sb - nb, axis=0), np.sum(ss - ns, axis=0), sum_noise_u(sb, nb, frequency_hz, cell_hz, axis=0),
        sum_noise_u(ss, ns, frequency_hz, cell_hz, axis=0), k)
    angle_db, _ = significant_ratio_db(
        np.sum(sb - nb, axis=1), np.sum(ss - ns, axis=1), sum_noise_u(sb, nb, frequency_hz, cell_hz, axis=1),
        sum_noise_u(ss, ns, frequency_hz, cell_hz, axis=1), k)
    return {"band_db": float(band_db), "band_bound": str(band_bound), "curve_db": curve_db,
            "curve_bound": curve_bound, "angle_db": angle_db,
            "baseline_sum": float(np.sum(sb - nb)), "subject_sum": float(np.sum(ss - ns)),
            "baseline_curve_sum": np.sum(sb - nb, axis=0), "subject_curve_sum": np.sum(ss - ns, axis=0)}


def reduction_db(sigma_baseline, sigma_subject):
    """10 log10(sigma_baseline / sigma_subject), dB (positive = less scattering)."""
    return 10 * np.log10(np.asarray(sigma_baseline) / np.asarray(sigma_subject))


@dataclass(frozen=True)
class Bandwidth:
    best_db: float
    best_hz: float
    width_hz: float
    start_hz: float | None
    stop_hz: float | None
    truncated: bool
    fractional: float


def bandwidth_above(frequency_hz, curve_db, threshold_db: float) -> Bandwidth:
    """Contiguous span around the best frequency where the curve >= threshold, edges interpolated.

    Zero width when the best reduction is below the threshold; ``truncated`` when the span
    reaches a band edge. Fractional bandwidth = span / midpoint of the span.
    """
    f = np.asarray(frequency_hz, float)
    r = np.asarray(curve_db, float)
    i = int(np.nanargmax(r))
    best, fbest = float(r[i]), float(f[i])
    if best < threshold_db:
        return Bandwidth(best, fbest, 0.0, None, None, False, 0.0)
    lo = i
    while lo > 0 and r[lo - 1] >= threshold_db:
        lo -= 1
    hi = i
    while hi < len(r) - 1 and r[hi + 1] >= threshold_db:
        hi += 1
    truncated = lo == 0 or hi == len(r) - 1
    start = f[lo] if lo == 0 else _crossing(f[lo - 1], f[lo], r[lo - 1], r[lo], threshold_db)
    stop = f[hi] if hi == len(r) - 1 else _crossing(f[hi], f[hi + 1], r[hi], r[hi + 1], threshold_db)
    width = float(stop - start)
    mid = 0.5 * (start + stop)
    return Bandwidth(best, fbest, width, float(start), float(stop), bool(truncated), width / mid if mid else 0.0)


def _crossing(f0, f1, r0, r1, level) -> float:
    return float(f0 + (level - r0) * (f1 - f0) / (r1 - r0))


def interference_uncertainty_db(snr_db):
    """Standard uncertainty (dB) of a power next to a random-phase interferer SNR dB below.

    8.686 * 10^(-SNR/20) / sqrt(2) (README, The processing chain, step 7: derived from 20 log10(1 +/- 10^(-SNR/20))).
    """
    return 8.685889638 * 10 ** (-np.asarray(snr_db) / 20) / np.sqrt(2)


def power_uncertainty_db(sigma, floor, rep_rel_u=None) -> np.ndarray:
    """Standard uncertainty (dB, 1-sigma) of measured powers sigma (m^2) over a noise floor (m^2).

    The floor's interference term, :func:`interference_uncertainty_db` at SNR = sigma / floor
    (8.686 sqrt(floor / sigma) / sqrt(2) dB), combined in quadrature with the repeatability
    ``rep_rel_u`` (relative standard uncertainty of power, dimensionless; 10 / ln 10 = 4.343 dB
    per unit, first order) when given. Arrays broadcast.
    """
    sigma = np.maximum(np.asarray(sigma, float), 1e-300)
    floor = np.maximum(np.asarray(floor, float), 1e-300)
    u = interference_uncertainty_db(10 * np.log10(sigma / floor))
    if rep_rel_u is not None:
        u = np.sqrt(u ** 2 + (10 / np.log(10) * np.asarray(rep_rel_u, float)) ** 2)
    return u


def interference_bounds_db(snr_db) -> tuple[np.ndarray, np.ndarray]:
    """Worst-case interference error (+, -) dB: 20 log10(1 +/- 10^(-SNR/20))."""
    x = 10 ** (-np.asarray(snr_db, float) / 20)
    with np.errstate(divide="ignore"):
        return 20 * np.log10(1 + x), 20 * np.log10(np.maximum(1 - x, 1e-300))


def correlated_sum_uncertainty(u_abs: np.ndarray, frequency_hz: np.ndarray, cell_hz: float) -> float:
    """Standard uncertainty of a sum of values with absolute uncertainties u_abs (angle, frequency).

    Samples closer than one correlation cell (an inverse gate duration) in frequency are fully
    correlated (added linearly); cells and angles are independent (added in quadrature), as
    README, The processing chain, step 7 says.
    """
    return float(np.sqrt(np.sum(_correlated_per_angle(np.atleast_2d(u_abs), frequency_hz, cell_hz) ** 2)))


def _correlated_per_angle(u: np.ndarray, frequency_hz, cell_hz: float) -> np.ndarray:
    """Per angle (row of u), sqrt(sum over cells of (sum of u within the cell)^2): samples closer than one
    correlation cell in frequency add linearly, cells in quadrature."""
    f = np.asarray(frequency_hz, float)
    cell = np.floor((f - f[0]) / cell_hz).astype(int) if cell_hz > 0 else np.arange(len(f))
    sums = np.zeros((u.shape[0], cell.max() + 1))
    np.add.at(sums, (slice(None), cell), u)
    return np.sqrt(np.sum(sums ** 2, axis=1))


OFFSET_MIN_CORRELATION = 0.5  # below this the patterns share too little structure to align


def mounting_offset_deg(angle_deg, pattern_baseline, pattern_subject, max_offset_deg: float = 10.0) -> float:
    """Mounting offset only (see :func:`mounting_offset`)."""
    return mounting_offset(angle_deg, pattern_baseline, pattern_subject, max_offset_deg)[0]


def mounting_offset(angle_deg, pattern_baseline, pattern_subject,
                    max_offset_deg: float = 10.0) -> tuple[float, float]:
    """Mounting offset, subject minus baseline (deg), from the cross-correlation peak.

    Patterns are band-averaged RCS in dB over uniformly stepped angles. Over a full turn the
    correlation is circular, otherwise it runs over the common span (each lag normalised by
    its overlap). Only lags within +/- ``max_offset_deg`` are searched: a mounting error is a
    few degrees, and a cloak that moves a lobe (a seam, a bolt) must not pass for one. The
    peak is refined by a parabola, so the estimate is finer than one angle step. A positive
    offset means subject(angle) ~ baseline(angle - offset). Returns (offset, correlation
    coefficient of the two patterns at the best whole lag): an offset is meaningful only when
    the coefficient is high (a flat baseline pattern has nothing to align on).
    """
    a = np.asarray(angle_deg, float)
    if len(a) < 3:
        return 0.0, 0.0
    order = np.argsort(a)
    a = a[order]
    b = np.asarray(pattern_baseline, float)[order]
    s = np.asarray(pattern_subject, float)[order]
    step = float(np.median(np.diff(a)))
    n = len(a)
    full_turn = np.allclose(np.diff(a), step, atol=1e-6 * max(step, 1)) and abs(n * step - 360) < 1e-6
    b = b - b.mean()
    s = s - s.mean()
    max_lag = max(1, min(int(np.ceil(max_offset_deg / step)), n // 2 if full_turn else n - 2))
    lags = np.arange(-max_lag - 1, max_lag + 2)
    if full_turn:
        xc = np.array([np.dot(np.roll(b, lag), s) for lag in lags])
    else:
        xc = np.array([np.dot(b[max(0, -lag):n - max(0, lag)], s[max(0, lag):n - max(0, -lag)])
                       / (n - abs(lag)) for lag in lags])
    inner = slice(1, len(lags) - 1)
    k = 1 + int(np.argmax(xc[inner]))
    y0, y1, y2 = xc[k - 1], xc[k], xc[k + 1]
    denom = y0 - 2 * y1 + y2
    frac = 0.5 * (y0 - y2) / denom if denom < 0 else 0.0
    shifted = np.roll(b, lags[k]) if full_turn else b
    norm = np.linalg.norm(shifted) * np.linalg.norm(s)
    corr = float(np.dot(shifted, s) / norm) if full_turn and norm > 0 else float(
        y1 / max(np.std(b) * np.std(s), 1e-300))
    return float(np.clip((lags[k] + frac) * step, -max_offset_deg, max_offset_deg)), corr


@dataclass(frozen=True)
class MountingOffset:
    """A mounting-offset estimate: ``offset_deg`` is None when it is not reliable, ``reason`` says why."""

    offset_deg: float | None
    correlation: float
    raw_deg: float
    reason: str | None


def assess_mounting_offset(angle_deg, pattern_baseline, pattern_subject,
                           max_offset_deg: float = 10.0) -> MountingOffset:
    """:func:`mounting_offset` with a verdict: no value when the peak sits at the search limit
    (+/- ``max_offset_deg``: the true peak lies beyond it or there is none) or the patterns
    correlate less than OFFSET_MIN_CORRELATION (nothing shared to align on)."""
    raw, corr = mounting_offset(angle_deg, pattern_baseline, pattern_subject, max_offset_deg)
    a = np.sort(np.asarray(angle_deg, float))
    step = float(np.median(np.diff(a))) if a.size > 1 else 0.0
    if a.size < 3:
        return MountingOffset(None, corr, raw, "fewer than 3 angles")
    if corr < OFFSET_MIN_CORRELATION:
        return MountingOffset(None, corr, raw, f"the subject's and baseline's angular patterns correlate too "
                                               f"weakly ({corr:.2f} < {OFFSET_MIN_CORRELATION:g}) to align on")
    if abs(raw) >= max_offset_deg - 0.5 * step:
        return MountingOffset(None, corr, raw, f"the correlation peak lies at the search limit "
                                               f"(+/-{max_offset_deg:g} deg), so the true offset is not within it")
    return MountingOffset(raw, corr, raw, None)


def resample_angles(angle_src, values, angle_dst, period: bool = True) -> np.ndarray:
    """Linear interpolation of values (angle, ...) from angle_src to angle_dst, periodic in 360 deg."""
    src = np.asarray(angle_src, float)
    order = np.argsort(src)
    src = src[order]
    vals = np.asarray(values)[order]
    dst = np.asarray(angle_dst, float)
    if period:
        src = np.concatenate([src - 360, src, src + 360])
        vals = np.concatenate([vals, vals, vals], axis=0)
        dst = np.mod(dst - src[len(order)], 360) + src[len(order)]
    idx = np.clip(np.searchsorted(src, dst) - 1, 0, len(src) - 2)
    w = ((dst - src[idx]) / (src[idx + 1] - src[idx])).reshape((-1,) + (1,) * (vals.ndim - 1))
    return (1 - w) * vals[idx] + w * vals[idx + 1]
