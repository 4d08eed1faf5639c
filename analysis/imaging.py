"""ISAR imaging of calibrated turntable data: images, difference images, scattering centres.

Conventions (README, "Imaging"):

* Input: the calibrated complex amplitude A(f, theta) (m, referred to the turntable axis) of
  one target and polarization over a band [f1, f2] and a sector of turntable angles.
* Spatial frequency (two-way, cycles per metre) q = 2 f / c0. The image frame is fixed to
  the turntable at the sector's centre angle theta0; with d = theta - theta0 (rad),
  qx = q cos d and qy = -q sin d.
* Coordinates relative to the turntable axis: ``down_range_m`` (x) positive away from the
  antenna, ``cross_range_m`` (y) positive on the side that moves towards the antenna as the
  turntable angle increases. A point at (x, y) then has the down-range x cos d - y sin d at
  angle theta and contributes a exp(-j 2 pi (qx x + qy y)) (exp(+j w t)); the tests check
  the sign on simulated points.
* Image: I(x, y) = sum W A exp(+j 2 pi (qx x + qy y)) / sum W, the sums over k-space with
  its area element (dqx dqy = q dq dd), W(f, theta) = w(f) w(theta) a window in both
  dimensions. An isolated point of amplitude a images with peak |I| = |a|: |I|^2 is in
  m^2, the image is shown in dBsm (calibrated image).
* Polar format (:func:`polar_format_image`): the polar samples are interpolated (cubic
  spline over the (angle, frequency) sample grid) onto a rectangular (qx, qy) grid of step
  1/extent, windowed, zero-padded and 2-D inverse-FFT'd. Back-projection
  (:func:`backprojection_image`): each angle's range profile, weighted by q (the "filter":
  the polar area element), evaluated at every pixel's down-range for that angle and summed.
  Both compute the same integral; polar format is fast for small sectors, back-projection
  holds for any sector. The stored complex image is J = I exp(-j 2 pi (qx0 x + qy0 y)),
  (qx0, qy0) the corner of the k-space grid: |J| = |I|; phases compare only on one grid.
* Resolution (-3 dB widths of the point response): down-range k_f c0 / (2 B), cross-range
  k_t lambda_c / (4 sin(dtheta / 2)) (-> k_t lambda_c / (2 dtheta) for a small sector;
  Mensa, High Resolution Radar Cross-Section Imaging; Knott, Radar Cross Section
  Measurements), B = f2 - f1, dtheta the angles spanned, lambda_c = c0 / f_c with f_c the
  window- and area-weighted centre frequency, k the windows' -3 dB main-lobe widths in units
  of one over the aperture (0.886 for a rectangular window; :func:`main_lobe_factor`).
* Scattering centres: CLEAN (Hogbom 1974) on the complex image with the polar-format point
  response; loop gain 0.2; stop when the residual peak falls below the image floor plus
  ``stop_margin_db`` (3 dB), or ``dynamic_db`` (40 dB) below the image peak when the floor is
  unknown, or after ``max_components``. Components within one resolution cell of a stronger
  centre are merged (complex sum; position weighted by amplitude), and the residual at the
  centre's strongest pixel is added back (what CLEAN left below its stopping level, so a
  centre's RCS is not biased low by the stop). A centre less than
  ``floor_margin_db`` (10 dB) above the image floor is floor-limited.
* Image floor: the mean noise power per pixel, sum (W q)^2 floor(f) / g(f) / (sum W q)^2, with
  floor(f) the run's floor (m^2) and g(f) the gate's noise gain (so floor / g is the white
  noise that the gate turned into it), assuming noise independent from angle to angle (VNA
  noise of the target sweeps; a background noise shared by every angle gathers along
  cross-range 0 instead).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.fft
import xarray as xr

from .campaign import wrap_angle_deg
from .constants import C0
from .errors import InputError

WINDOWS = ("kaiser", "taylor", "hann", "rect")
METHODS = ("auto", "polar", "backprojection")
POLAR_MAX_SECTOR_DEG = 30.0  # auto: polar format up to this sector width, back-projection beyond
DEFAULT_SECTOR_DEG = (-15.0, 15.0)  # when none is given and the angles span more than MAX_DEFAULT_SPAN_DEG
MAX_DEFAULT_SPAN_DEG = 60.0
MIN_ANGLES = 3
GATE_EXTENT_FACTOR = 1.2  # default down-range extent: the whole gate, soft edges included (span + 20 % edge)
_BP_OVERSAMPLE = 16  # back-projection: range profiles zero-padded this many times (linear interpolation)


@dataclass(frozen=True)
class ImageSettings:
    """Choices for one image (README, "Imaging")."""

    method: str = "auto"
    window: str = "kaiser"
    kaiser_beta: float = 6.0
    taylor_nbar: int = 4
    taylor_sll_db: float = 35.0
    pad_factor: int = 4
    extent_m: tuple[float, float] | None = None  # (down-range, cross-range) scene size; default from the gate
    loop_gain: float = 0.2
    stop_margin_db: float = 3.0
    floor_margin_db: float = 10.0
    dynamic_db: float = 40.0
    max_components: int = 3000

    def checked(self) -> "ImageSettings":
        if self.method not in METHODS:
            raise InputError(f"imaging method {self.method!r}: choose one of {', '.join(METHODS)}")
        if self.window not in WINDOWS:
            raise InputError(f"imaging window {self.window!r}: choose one of {', '.join(WINDOWS)}")
        if int(self.pad_factor) != self.pad_factor or not 1 <= self.pad_factor <= 16:
            raise InputError(f"image zero padding must be an integer from 1 to 16, got {self.pad_factor!r}")
        if not 0 < self.loop_gain <= 1:
            raise InputError(f"CLEAN loop gain must lie in (0, 1], got {self.loop_gain!r}")
        if self.extent_m is not None and not all(np.isfinite(e) and 0 < e <= 100 for e in self.extent_m):
            raise InputError(f"image extent must be two positive lengths up to 100 m, got {self.extent_m!r}")
        return self

    def window_text(self) -> str:
        if self.window == "kaiser":
            return f"Kaiser (beta {self.kaiser_beta:g}) in frequency and angle"
        if self.window == "taylor":
            return f"Taylor (nbar {self.taylor_nbar}, {self.taylor_sll_db:g} dB sidelobes) in frequency and angle"
        return f"{self.window} in frequency and angle"


@dataclass
class TargetImage:
    """A calibrated image: J (down_range, cross_range) complex, |J|^2 in m^2 (see module docstring)."""

    target: str
    polarization: str
    x_m: np.ndarray  # down-range pixel centres (m)
    y_m: np.ndarray  # cross-range pixel centres (m)
    image: np.ndarray  # complex (nx, ny)
    psf: np.ndarray  # complex (nx, ny), point response at the grid origin, periodic (for CLEAN)
    method: str
    settings: ImageSettings
    angles_deg: np.ndarray  # turntable angles used, as measured
    center_angle_deg: float
    sector_width_deg: float
    frequency_hz: np.ndarray
    down_range_resolution_m: float
    cross_range_resolution_m: float
    nominal_down_range_m: float  # c0 / (2 B)
    nominal_cross_range_m: float  # lambda_c / (4 sin(dtheta / 2))
    center_frequency_hz: float
    floor_m2: float | None  # mean noise power per pixel (m^2), None when unknown
    revision: str = ""
    extras: dict = field(default_factory=dict)

    @property
    def power(self) -> np.ndarray:
        return np.abs(self.image) ** 2

    @property
    def rcs_dbsm(self) -> np.ndarray:
        with np.errstate(divide="ignore"):
            return 10 * np.log10(self.power)

    @property
    def floor_dbsm(self) -> float | None:
        return None if not self.floor_m2 else 10 * math.log10(self.floor_m2)

    @property
    def sector_deg(self) -> tuple[float, float]:
        return (float(wrap_angle_deg(self.center_angle_deg - self.sector_width_deg / 2)),
                float(wrap_angle_deg(self.center_angle_deg + self.sector_width_deg / 2)))


# ----------------------------------------------------------------------------- windows

def window_samples(name: str, n: int, kaiser_beta=6.0, nbar=4, sll_db=35.0) -> np.ndarray:
    """Symmetric window of n samples: Kaiser, Hann, rect as timedomain.frequency_window; Taylor from scipy."""
    if name == "taylor":
        if int(n) < 1:
            raise InputError(f"window length must be at least 1, got {n}")
        from scipy.signal.windows import taylor  # imported only here: scipy.signal is slow to import

        return taylor(int(n), nbar=int(nbar), sll=float(sll_db), norm=True, sym=True)
    from .timedomain import frequency_window

    return frequency_window(name, n, kaiser_beta)


def window_at(name: str, t, kaiser_beta=6.0, nbar=4, sll_db=35.0) -> np.ndarray:
    """The window as a function of t in [0, 1] (0 outside): exact for Kaiser, Hann and rect, Taylor interpolated."""
    t = np.asarray(t, dtype=float)
    inside = (t >= -1e-12) & (t <= 1 + 1e-12)
    tc = np.clip(t, 0.0, 1.0)
    if name == "kaiser":
        w = np.i0(kaiser_beta * np.sqrt(np.clip(1 - (2 * tc - 1) ** 2, 0, None))) / np.i0(kaiser_beta)
    elif name == "hann":
        w = 0.5 - 0.5 * np.cos(2 * np.pi * tc)
    elif name == "rect":
        w = np.ones_like(tc)
    else:
        ref = window_samples(name, 2049, kaiser_beta, nbar, sll_db)
        w = np.interp(tc, np.linspace(0, 1, ref.size), ref)
    return np.where(inside, w, 0.0)


def main_lobe_factor(weights) -> float:
    """-3 dB width of the point response of sampled weights, in units of 1 / ((n - 1) step).

    The magnitude of the weights' discrete-time Fourier transform, zero-padded finely; the
    half-power crossing is found by linear interpolation. About 0.886 (n - 1)/n for a
    rectangular window (the sinc's -3 dB width, in units of 1/aperture). A response that never
    falls to half power (a strongly tapered window of very few samples) counts as one whole
    sampling period wide, n - 1.
    """
    w = np.asarray(weights, dtype=float)
    n = w.size
    if n < 2:
        return float("nan")
    m = scipy.fft.next_fast_len(max(64 * n, 8192))
    spec = np.abs(np.fft.fft(w, m)) ** 2
    spec /= spec[0] if spec[0] > 0 else 1.0
    below = spec[: m // 2 + 1] < 0.5
    if not below.any():  # the response never falls 3 dB (a window of a few samples): a whole period wide
        return float(n - 1)
    half = int(np.argmax(below))
    y0, y1 = spec[half - 1], spec[half]
    u = (half - 1 + (y0 - 0.5) / (y0 - y1)) / m  # cycles per sample at half power
    return float(2 * u * (n - 1))


# ----------------------------------------------------------------------------- data selection

def default_sector(angles_deg) -> tuple[float, float] | None:
    """Sector used when none is given: every angle when they span at most 60 degrees, else -15:15."""
    a = np.sort(np.asarray(wrap_angle_deg(angles_deg), dtype=float))
    if a.size < 2:
        return None
    gaps = np.diff(np.concatenate([a, a[:1] + 360]))
    span = 360.0 - gaps.max()
    return None if span <= MAX_DEFAULT_SPAN_DEG else DEFAULT_SECTOR_DEG


def select_sector(angles_deg, sector_deg) -> tuple[np.ndarray, np.ndarray, float]:
    """(indices of the angles in the sector sorted by angle, offsets d from the centre (deg), centre angle).

    The centre is the midpoint of the selected angles (wrapped); the sector START:STOP is read
    as in README, "The processing chain" (wrapped to (-180, 180], START > STOP crosses +/-180).
    """
    from .metrics import sector_mask

    a = np.asarray(angles_deg, dtype=float)
    sector = default_sector(a) if sector_deg is None else sector_deg
    mask = sector_mask(a, sector)
    idx = np.flatnonzero(mask)
    if idx.size < MIN_ANGLES:
        where = "all angles" if sector is None else f"sector {sector[0]:g}:{sector[1]:g} deg"
        raise InputError(f"{where} holds {idx.size} measured angle(s); an image needs at least {MIN_ANGLES}")
    if sector is None:
        ref = float(np.angle(np.mean(np.exp(1j * np.deg2rad(a[idx])))) * 180 / np.pi)
    else:
        lo = float(wrap_angle_deg(sector[0]))
        width = (sector[1] - sector[0]) % 360 or (360.0 if sector[1] != sector[0] else 0.0)
        ref = lo + width / 2
    d = np.asarray(wrap_angle_deg(a[idx] - ref), dtype=float)
    center = float(wrap_angle_deg(ref + (d.max() + d.min()) / 2))
    d = np.asarray(wrap_angle_deg(a[idx] - center), dtype=float)
    order = np.argsort(d)
    if d.max() - d.min() >= 180:
        raise InputError("an image sector must be narrower than 180 degrees")
    return idx[order], d[order], center


def _band(frequency_hz, band_hz):
    f = np.asarray(frequency_hz, dtype=float)
    if band_hz is None:
        return np.ones(f.size, bool)
    m = (f >= band_hz[0] - 1e-3) & (f <= band_hz[1] + 1e-3)
    if m.sum() < 2:
        raise InputError(f"band {band_hz[0] / 1e9:g}-{band_hz[1] / 1e9:g} GHz holds fewer than 2 frequencies of "
                         f"{f[0] / 1e9:.4g}-{f[-1] / 1e9:.4g} GHz")
    return m


# ----------------------------------------------------------------------------- grid

@dataclass(frozen=True)
class _Grid:
    qx0: float
    qy0: float
    dqx: float
    dqy: float
    nkx: int
    nky: int
    mx: int
    my: int
    ic: int  # k-space grid point of the phase reference (near the support's centre)
    jc: int

    @property
    def x(self) -> np.ndarray:
        return (np.arange(self.mx) - self.mx // 2) / (self.mx * self.dqx)

    @property
    def y(self) -> np.ndarray:
        return (np.arange(self.my) - self.my // 2) / (self.my * self.dqy)

    @property
    def q_ref(self) -> tuple[float, float]:
        """(qx, qy) of the phase reference: J = I exp(-j 2 pi (qx_ref x + qy_ref y))."""
        return self.qx0 + self.ic * self.dqx, self.qy0 + self.jc * self.dqy

    def k_axes(self):
        return self.qx0 + np.arange(self.nkx) * self.dqx, self.qy0 + np.arange(self.nky) * self.dqy


def _grid(q, d_rad, extent, pad) -> _Grid:
    """The rectangular k-space grid (step 1/extent) over the polar support, and the pixel counts."""
    cos_min = np.cos(np.abs(d_rad)).min()
    qx_lo, qx_hi = q[0] * cos_min, q[-1]
    qy_all = -np.outer(q[[0, -1]], np.sin(d_rad))
    qy_lo, qy_hi = qy_all.min(), qy_all.max()
    dqx, dqy = 1.0 / extent[0], 1.0 / extent[1]
    nkx = int(math.ceil((qx_hi - qx_lo) / dqx)) + 1
    nky = int(math.ceil((qy_hi - qy_lo) / dqy)) + 1
    if nkx * nky > 4_000_000:
        raise InputError(f"image grid of {nkx} x {nky} k-space points is too large: reduce the extent, band or sector")
    mx = scipy.fft.next_fast_len(int(pad) * nkx)
    my = scipy.fft.next_fast_len(int(pad) * nky)
    ic = int(round((0.5 * (q[0] + q[-1]) * np.cos(0.5 * (d_rad[0] + d_rad[-1])) - qx_lo) / dqx))
    jc = int(round((-0.5 * (q[0] + q[-1]) * np.sin(0.5 * (d_rad[0] + d_rad[-1])) - qy_lo) / dqy))
    return _Grid(qx_lo, qy_lo, dqx, dqy, nkx, nky, mx, my, ic, jc)



def _weights(settings: ImageSettings, nf: int, na: int) -> tuple[np.ndarray, np.ndarray]:
    s = settings
    return (window_samples(s.window, nf, s.kaiser_beta, s.taylor_nbar, s.taylor_sll_db),
            window_samples(s.window, na, s.kaiser_beta, s.taylor_nbar, s.taylor_sll_db))


def _ifft_image(g: np.ndarray, grid: _Grid) -> np.ndarray:
    """sum_k g_k exp(+j 2 pi (i dqx x + l dqy y)) on the centred pixel grid, (mx, my) for g (nkx, nky)."""
    out = scipy.fft.ifft2(g, s=(grid.mx, grid.my), workers=-1) * (grid.mx * grid.my)
    # phase reference at the grid point (ic, jc): a circular shift by (ic, jc) of the k-space samples
    m = np.arange(grid.mx)[:, None]
    n = np.arange(grid.my)[None, :]
    out *= np.exp(-2j * np.pi * (grid.ic * m / grid.mx + grid.jc * n / grid.my))
    return scipy.fft.fftshift(out)


def polar_format_image(amplitude, frequency_hz, d_deg, settings: ImageSettings, extent_m) -> tuple:
    """(J (mx, my), psf (mx, my), grid) of amplitude (na, nf) by polar format (module docstring)."""
    from scipy.ndimage import map_coordinates

    s = settings
    f = np.asarray(frequency_hz, dtype=float)
    q = 2 * f / C0
    d = np.deg2rad(np.asarray(d_deg, dtype=float))
    grid = _grid(q, d, extent_m, s.pad_factor)
    kx, ky = grid.k_axes()
    QX, QY = np.meshgrid(kx, ky, indexing="ij")
    qq = np.hypot(QX, QY)
    phi = np.arctan2(-QY, QX)
    tf = (qq - q[0]) / (q[-1] - q[0])
    tt = (phi - d[0]) / (d[-1] - d[0])
    support = (tf >= -1e-9) & (tf <= 1 + 1e-9) & (tt >= -1e-9) & (tt <= 1 + 1e-9)
    w = (window_at(s.window, tf, s.kaiser_beta, s.taylor_nbar, s.taylor_sll_db)
         * window_at(s.window, tt, s.kaiser_beta, s.taylor_nbar, s.taylor_sll_db) * support)
    i_f = tf * (f.size - 1)
    i_a = np.interp(phi, d, np.arange(d.size))
    pts = np.stack([i_a[support], i_f[support]])
    vals = np.zeros(QX.shape, complex)
    a = np.asarray(amplitude, dtype=complex)
    vals[support] = (map_coordinates(a.real, pts, order=3, mode="nearest")
                     + 1j * map_coordinates(a.imag, pts, order=3, mode="nearest"))
    norm = w.sum()
    if norm <= 0:
        raise InputError("the image's k-space support is empty")
    return _ifft_image(w * vals, grid) / norm, _ifft_image(w, grid) / norm, grid


def backprojection_image(amplitude, frequency_hz, d_deg, settings: ImageSettings, extent_m) -> tuple:
    """(J (mx, my), psf (mx, my), grid) of amplitude (na, nf) by filtered back-projection.

    Per angle: c_k = w_f w_t q_k A_k (q: the polar area element), baseband range profile by a
    zero-padded inverse FFT (carrier at the band centre), evaluated by linear interpolation at
    r = x cos d - y sin d for every pixel, times the carrier exp(+j 2 pi q_ref r); summed and
    divided by sum w q. The psf is the polar-format point response on the same grid.
    """
    s = settings
    f = np.asarray(frequency_hz, dtype=float)
    q = 2 * f / C0
    d = np.deg2rad(np.asarray(d_deg, dtype=float))
    grid = _grid(q, d, extent_m, s.pad_factor)
    wf, wt = _weights(s, f.size, d.size)
    dq = (q[-1] - q[0]) / (f.size - 1)
    nf = f.size
    m = scipy.fft.next_fast_len(_BP_OVERSAMPLE * nf)
    half = nf // 2
    q_ref = q[0] + half * dq
    period = 1.0 / dq
    r_axis = np.arange(m + 1) * (period / m)
    c = np.asarray(amplitude, dtype=complex) * (wf * q)[None, :] * wt[:, None]
    # baseband: sum_k c_k exp(+j 2 pi (k - half) dq r) = ifft(c) m exp(-j 2 pi half dq r)
    prof = scipy.fft.ifft(c, n=m, axis=-1, workers=-1) * m
    prof *= np.exp(-2j * np.pi * half * dq * r_axis[:-1])[None, :]
    prof = np.concatenate([prof, prof[:, :1]], axis=1)  # closes the period for interpolation
    X, Y = np.meshgrid(grid.x, grid.y, indexing="ij")
    img = np.zeros(X.shape, complex)
    for i in range(d.size):
        r = X * np.cos(d[i]) - Y * np.sin(d[i])
        rr = np.mod(r, period)
        val = np.interp(rr, r_axis, prof[i].real) + 1j * np.interp(rr, r_axis, prof[i].imag)
        img += val * np.exp(2j * np.pi * q_ref * r)
    norm = float(np.sum(wf * q) * np.sum(wt))
    img /= norm
    qx_ref, qy_ref = grid.q_ref
    img *= np.exp(-2j * np.pi * (qx_ref * X + qy_ref * Y))
    # psf for CLEAN: the polar-format response of the same windows (module docstring)
    _, psf, _ = polar_format_image(np.ones((d.size, f.size), complex), f, d_deg, s, extent_m)
    return img, psf, grid


def resolutions(frequency_hz, d_deg, settings: ImageSettings) -> dict:
    """Stated -3 dB resolutions (m) and their parts (module docstring, README "Imaging")."""
    f = np.asarray(frequency_hz, dtype=float)
    d = np.deg2rad(np.asarray(d_deg, dtype=float))
    wf, wt = _weights(settings, f.size, d.size)
    bw = f[-1] - f[0]
    dtheta = d[-1] - d[0]
    fc = float(np.sum(wf * f * f) / np.sum(wf * f))
    lam = C0 / fc
    nominal_x = C0 / (2 * bw)
    nominal_y = lam / (4 * math.sin(dtheta / 2))
    kf = main_lobe_factor(wf * f)
    kt = main_lobe_factor(wt)
    return {"down_range_m": kf * nominal_x, "cross_range_m": kt * nominal_y, "nominal_down_range_m": nominal_x,
            "nominal_cross_range_m": nominal_y, "k_frequency": kf, "k_angle": kt, "center_frequency_hz": fc,
            "bandwidth_hz": bw, "sector_rad": dtheta}


def unambiguous_cross_range_m(frequency_hz, d_deg) -> float:
    """Cross-range extent the angular step supports: 1 / (q_max dtheta_step) (m)."""
    d = np.deg2rad(np.asarray(d_deg, dtype=float))
    step = float(np.max(np.diff(d)))
    return C0 / (2 * float(np.max(frequency_hz)) * step)


def pixel_floor(floor_m2, noise_gain, frequency_hz, d_deg, settings: ImageSettings) -> float:
    """Mean noise power per pixel (m^2): sum (W q)^2 floor / g / (sum W q)^2 (module docstring)."""
    f = np.asarray(frequency_hz, dtype=float)
    wf, wt = _weights(settings, f.size, np.size(d_deg))
    wq = wf * f
    white = np.asarray(floor_m2, dtype=float) / np.maximum(np.asarray(noise_gain, dtype=float), 1e-300)
    return float(np.sum(wq ** 2 * white) * np.sum(wt ** 2) / (np.sum(wq) ** 2 * np.sum(wt) ** 2))


def make_image(amplitude, frequency_hz, angles_deg, settings: ImageSettings | None = None, *, sector_deg=None,
               band_hz=None, target: str = "", polarization: str = "", floor_m2=None, noise_gain=None,
               gate_span_m: float | None = None, revision: str = "") -> TargetImage:
    """Image of one target and polarization: amplitude (n_angles, n_freq) complex (m) over the sorted axes.

    ``floor_m2`` and ``noise_gain`` (per frequency, same grid) give the image floor; without
    them it is unknown. The scene extent defaults to the whole gate (1.2 span, soft edges
    included) down-range and the angular step's unambiguous cross-range 1 / (q_max dtheta_step):
    the polar-format grid then holds everything the gated data can contain, noise included,
    without folding it into the image.
    """
    s = (settings or ImageSettings()).checked()
    f_all = np.asarray(frequency_hz, dtype=float)
    a_all = np.asarray(angles_deg, dtype=float)
    amp = np.asarray(amplitude)
    if amp.shape != (a_all.size, f_all.size):
        raise InputError(f"amplitude has shape {amp.shape}, expected ({a_all.size}, {f_all.size})")
    idx, d, center = select_sector(a_all, sector_deg)
    fm = _band(f_all, band_hz)
    f = f_all[fm]
    a = amp[np.ix_(idx, np.flatnonzero(fm))]
    if not np.all(np.isfinite(a)):
        raise InputError(f"{target or 'target'} {polarization}: non-finite calibrated amplitude in the image's band")
    width = float(d[-1] - d[0])
    method = s.method
    if method == "auto":
        method = "polar" if width <= POLAR_MAX_SECTOR_DEG else "backprojection"
    span = gate_span_m or 1.0
    extent = s.extent_m or (GATE_EXTENT_FACTOR * span, unambiguous_cross_range_m(f, d))
    if method == "polar":
        img, psf, grid = polar_format_image(a, f, d, s, extent)
    else:
        img, psf, grid = backprojection_image(a, f, d, s, extent)
    res = resolutions(f, d, s)
    floor = None
    if floor_m2 is not None and noise_gain is not None:
        floor = pixel_floor(np.asarray(floor_m2)[fm], np.asarray(noise_gain)[fm], f, d, s)
    return TargetImage(
        target=target, polarization=polarization, x_m=grid.x, y_m=grid.y, image=img, psf=psf, method=method,
        settings=replace(s, extent_m=tuple(float(e) for e in extent)), angles_deg=a_all[idx],
        center_angle_deg=center, sector_width_deg=width, frequency_hz=f,
        down_range_resolution_m=res["down_range_m"], cross_range_resolution_m=res["cross_range_m"],
        nominal_down_range_m=res["nominal_down_range_m"], nominal_cross_range_m=res["nominal_cross_range_m"],
        center_frequency_hz=res["center_frequency_hz"], floor_m2=floor, revision=revision,
        extras={"k_frequency": res["k_frequency"], "k_angle": res["k_angle"]})


# ----------------------------------------------------------------------------- difference

def difference(subject: TargetImage, baseline: TargetImage) -> dict:
    """Difference of two images on the same grid (README, "Imaging").

    ``difference``: complex J_subject - J_baseline (what the cloak removed and added, |.|^2 in
    m^2); ``change_db``: 10 log10(sigma_subject / sigma_baseline) per pixel where both lie at
    least floor_margin_db above their floors (NaN elsewhere; negative = less scattering);
    ``floor_m2``: the floor of the difference (sum of the two floors, or None).
    """
    if subject.image.shape != baseline.image.shape or not (np.allclose(subject.x_m, baseline.x_m)
                                                           and np.allclose(subject.y_m, baseline.y_m)):
        raise InputError(f"{subject.target} and {baseline.target} images are not on the same grid: image both "
                         f"over the same sector, band and extent")
    margin = 10 ** (subject.settings.floor_margin_db / 10)
    ps, pb = subject.power, baseline.power
    ok = np.ones(ps.shape, bool)
    if subject.floor_m2:
        ok &= ps >= subject.floor_m2 * margin
    if baseline.floor_m2:
        ok &= pb >= baseline.floor_m2 * margin
    with np.errstate(divide="ignore", invalid="ignore"):
        change = np.where(ok, 10 * np.log10(ps / pb), np.nan)
    floor = (subject.floor_m2 + baseline.floor_m2) if subject.floor_m2 and baseline.floor_m2 else None
    return {"difference": subject.image - baseline.image, "change_db": change, "floor_m2": floor}


# ----------------------------------------------------------------------------- CLEAN

def clean(img: TargetImage) -> tuple[list[tuple[int, int, complex]], np.ndarray, float]:
    """Hogbom CLEAN of a complex image: (components (ix, iy, amplitude), residual, stop level m^2).

    Repeatedly: take the brightest residual pixel p, record g J(p), subtract g J(p) times the
    point response shifted to p (circularly: the polar-format response is periodic on the
    grid). Stop rule in the module docstring.
    """
    s = img.settings
    res = img.image.copy()
    psf = img.psf
    cx, cy = img.x_m.size // 2, img.y_m.size // 2
    p0 = psf[cx, cy]
    peak = float(np.max(np.abs(res) ** 2))
    if img.floor_m2:
        stop = img.floor_m2 * 10 ** (s.stop_margin_db / 10)
    else:
        stop = peak * 10 ** (-s.dynamic_db / 10)
    comps: list[tuple[int, int, complex]] = []
    power = np.abs(res) ** 2
    for _ in range(int(s.max_components)):
        k = int(np.argmax(power))
        ix, iy = divmod(k, res.shape[1])
        if power[ix, iy] < stop:
            break
        a = s.loop_gain * res[ix, iy] / p0
        comps.append((ix, iy, a))
        res -= a * np.roll(psf, (ix - cx, iy - cy), axis=(0, 1))
        power = np.abs(res) ** 2
    return comps, res, stop


def scattering_centres(img: TargetImage, n: int = 10) -> list[dict]:
    """The n strongest scattering centres of an image (CLEAN, merged per resolution cell).

    Rows: target, polarization, down_range_m, cross_range_m, rcs_dbsm, revision, floor_limited,
    rank and the image's settings (sector, band, method, resolutions, floor).
    """
    comps, res, stop = clean(img)
    dx, dy = img.down_range_resolution_m, img.cross_range_resolution_m
    p0 = img.psf[img.x_m.size // 2, img.y_m.size // 2]
    centres: list[dict] = []
    for ix, iy, a in sorted(comps, key=lambda c: -abs(c[2])):
        x, y = img.x_m[ix], img.y_m[iy]
        for c in centres:
            if ((x - c["x"]) / dx) ** 2 + ((y - c["y"]) / dy) ** 2 <= 1.0:
                c["a"] += a
                c["wx"] += abs(a) * x
                c["wy"] += abs(a) * y
                c["w"] += abs(a)
                break
        else:
            centres.append({"x": x, "y": y, "a": a, "wx": abs(a) * x, "wy": abs(a) * y, "w": abs(a),
                            "pixel": (ix, iy)})
    for c in centres:  # what CLEAN left below its stopping level at the centre belongs to it
        c["a"] += res[c["pixel"]] / p0
    margin = 10 ** (img.settings.floor_margin_db / 10)
    rows = []
    for c in centres:
        sigma = abs(c["a"]) ** 2
        if sigma <= 0:
            continue
        rows.append({"target": img.target, "polarization": img.polarization,
                     "down_range_m": float(c["wx"] / c["w"]), "cross_range_m": float(c["wy"] / c["w"]),
                     "rcs_dbsm": float(10 * math.log10(sigma)), "revision": img.revision,
                     "floor_limited": bool(img.floor_m2 is not None and sigma < img.floor_m2 * margin)})
    rows.sort(key=lambda r: -r["rcs_dbsm"])
    meta = image_meta(img)
    meta["clean_stop_dbsm"] = 10 * math.log10(stop) if stop > 0 else None
    meta["clean_components"] = len(comps)
    out = []
    for rank, r in enumerate(rows[: int(n)], start=1):
        out.append({**r, "rank": rank, **meta})
    return out


def image_meta(img: TargetImage) -> dict:
    """The settings and figures every image carries (also the NetCDF attributes)."""
    lo, hi = img.sector_deg
    return {"method": img.method, "window": img.settings.window_text(),
            "sector_start_deg": lo, "sector_stop_deg": hi, "center_angle_deg": img.center_angle_deg,
            "sector_width_deg": img.sector_width_deg, "angles": int(img.angles_deg.size),
            "band_start_hz": float(img.frequency_hz[0]), "band_stop_hz": float(img.frequency_hz[-1]),
            "down_range_resolution_m": img.down_range_resolution_m,
            "cross_range_resolution_m": img.cross_range_resolution_m,
            "image_floor_dbsm": img.floor_dbsm}


# ----------------------------------------------------------------------------- tracking

def track_centres(entries: list[dict]) -> list[dict]:
    """Follow scattering centres across revisions, in the order given (match within a resolution cell).

    ``entries``: [{"revision": label, "centres": [rows of scattering_centres]}] of one
    polarization. A centre joins the track whose latest position lies within one resolution
    cell (ellipse of the two -3 dB resolutions of the centre's image), strongest centres
    first, one centre per track and revision; the others open new tracks. Returns per track:
    ``track``, ``down_range_m``, ``cross_range_m`` (first position), ``values`` {revision:
    {rcs_dbsm, floor_limited, down_range_m, cross_range_m}} (absent: not found above the
    CLEAN stopping level in that revision).
    """
    tracks: list[dict] = []
    for e in entries:
        used: set[int] = set()
        for c in sorted(e["centres"], key=lambda r: -r["rcs_dbsm"]):
            dx = c.get("down_range_resolution_m") or 1e-9
            dy = c.get("cross_range_resolution_m") or 1e-9
            best, best_d = None, 1.0
            for i, t in enumerate(tracks):
                if i in used:
                    continue
                dist = math.hypot((c["down_range_m"] - t["last"][0]) / dx, (c["cross_range_m"] - t["last"][1]) / dy)
                if dist <= best_d:
                    best, best_d = i, dist
            value = {"rcs_dbsm": c["rcs_dbsm"], "floor_limited": bool(c.get("floor_limited")),
                     "down_range_m": c["down_range_m"], "cross_range_m": c["cross_range_m"]}
            if best is None:
                tracks.append({"down_range_m": c["down_range_m"], "cross_range_m": c["cross_range_m"],
                               "last": (c["down_range_m"], c["cross_range_m"]), "values": {e["revision"]: value}})
                used.add(len(tracks) - 1)
            else:
                tracks[best]["values"][e["revision"]] = value
                tracks[best]["last"] = (c["down_range_m"], c["cross_range_m"])
                used.add(best)
    out = []
    for i, t in enumerate(tracks, start=1):
        out.append({"track": i, "down_range_m": t["down_range_m"], "cross_range_m": t["cross_range_m"],
                    "values": t["values"]})
    return out


def describe_tracks(tracks: list[dict], revisions: list[str]) -> list[str]:
    """One sentence per track that changed: 'the centre at (+0.07, -0.03) m went from -14.0 to -27.0 dBsm in R3'."""
    lines = []
    for t in tracks:
        seen = [(r, t["values"][r]) for r in revisions if r in t["values"]]
        where = f"({t['down_range_m']:+.3f}, {t['cross_range_m']:+.3f}) m"
        if not seen:
            continue
        first_rev, first = seen[0]
        last_rev, last = seen[-1]
        if len(seen) > 1:
            lines.append(f"the centre at {where} went from {first['rcs_dbsm']:.1f} dBsm in {first_rev} to "
                         f"{last['rcs_dbsm']:.1f} dBsm in {last_rev}" + (" (floor-limited)" if last["floor_limited"] else ""))
        missing = [r for r in revisions[revisions.index(first_rev) + 1:] if r not in t["values"]]
        if missing:
            lines.append(f"the centre at {where} ({first['rcs_dbsm']:.1f} dBsm in {first_rev}) is not found above "
                         f"the stopping level in {', '.join(missing)}")
        elif len(seen) == 1 and first_rev != revisions[0]:
            lines.append(f"a new centre at {where} appears in {first_rev} ({first['rcs_dbsm']:.1f} dBsm)")
    return lines


# ----------------------------------------------------------------------------- from processing results

def _noise_gain(result, target) -> np.ndarray | None:
    from . import timedomain

    s = result.settings
    t = result.targets[target]
    try:
        return timedomain.gate_noise_gain(result.frequency_hz, t.gate["center_m"], t.gate["span_m"],
                                          window=s.get("window", "kaiser"), kaiser_beta=s.get("kaiser_beta", 6.0),
                                          pad_factor=s.get("pad_factor", 4), edge_fraction=s.get("edge_fraction", 0.2))
    except (InputError, KeyError):
        return None


def image_of_result(result, target: str, pol: str | None = None, sector_deg=None, band_hz=None,
                    settings: ImageSettings | None = None, extent_m=None) -> TargetImage:
    """Image of a calibrated target of a :class:`cloakrcs.process.ProcessingResult`.

    Band: ``band_hz`` (inside the valid band), else the run's reporting band; sector:
    ``sector_deg``, else :func:`default_sector`.
    """
    if target not in result.targets:
        known = ", ".join(n for n, t in result.targets.items() if t.role != "reference")
        raise InputError(f"no target {target!r} in this run (targets: {known})")
    t = result.targets[target]
    pols = [str(p) for p in t.amplitude.polarization.values]
    pol = pol or ("VV" if "VV" in pols else pols[0])
    if pol not in pols:
        raise InputError(f"{target} has no {pol} sweeps (polarizations: {', '.join(pols)})")
    f = result.frequency_hz
    valid = result.valid_mask
    if band_hz is not None:
        fv = f[valid]
        if band_hz[0] < fv[0] - 1e-3 or band_hz[1] > fv[-1] + 1e-3:
            raise InputError(f"band {band_hz[0] / 1e9:g}-{band_hz[1] / 1e9:g} GHz reaches outside the valid band "
                             f"{fv[0] / 1e9:.4g}-{fv[-1] / 1e9:.4g} GHz")
    else:
        fb = f[result.band_mask]
        band_hz = (float(fb[0]), float(fb[-1]))
    s = settings or ImageSettings(floor_margin_db=result.settings.get("floor_margin_db", 10.0))
    if extent_m is not None:
        s = replace(s, extent_m=extent_m)
    amp = t.amplitude.sel(polarization=pol).values
    floor = t.floor.sel(polarization=pol).values
    return make_image(amp, f, t.amplitude.angle.values, s, sector_deg=sector_deg, band_hz=band_hz, target=target,
                      polarization=pol, floor_m2=floor, noise_gain=_noise_gain(result, target),
                      gate_span_m=t.gate.get("span_m"), revision=t.revision)


def imageable(result, target: str, sector_deg=None) -> bool:
    """True when a target has at least MIN_ANGLES angles in the (default) sector."""
    t = result.targets[target]
    try:
        select_sector(t.amplitude.angle.values, sector_deg)
    except InputError:
        return False
    return True


def result_centres(result, n: int = 10, sector_deg=None, settings: ImageSettings | None = None) -> list[dict]:
    """Scattering centres of every subject and polarization of a result (``cloakrcs process``).

    Sector: ``sector_deg``, else the run's sector, else :func:`default_sector`; band: the
    reporting band. Subjects with fewer than MIN_ANGLES angles in it are skipped.
    """
    sector = sector_deg if sector_deg is not None else (tuple(result.settings["sector_deg"])
                                                        if result.settings.get("sector_deg") else None)
    f = result.frequency_hz[result.band_mask]
    band = (float(f[0]), float(f[-1]))
    rows = []
    for name, t in result.targets.items():
        if t.role != "subject" or not imageable(result, name, sector):
            continue
        extent = None
        for pol in [str(p) for p in t.amplitude.polarization.values]:
            img = image_of_result(result, name, pol, sector, band, settings, extent_m=extent)
            extent = img.settings.extent_m
            rows.extend(scattering_centres(img, n))
    return rows


def tracked_centres_of_result(result, pol: str) -> tuple[list[dict], list[str]]:
    """Tracks of the centres of one result, baselines first then revisions in manifest order."""
    order: list[str] = []
    for name, t in result.targets.items():
        if t.role == "subject" and t.baseline and t.baseline not in order:
            order.append(t.baseline)
    for name, t in result.targets.items():
        if t.role == "subject" and t.baseline and name not in order:
            order.append(name)
    label = {n: result.targets[n].revision for n in order}
    entries = [{"revision": label[n], "centres": [c for c in result.centres if c["target"] == n
                                                  and c["polarization"] == pol]} for n in order]
    entries = [e for e in entries if e["centres"]]
    return track_centres(entries), [e["revision"] for e in entries]


# ----------------------------------------------------------------------------- outputs

SCATTERER_COLUMNS = ["target", "polarization", "down_range_m", "cross_range_m", "rcs_dbsm", "revision",
                     "floor_limited", "rank", "method", "sector_start_deg", "sector_stop_deg", "center_angle_deg",
                     "band_start_hz", "band_stop_hz", "down_range_resolution_m", "cross_range_resolution_m",
                     "image_floor_dbsm"]


def to_dataset(img: TargetImage, baseline: TargetImage | None = None) -> xr.Dataset:
    """The image as an xarray Dataset (NetCDF-ready: complex parts as two real variables)."""
    dims = ("down_range_m", "cross_range_m")
    coords = {"down_range_m": ("down_range_m", img.x_m, {"units": "m", "long_name": "down-range, positive away from "
                                                         "the antenna, relative to the turntable axis"}),
              "cross_range_m": ("cross_range_m", img.y_m, {"units": "m", "long_name": "cross-range, positive on the "
                                                           "side that moves towards the antenna as the turntable "
                                                           "angle increases"})}
    data = {"rcs_dbsm": (dims, img.rcs_dbsm, {"units": "dBsm", "long_name": f"calibrated image of {img.target}"}),
            "image_real": (dims, img.image.real, {"units": "m", "long_name": "real part of the complex image J"}),
            "image_imag": (dims, img.image.imag, {"units": "m", "long_name": "imaginary part of the complex image J"})}
    attrs = {k: ("" if v is None else v) for k, v in image_meta(img).items()}
    attrs.update({"target": img.target, "revision": img.revision, "polarization": img.polarization,
                  "center_frequency_hz": img.center_frequency_hz,
                  "nominal_down_range_resolution_m": img.nominal_down_range_m,
                  "nominal_cross_range_resolution_m": img.nominal_cross_range_m,
                  "resolution_definition": "-3 dB widths: down-range k_f c0/(2B), cross-range "
                                           "k_t lambda_c/(4 sin(dtheta/2)) (small sector: lambda_c/(2 dtheta))",
                  "main_lobe_factor_frequency": img.extras.get("k_frequency"),
                  "main_lobe_factor_angle": img.extras.get("k_angle"),
                  "extent_down_range_m": img.settings.extent_m[0], "extent_cross_range_m": img.settings.extent_m[1],
                  "pad_factor": img.settings.pad_factor,
                  "convention": "exp(+j w t); I(x, y) = sum W A exp(+j 2 pi (qx x + qy y)) / sum W, qx = q cos d, "
                                "qy = -q sin d, q = 2 f / c0, d = angle - center_angle; |image|^2 in m^2",
                  "source": "cloakrcs"})
    attrs["image_floor_dbsm"] = img.floor_dbsm if img.floor_dbsm is not None else np.nan
    if baseline is not None:
        diff = difference(img, baseline)
        with np.errstate(divide="ignore"):
            data["baseline_rcs_dbsm"] = (dims, baseline.rcs_dbsm, {"units": "dBsm",
                                                                   "long_name": f"image of {baseline.target}"})
            data["difference_rcs_dbsm"] = (dims, 10 * np.log10(np.abs(diff["difference"]) ** 2),
                                           {"units": "dBsm", "long_name": "|J_subject - J_baseline|^2"})
        data["change_db"] = (dims, diff["change_db"], {"units": "dB", "long_name": "10 log10(sigma_subject / "
                                                       "sigma_baseline) where both are floor_margin above the floor"})
        attrs["baseline"] = baseline.target
        attrs["baseline_floor_dbsm"] = baseline.floor_dbsm if baseline.floor_dbsm is not None else np.nan
    return xr.Dataset(data, coords=coords, attrs=attrs)


def tracks_from_store(history_rows: list[dict], centre_rows: list[dict]) -> list[dict]:
    """Tracked centres per prototype and polarization from stored rows (``cloakrcs history --centres``).

    Order: each prototype's baselines, then its revisions in ``history`` order; a label measured
    in several campaigns uses its newest (date, run). Returns [{prototype, polarization,
    revisions, tracks, sentences}].
    """
    out = []
    for proto in dict.fromkeys(r["prototype"] for r in history_rows):
        hist = [r for r in history_rows if r["prototype"] == proto]
        names: list[tuple[str, str]] = []  # (subject name, label)
        for r in hist:
            if (r["baseline"], r["baseline"]) not in names and all(n != r["baseline"] for n, _ in names):
                names.append((r["baseline"], r["baseline"]))
        for r in hist:
            if all(n != r["subject"] for n, _ in names):
                names.append((r["subject"], r["revision"]))
        mine = [c for c in centre_rows if c["prototype"] == proto]
        for pol in dict.fromkeys(c["polarization"] for c in mine):
            entries = []
            for name, label in names:
                rows = [c for c in mine if c["target"] == name and c["polarization"] == pol]
                if not rows:
                    continue
                newest = max((c.get("date") or "", c["run_id"]) for c in rows)
                rows = [c for c in rows if ((c.get("date") or ""), c["run_id"]) == newest]
                entries.append({"revision": label, "centres": rows})
            if entries:
                revs = [e["revision"] for e in entries]
                tracks = track_centres(entries)
                out.append({"prototype": proto, "polarization": pol, "revisions": revs, "tracks": tracks,
                            "sentences": describe_tracks(tracks, revs)})
    return out
