"""Range profiles, frequency windows and time gating of band-pass VNA sweeps.

Conventions (README, Signal model and The processing chain, step 2):

* Sweeps are complex arrays with frequency on the LAST axis and any leading shape
  (polarization, angle, repeat, ...); every function is vectorised over the leading axes.
* Frequencies in Hz, uniform, f_n = f0 + n df with f0 > 0 (band-pass).
* Engineering time factor exp(+j w t): an echo at one-way range r (from the VNA reference
  plane) is exp(-j 2 k r), k = 2 pi f / c0. The inverse FFT over frequency puts it at
  t = 2 r / c0, i.e. at range r on the axis r = c0 t / 2, which spans [0, c0 / (2 df))
  (the unambiguous range) and wraps around circularly; zero padding samples it finer.
* Ranges in metres.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

from .constants import C0
from .errors import InputError

WINDOWS = ("kaiser", "hann", "rect")
DEFAULT_EDGE_FRACTION = 0.2  # each soft gate edge is 20 % of the span wide (-6 dB points at the span ends)


# --------------------------------------------------------------------------- grid checks

def uniform_step_hz(frequency_hz, path=None) -> float:
    """Frequency step df in Hz of a uniform, increasing band-pass grid.

    Raises InputError (naming ``path``) for fewer than 2 points, a non-finite, non-positive
    or non-increasing grid, or one whose largest deviation from f0 + n df exceeds 1e-6 df.
    """
    f = np.asarray(frequency_hz, dtype=float).ravel()
    if f.size < 2:
        raise InputError(f"frequency grid needs at least 2 points for time-domain work, got {f.size}", path)
    if not np.all(np.isfinite(f)):
        raise InputError("frequency grid contains non-finite values", path)
    if f[0] <= 0:
        raise InputError(f"band-pass time domain needs f_start > 0 Hz, got {f[0]:g} Hz", path)
    steps = np.diff(f)
    if np.any(steps <= 0):
        i = int(np.argmax(steps <= 0))
        raise InputError(
            f"frequency grid is not increasing: point {i + 1} ({f[i + 1] / 1e9:.9g} GHz) "
            f"follows {f[i] / 1e9:.9g} GHz", path)
    df = (f[-1] - f[0]) / (f.size - 1)
    dev = f - (f[0] + df * np.arange(f.size))
    i = int(np.argmax(np.abs(dev)))
    if abs(dev[i]) > 1e-6 * df:
        raise InputError(
            f"frequency grid is not uniform (needed for time gating): largest deviation "
            f"{dev[i]:.6g} Hz ({abs(dev[i]) / df:.3g} of the step {df:.6g} Hz) at point {i} "
            f"({f[i] / 1e9:.9g} GHz)", path)
    return float(df)


def resolution_m(frequency_hz) -> float:
    """Down-range resolution c0 / (2 B) in m, with B = f_last - f_first (the span of the samples).

    (Some texts use B = N df, one step wider; the difference is 1/(N-1) relative.)
    """
    f = np.asarray(frequency_hz, dtype=float).ravel()
    uniform_step_hz(f)
    return C0 / (2.0 * (f[-1] - f[0]))


def unambiguous_range_m(frequency_hz) -> float:
    """Unambiguous (alias-free) range c0 / (2 df) in m."""
    return C0 / (2.0 * uniform_step_hz(frequency_hz))


def frequency_window(name, n, kaiser_beta=6.0) -> np.ndarray:
    """Symmetric frequency-domain window of length n: "kaiser" (beta), "hann" or "rect".

    numpy's windows (equal to scipy.signal.windows' symmetric ones, which the tests check);
    scipy.signal itself is not imported, as its import costs a second at start-up."""
    n = int(n)
    if n < 1:
        raise InputError(f"window length must be at least 1, got {n}")
    key = str(name).lower()
    if key == "kaiser":
        return np.kaiser(n, float(kaiser_beta))
    if key == "hann":
        return np.hanning(n) if n > 1 else np.ones(1)
    if key == "rect":
        return np.ones(n)
    raise InputError(f"unknown window {name!r}: choose one of {', '.join(WINDOWS)}")


# --------------------------------------------------------------------------- internals

def _checked(frequency_hz, s, pad_factor):
    """(f, s, df, n, m): validated grid, sweep array, step, points, transform length."""
    f = np.asarray(frequency_hz, dtype=float).ravel()
    df = uniform_step_hz(f)
    s = np.asarray(s)
    if s.ndim == 0 or s.shape[-1] != f.size:
        raise InputError(f"sweep has shape {s.shape}: its last axis must hold the {f.size} frequencies")
    if int(pad_factor) != pad_factor or pad_factor < 1:
        raise InputError(f"pad_factor must be an integer >= 1, got {pad_factor!r}")
    return f, s, df, f.size, transform_length(f.size, int(pad_factor))


def transform_length(n: int, pad_factor: int) -> int:
    """FFT length for n points zero-padded pad_factor times: n itself when pad_factor is 1,
    else the next length at least pad_factor * n that the FFT factors quickly (a prime n such
    as 1601 would otherwise force a slow prime-length transform)."""
    return n if pad_factor == 1 else scipy.fft.next_fast_len(pad_factor * n)


def _range_axis(df, m):
    """Range axis (m,) in metres for an m-point inverse FFT of a grid with step df."""
    return np.arange(m) * (C0 / (2.0 * df * m))


def _gate_sweeps(s_windowed, gate, n):
    """Zero-pad to len(gate), inverse FFT, multiply by gate, FFT back, keep the first n samples."""
    m = gate.size
    profile = scipy.fft.ifft(s_windowed, n=m, axis=-1, workers=-1)
    return scipy.fft.fft(profile * gate, axis=-1, workers=-1)[..., :n]


def _check_gate(span_m, edge_fraction):
    if not np.isfinite(span_m) or span_m <= 0:
        raise InputError(f"gate span must be a positive length in m, got {span_m!r}")
    if not 0.0 <= edge_fraction <= 1.0:
        raise InputError(f"edge_fraction must lie in [0, 1], got {edge_fraction!r}")


# --------------------------------------------------------------------------- profiles and gates

def range_profile(frequency_hz, s, window="kaiser", kaiser_beta=6.0, pad_factor=4):
    """Band-pass range profile: (range_m (m,), profile (..., m) complex), m = transform_length(n, pad_factor).

    The sweep is windowed, zero-padded to m points and inverse-FFT'd over the last axis;
    scaled by m / sum(window) so that a unit echo exp(-j 2 k r) peaks at magnitude ~1 at r.
    """
    f, s, df, n, m = _checked(frequency_hz, s, pad_factor)
    w = frequency_window(window, n, kaiser_beta)
    profile = scipy.fft.ifft(s * w, n=m, axis=-1, workers=-1) * (m / w.sum())
    return _range_axis(df, m), profile


def gate_shape(range_m, center_m, span_m, edge_m, period_m=None) -> np.ndarray:
    """Flat-topped gate on a range axis, values in [0, 1].

    1 for |d| <= (span - edge)/2, raised-cosine edges of width ``edge_m`` on each side, 0 beyond
    (span + edge)/2, so the -6 dB (0.5) points sit at centre +/- span/2. d is the circular
    (wrapped) distance r - centre with period ``period_m``, by default len(range_m) times the
    axis step (the unambiguous range of an axis from ``range_profile``).
    """
    r = np.asarray(range_m, dtype=float)
    _check_gate(span_m, edge_m / span_m if span_m > 0 else 0.0)
    if period_m is None and r.size >= 2:
        period_m = r.size * (r.ravel()[1] - r.ravel()[0])
    d = r - center_m
    if period_m:
        d = (d + period_m / 2.0) % period_m - period_m / 2.0
    d = np.abs(d)
    inner = (span_m - edge_m) / 2.0
    if edge_m <= 0:
        return (d <= span_m / 2.0).astype(float)
    x = np.clip((d - inner) / edge_m, 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * x))


def _gate_and_distortion(frequency_hz, s, center_m, span_m, window, kaiser_beta, pad_factor, edge_fraction):
    f, s, df, n, m = _checked(frequency_hz, s, pad_factor)
    _check_gate(span_m, edge_fraction)
    problem = gate_alias_problem(f, center_m, span_m, edge_fraction)
    if problem:
        raise InputError(problem)
    w = frequency_window(window, n, kaiser_beta)
    gate = gate_shape(_range_axis(df, m), center_m, span_m, edge_fraction * span_m)
    phase = np.exp(-2j * np.pi * f * (2.0 * center_m / C0))  # exp(-j 2 k r_centre)
    distortion = _gate_sweeps(w * phase, gate, n) / phase
    return s, w, gate, n, distortion


def gate_distortion(frequency_hz, center_m, span_m, window="kaiser", kaiser_beta=6.0, pad_factor=4,
                    edge_fraction=DEFAULT_EDGE_FRACTION) -> np.ndarray:
    """Gated response (nf,) of an ideal unit point echo at the gate centre, times exp(+j 2 k r_centre).

    It holds the window and the band-edge roll-off of the gate but not the range phase;
    dividing a gated sweep by it removes them.
    """
    return _gate_and_distortion(frequency_hz, np.zeros(np.size(frequency_hz)), center_m, span_m,
                                window, kaiser_beta, pad_factor, edge_fraction)[-1]


def time_gate(frequency_hz, s, center_m, span_m, window="kaiser", kaiser_beta=6.0, pad_factor=4,
              edge_fraction=DEFAULT_EDGE_FRACTION, normalise=True) -> np.ndarray:
    """Time-gated sweeps (..., nf): keep the echoes within ``span_m`` around ``center_m`` (m).

    Window the sweep, zero-pad to about pad_factor * nf (1 = no padding), inverse FFT, multiply by
    ``gate_shape`` (flat top, raised-cosine edges each ``edge_fraction * span_m`` wide), FFT back
    and keep the first nf samples. With ``normalise`` the result is divided by
    ``gate_distortion`` (computed once per call): an isolated point echo at the centre comes back
    exactly, echoes elsewhere in the flat top nearly so; trim the band edges with
    ``valid_band_mask``. Without it the window stays applied. InputError if the gate's far edge
    passes the unambiguous range.
    """
    s, w, gate, n, distortion = _gate_and_distortion(frequency_hz, s, center_m, span_m, window,
                                                     kaiser_beta, pad_factor, edge_fraction)
    gated = _gate_sweeps(s * w, gate, n)
    return gated / distortion if normalise else gated


class GateOperator:
    """:func:`time_gate` as a linear operator G (nf x nf), applied by FFT without forming the matrix.

    The gate is a circular convolution in frequency: G[k, n] = w_n Ghat[(k - n) mod m] / D_k, with w
    the frequency window, Ghat the DFT of the range gate over the m-point transform divided by m and
    D the gate distortion (1 without ``normalise``). Its transpose, its power |G|^2 and the cross term
    of two gates on one grid are correlations and convolutions of the same kernel, so each costs
    a few FFTs per row instead of an nf x nf product. Tests check every method against the dense
    matrix.
    """

    def __init__(self, frequency_hz, center_m, span_m, window="kaiser", kaiser_beta=6.0, pad_factor=4,
                 edge_fraction=DEFAULT_EDGE_FRACTION, normalise=True):
        _, self.w, self.gate, self.n, distortion = _gate_and_distortion(
            frequency_hz, np.zeros(np.size(frequency_hz)), center_m, span_m, window, kaiser_beta, pad_factor,
            edge_fraction)
        self.m = self.gate.size
        self.d = distortion if normalise else np.ones(self.n, complex)
        self.kernel = scipy.fft.fft(self.gate) / self.m  # Ghat

    def apply(self, s) -> np.ndarray:
        """G s over the last axis (what time_gate gives)."""
        return _gate_sweeps(np.asarray(s) * self.w, self.gate, self.n) / self.d

    def apply_transpose(self, v) -> np.ndarray:
        """v @ G over the last axis: w_n sum_k (v_k / D_k) Ghat[k - n] (the adjoint steps in reverse order)."""
        u = scipy.fft.fft(np.asarray(v) / self.d, n=self.m, axis=-1, workers=-1)
        return scipy.fft.ifft(u * self.gate, axis=-1, workers=-1)[..., :self.n] * self.w

    def cross_power(self, other: "GateOperator", s2) -> np.ndarray:
        """(G_self * conj(G_other)) @ s2 (nf,): sum_n w_n^2 s2_n Ghat_x[k - n] conj(Ghat_y[k - n]) / (D_x conj D_y);
        with ``other`` self, the gated power |G|^2 @ s2 of uncorrelated noise of variance s2 per frequency."""
        p = np.zeros(self.m)
        p[:self.n] = self.w ** 2 * np.asarray(s2, dtype=float)
        k = self.kernel * np.conj(other.kernel)
        out = scipy.fft.ifft(scipy.fft.fft(p) * scipy.fft.fft(k))[:self.n] / (self.d * np.conj(other.d))
        return out.real if other is self else out

    def power(self, s2) -> np.ndarray:
        """|G|^2 @ s2 (nf,): the gated noise power per frequency."""
        return self.cross_power(self, s2)


def gate_noise_gain(frequency_hz, center_m, span_m, window="kaiser", kaiser_beta=6.0, pad_factor=4,
                    edge_fraction=DEFAULT_EDGE_FRACTION, normalise=True) -> np.ndarray:
    """Output power (nf,) of ``time_gate`` per unit variance of white input noise, per frequency.

    The gate is a circular convolution in frequency, Y[k] = sum_n w_n x_n G[k - n] with G the
    FFT of the gate over m points divided by m, so white noise leaves
    sum_n w_n^2 |G[k - n]|^2 (divided by |distortion|^2 when normalised): one more circular
    convolution, done by FFT. Exact; equal to applying the gate to every unit sweep.
    """
    _, w, gate, n, distortion = _gate_and_distortion(frequency_hz, np.zeros(np.size(frequency_hz)), center_m,
                                                     span_m, window, kaiser_beta, pad_factor, edge_fraction)
    m = gate.size
    g2 = np.abs(scipy.fft.fft(gate) / m) ** 2
    p = np.zeros(m)
    p[:n] = w ** 2
    gain = scipy.fft.ifft(scipy.fft.fft(p) * scipy.fft.fft(g2)).real[:n]
    return gain / np.abs(distortion) ** 2 if normalise else gain


def valid_band_mask(frequency_hz, span_m, trim_hz=None) -> np.ndarray:
    """Boolean mask (nf,) of the frequencies kept after gating.

    Trims ``trim_hz`` from each band edge, by default one inverse gate duration c0 / (2 span_m)
    (common practice). InputError if nothing remains.
    """
    f = np.asarray(frequency_hz, dtype=float).ravel()
    uniform_step_hz(f)
    if trim_hz is None:
        if not np.isfinite(span_m) or span_m <= 0:
            raise InputError(f"gate span must be a positive length in m, got {span_m!r}")
        trim_hz = C0 / (2.0 * span_m)
    if trim_hz < 0:
        raise InputError(f"band-edge trim must not be negative, got {trim_hz!r} Hz")
    tol = 1e-9 * (f[-1] - f[0])
    mask = (f >= f[0] + trim_hz - tol) & (f <= f[-1] - trim_hz + tol)
    if not mask.any():
        raise InputError(
            f"no valid band left: band {f[0] / 1e9:.6g}-{f[-1] / 1e9:.6g} GHz minus {trim_hz / 1e6:.6g} MHz "
            f"at each edge (gate span {span_m:.4g} m): widen the span or the band")
    return mask


def gate_far_edge_ok(frequency_hz, center_m, span_m, edge_fraction=DEFAULT_EDGE_FRACTION) -> bool:
    """True when the gate, soft edges included, neither aliases nor wraps onto itself
    (see :func:`gate_alias_problem`)."""
    return gate_alias_problem(frequency_hz, center_m, span_m, edge_fraction) is None


def gate_alias_problem(frequency_hz, center_m, span_m, edge_fraction=DEFAULT_EDGE_FRACTION) -> str | None:
    """Why a gate would alias, as one line, or None when it does not.

    The gate reaches (span + edge)/2 either side of its centre, edge = edge_fraction * span
    (the raised-cosine edges end there, past the -6 dB points at span/2). It aliases when
    its full width, span + edge, is not shorter than the unambiguous range c0/(2 df) (the
    circular range axis is then covered entirely, so the gate keeps everything and gates
    nothing), or when its far end, centre + (span + edge)/2, lies past that range.
    """
    df = uniform_step_hz(frequency_hz)
    unamb = C0 / (2.0 * df)
    half = 0.5 * span_m * (1.0 + edge_fraction)
    if 2 * half >= unamb:
        return (f"gate span {span_m:.4g} m plus its soft edges ({2 * half:.4g} m in all) is not shorter than the "
                f"unambiguous range {unamb:.4g} m = c0/(2 df) of the {df / 1e6:.6g} MHz step: it would gate "
                f"nothing (shorten the span or use a finer frequency step)")
    if center_m + half >= unamb:
        return (f"gate far edge {center_m + half:.4g} m (centre {center_m:.4g} m + span/2 + soft edge/2) lies "
                f"past the unambiguous range {unamb:.4g} m = c0/(2 df) of the {df / 1e6:.6g} MHz step: "
                f"it would alias")
    return None


def find_echo_range(frequency_hz, s, window="kaiser", kaiser_beta=6.0, pad_factor=8, search=None) -> float:
    """Range in m of the strongest echo of the range profile (for auto-gating).

    Several sweeps (leading axes) are combined by their RMS profile magnitude. ``search``
    = (r_min, r_max) in m restricts the peak search. The peak is refined by a parabola through
    |profile| at the peak bin and its two (circular) neighbours.
    """
    r, p = range_profile(frequency_hz, s, window, kaiser_beta, pad_factor)
    mag = np.sqrt(np.mean(np.abs(p.reshape(-1, r.size)) ** 2, axis=0))
    candidates = np.ones(r.size, dtype=bool)
    if search is not None:
        r_min, r_max = search
        candidates = (r >= r_min) & (r <= r_max)
        if not candidates.any():
            raise InputError(f"echo search range {r_min:.4g}-{r_max:.4g} m holds no range bin "
                             f"(profile covers 0-{r[-1]:.4g} m)")
    i = int(np.flatnonzero(candidates)[np.argmax(mag[candidates])])
    y0, y1, y2 = mag[i - 1], mag[i], mag[(i + 1) % r.size]
    curv = y0 - 2.0 * y1 + y2
    delta = 0.5 * (y0 - y2) / curv if curv < 0 else 0.0
    dr = r[1] - r[0]
    return float(((i + delta) * dr) % (r.size * dr))
