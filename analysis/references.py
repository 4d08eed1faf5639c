"""Analytic monostatic RCS references of canonical shapes (calibration and check targets).

Convention, shared by every function here:

* complex monostatic scattering amplitude ``A`` in metres, ``sigma = |A|**2`` in m^2;
* engineering time factor exp(+j w t);
* ``A = sqrt(4 pi) * R * (E_s(R) / E_i(0)) * exp(+j k R)``, ``E_i(0)`` the incident field
  at the shape's reference point (its centre unless a docstring says otherwise), ``E_s(R)``
  the back-scattered far field at range R.  A measured echo is ``A exp(-j 2 k R) / R**2``.
* polarization in the backscatter-alignment (BSA) frame: a sphere or a flat plate gives
  HH = VV and HV = VH = 0.  Labels: transmit letter, then receive letter.
* ``frequency_hz`` is (nf,), ``angle_deg`` (na,) the turntable aspect (0 = the shape's
  reference aspect); results are complex arrays shaped (na, nf).

High-frequency phases (physical / geometrical optics): flat plate -j (no curvature),
singly curved surface (cylinder) -exp(+j pi/4) = exp(-j 3 pi/4), doubly curved (sphere) -1,
each times exp(+j 2 k d) for a specular point a distance d in front of the reference point.
"""

from __future__ import annotations

import csv
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import special

from .constants import C0
from .errors import InputError

POLARIZATIONS = ("HH", "HV", "VH", "VV")
SHAPES = ("sphere", "plate", "disk", "cylinder", "dihedral", "trihedral", "table")
_REQUIRED = {
    "sphere": ("radius_m",),
    "plate": ("width_m", "height_m"),
    "disk": ("radius_m",),
    "cylinder": ("radius_m", "length_m"),
    "dihedral": ("fold_m", "face_m"),
    "trihedral": ("edge_m",),
    "table": ("file",),
}


# ----------------------------------------------------------------------------- helpers
def _positive(value, name: str) -> float:
    """A finite, strictly positive length (m); InputError otherwise."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v <= 0:
        raise InputError(f"{name} must be a positive finite number, got {value!r}")
    return v


def _finite(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise InputError(f"{name} must be finite, got {value!r}")
    return v


def _freq(frequency_hz) -> np.ndarray:
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise InputError("frequencies must be a non-empty 1-D list of positive finite values (Hz)")
    return f


def _angles(angle_deg) -> np.ndarray:
    t = np.atleast_1d(np.asarray(angle_deg, dtype=float))
    if t.ndim != 1 or t.size == 0 or not np.all(np.isfinite(t)):
        raise InputError("angles must be a non-empty 1-D list of finite values (degrees)")
    return t


def _pol(polarization) -> str:
    p = str(polarization).strip().upper()
    if p not in POLARIZATIONS:
        raise InputError(f"unknown polarization {polarization!r}: expected one of {', '.join(POLARIZATIONS)}")
    return p


def _wavenumber(f: np.ndarray) -> np.ndarray:
    return 2 * np.pi * f / C0


def _sinc(x):
    """sin(x)/x (unnormalised)."""
    return np.sinc(np.asarray(x) / np.pi)


def _wiscombe(x) -> np.ndarray:
    """Number of series terms, Wiscombe (1980): x + 4 x^(1/3) + 2."""
    x = np.asarray(x, dtype=float)
    return np.floor(x + 4.0 * np.cbrt(x) + 2.0).astype(int)


def rcs_dbsm(amplitude) -> np.ndarray:
    """RCS in dBsm, 10 log10(|A|^2); a null amplitude gives -inf."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.abs(np.asarray(amplitude)) ** 2)


# ----------------------------------------------------------------------------- sphere
def pec_mie_coefficients(x) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Mie coefficients of a perfectly conducting sphere in Bohren & Huffman's convention
    (exp(-i w t)): a_n = psi_n'(x)/xi_n'(x), b_n = psi_n(x)/xi_n(x), psi_n = x j_n(x),
    xi_n = x h_n^(1)(x) (eq. 4.53 with m -> infinity), x = k a (1-D array).

    Returns (n, use, a_n, b_n): orders 1..max n_max, the mask of orders within each x's
    Wiscombe n_max (shape (nx, n)), and the coefficients (nx, n; orders past n_max are not used).
    """
    x = np.asarray(x, dtype=float)
    nmax = _wiscombe(x)
    n = np.arange(1, int(nmax.max()) + 1)
    xx = x[:, None]
    with np.errstate(all="ignore"):
        j = special.spherical_jn(n, xx)
        jd = special.spherical_jn(n, xx, derivative=True)
        y = special.spherical_yn(n, xx)
        yd = special.spherical_yn(n, xx, derivative=True)
        an = (j + xx * jd) / ((j + 1j * y) + xx * (jd + 1j * yd))
        bn = j / (j + 1j * y)
    return n, n[None, :] <= nmax[:, None], an, bn


def sphere_amplitude(frequency_hz, radius_m) -> np.ndarray:
    """Exact Mie series of a perfectly conducting sphere, complex amplitude (m), shape (nf,).

    A = (j sqrt(pi) / k) * sum_n (2n+1) (-1)^n (a_n - b_n), with the PEC coefficients
    a_n = psi_n'(x)/xi_n'(x), b_n = psi_n(x)/xi_n(x), psi_n = x j_n(x),
    xi_n = x h_n^(2)(x) (outgoing wave for exp(+j w t)), x = k a (Bohren & Huffman ch. 4,
    conjugated to the engineering convention).  Limits: Rayleigh +sqrt(4 pi) (3/2) k^2 a^3,
    optical -sqrt(pi) a exp(+j 2 k a).  Referred to the centre.  Terms: Wiscombe's n_max;
    spherical Bessel functions from scipy (no overflow for ka in 0.01 .. 300 at this n_max).
    """
    f = _freq(frequency_hz)
    a = _positive(radius_m, "radius_m")
    k = _wavenumber(f)
    n, use, an, bn = pec_mie_coefficients(k * a)
    # h_n^(2) = conj(h_n^(1)) for real x: the engineering coefficients are the conjugates
    terms = (2 * n + 1) * (-1.0) ** n * (np.conj(an) - np.conj(bn))
    terms = np.where(use, terms, 0.0)
    return 1j * np.sqrt(np.pi) / k * terms.sum(axis=1)


# ----------------------------------------------------------------------------- plate, disk
def plate_amplitude(frequency_hz, angle_deg, width_m, height_m) -> np.ndarray:
    """Flat PEC rectangular plate, physical optics, shape (na, nf); both faces.

    A = -j (2 sqrt(pi) w h / lambda) |cos t| sinc(k w sin t), sinc(u) = sin(u)/u; w is the side
    in the rotation plane, t the aspect from the normal (|t| > 90 sees the back face).
    sigma = (4 pi w^2 h^2/lambda^2) cos^2 t sinc^2(k w sin t) (Knott, Shaeffer & Tuley, PO plate;
    from memory).  Co-polarized (HH = VV); PO has no cross-polarized return.  Referred to the
    plate's centre.  Valid away from grazing (PO ignores edge diffraction).
    """
    f, t = _freq(frequency_hz), np.deg2rad(_angles(angle_deg))
    w, h = _positive(width_m, "width_m"), _positive(height_m, "height_m")
    k = _wavenumber(f)[None, :]
    lam = C0 / f[None, :]
    return (-2j * np.sqrt(np.pi) * w * h / lam) * np.abs(np.cos(t))[:, None] * _sinc(k * w * np.sin(t)[:, None])


def disk_amplitude(frequency_hz, angle_deg, radius_m) -> np.ndarray:
    """Flat PEC circular disk, physical optics, shape (na, nf); both faces.

    A = -j (2 sqrt(pi) pi a^2 / lambda) |cos t| [2 J1(u)/u], u = 2 k a sin t; normal incidence
    sigma = 4 pi^3 a^4/lambda^2, off normal pi k^2 a^4 cos^2 t [2 J1(u)/u]^2
    (Mahafza & Elsherbeni, eq. 11.35, 11.37).  Co-polarized only; referred to the centre.
    """
    f, t = _freq(frequency_hz), np.deg2rad(_angles(angle_deg))
    a = _positive(radius_m, "radius_m")
    k = _wavenumber(f)[None, :]
    lam = C0 / f[None, :]
    u = 2 * k * a * np.sin(t)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        jinc = np.where(np.abs(u) < 1e-8, 1.0, 2 * special.j1(u) / np.where(u == 0, 1.0, u))
    return (-2j * np.sqrt(np.pi) * np.pi * a * a / lam) * np.abs(np.cos(t))[:, None] * jinc


# ----------------------------------------------------------------------------- cylinders
def _cylinder2d_sums(x: np.ndarray):
    """TM and TE back-scatter sums sum_n eps_n (-1)^n J_n/H2_n (and with derivatives), x = ka."""
    nmax = _wiscombe(x) + 2
    n = np.arange(0, int(nmax.max()) + 1)
    use = n[None, :] <= nmax[:, None]
    xx = x[:, None]
    eps = np.where(n == 0, 1.0, 2.0) * (-1.0) ** n
    with np.errstate(all="ignore"):
        j, y = special.jv(n, xx), special.yv(n, xx)
        jd, yd = special.jvp(n, xx), special.yvp(n, xx)
        tm = np.where(use, eps * j / (j - 1j * y), 0.0).sum(axis=1)
        te = np.where(use, eps * jd / (jd - 1j * yd), 0.0).sum(axis=1)
    return tm, te


def cylinder2d_amplitude(frequency_hz, radius_m, polarization) -> np.ndarray:
    """Infinite PEC cylinder at normal incidence, 2-D back-scatter amplitude (m^0.5), shape (nf,).

    Defined like the 3-D one with sqrt(2 pi rho) in place of sqrt(4 pi) R, so the echo width
    sigma_2D = |amp|^2 (m).  Series (Balanis, Advanced Engineering EM, ch. 11):
    TM (VV, E along the axis): amp = -2 exp(+j pi/4) / sqrt(k) * sum eps_n (-1)^n J_n(ka)/H2_n(ka);
    TE (HH): amp = +2 exp(+j pi/4) / sqrt(k) * sum eps_n (-1)^n J_n'(ka)/H2_n'(ka)  (the sign
    turns the H-field series into the BSA E-field channel, so both tend to the GO value
    -sqrt(pi a) exp(+j 2 k a) at large ka).  Cross-polarized channels are zero.
    """
    f = _freq(frequency_hz)
    a = _positive(radius_m, "radius_m")
    p = _pol(polarization)
    if p in ("HV", "VH"):
        return np.zeros(f.shape, complex)
    k = _wavenumber(f)
    tm, te = _cylinder2d_sums(k * a)
    pre = 2 * np.exp(1j * np.pi / 4) / np.sqrt(k)
    return -pre * tm if p == "VV" else pre * te


def cylinder2d_echo_width(frequency_hz, radius_m, polarization) -> np.ndarray:
    """2-D echo width sigma_2D (m) of an infinite PEC cylinder: TM (VV) (2 lambda/pi)|sum
    eps_n (-1)^n J_n(ka)/H2_n(ka)|^2, TE (HH) the same with derivatives (Balanis, ch. 11)."""
    return np.abs(cylinder2d_amplitude(frequency_hz, radius_m, polarization)) ** 2


def cylinder_amplitude(frequency_hz, angle_deg, radius_m, length_m, orientation="upright",
                       polarization="VV") -> np.ndarray:
    """Finite PEC cylinder of radius a and length L, shape (na, nf); referred to its centre.

    ``orientation="upright"``: axis vertical, broadside at every turntable angle.  VV = TM,
    HH = TE.  The 2-D series scaled to 3-D: A = amp_2D * L * sqrt(k/pi) * exp(+j pi/4), so
    sigma_3D = sigma_2D 2 L^2/lambda (Jenn, Radar and Laser Cross Section Engineering; from
    memory), right at small ka as long as L >> lambda; the phase factor comes from the 2-D to
    3-D Green's function ratio.  Large ka: A -> -exp(+j pi/4) sqrt(2 pi a L^2/lambda) exp(+j 2 k a).
    End caps ignored.

    ``orientation="flat"``: axis horizontal, in the rotation plane, angle 0 = broadside.
    Physical optics: A = -exp(+j pi/4) L sqrt(k a |cos t|) sinc(k L sin t) exp(+j 2 k a |cos t|),
    sigma = (2 pi a L^2/lambda) |cos t| sinc^2(k L sin t) (Mahafza & Elsherbeni eq. 11.48 at
    broadside; the off-broadside form after Knott / Ruck, from memory).  Polarization-
    independent co-pol; valid for ka >> 1 near broadside (no end caps, no edge waves).
    """
    f, t = _freq(frequency_hz), _angles(angle_deg)
    a, L = _positive(radius_m, "radius_m"), _positive(length_m, "length_m")
    p = _pol(polarization)
    k = _wavenumber(f)
    if p in ("HV", "VH"):
        return np.zeros((t.size, f.size), complex)
    if orientation == "upright":
        amp = cylinder2d_amplitude(f, a, p) * L * np.sqrt(k / np.pi) * np.exp(1j * np.pi / 4)
        return np.broadcast_to(amp, (t.size, f.size)).copy()
    if orientation == "flat":
        tr = np.deg2rad(t)[:, None]
        c = np.abs(np.cos(tr))
        kk = k[None, :]
        return (-np.exp(1j * np.pi / 4) * L * np.sqrt(kk * a * c) * _sinc(kk * L * np.sin(tr))
                * np.exp(2j * kk * a * c))
    raise InputError(f"cylinder orientation must be 'upright' or 'flat', got {orientation!r}")


# ----------------------------------------------------------------------------- dihedral
def dihedral_matrix(frequency_hz, angle_deg, fold_m, face_m, roll_deg=0.0) -> dict[str, np.ndarray]:
    """90-degree PEC dihedral, two faces fold_m (a, along the fold) x face_m (b); dict HH, HV, VH, VV
    of (na, nf) complex amplitudes, BSA convention, referred to the midpoint of the fold line
    (the phase centre of the double bounce).

    Roll: at roll_deg = 0 the fold line is horizontal (parallel to H); positive roll turns the
    fold from H toward V, counter-clockwise as seen from the antenna (H to the right, V up).
    Derivation: a field parallel to the fold is tangential at both faces and is reflected
    twice (-1 * -1 = +1), a field across the fold comes back as from a single plate (-1 in the
    fixed frame), so against a plate or sphere the fold-parallel channel is inverted.  With the
    plate-like value P = -j sqrt(8 pi) a b / lambda (effective area sqrt(2) a b, sigma =
    8 pi a^2 b^2/lambda^2, effective-area relation, from memory) and A = -P:
    S(r) = R(r) diag(-P, P) R(r)^T, R the rotation by r, which gives
    HH = A cos 2r, VV = -A cos 2r, HV = VH = A sin 2r  (Lee & Pottier, A[[cos 2r, sin 2r],
    [sin 2r, -cos 2r]]).  At r = 0: VV = P (as a plate), HH = -P (inverted).

    Turntable pattern (vertical rotation axis): the line of sight turned by t has the
    component sin(alpha) = sin t cos r along the fold and sin(beta) = sin t sin r across it.
    Pattern factor = cos(alpha) sinc(k a sin alpha) (PO, plate-like, in the plane of the fold)
    times max(0, cos beta - |sin beta|) (GO double-bounce area in the plane across the fold;
    16 pi a^2 b^2/lambda^2 sin^2(45 deg - |beta|), from memory).  Valid near the peak only:
    single-face specular flashes at beta = +/-45 deg and edge diffraction are ignored.
    """
    f, t = _freq(frequency_hz), np.deg2rad(_angles(angle_deg))
    a, b = _positive(fold_m, "fold_m"), _positive(face_m, "face_m")
    r = np.deg2rad(_finite(roll_deg, "roll_deg"))
    k = _wavenumber(f)[None, :]
    lam = C0 / f[None, :]
    peak_a = 1j * np.sqrt(8 * np.pi) * a * b / lam          # A = -P
    sa = (np.sin(t) * np.cos(r))[:, None]
    sb = (np.sin(t) * np.sin(r))[:, None]
    ca, cb = np.sqrt(1 - sa ** 2), np.sqrt(1 - sb ** 2)
    pattern = ca * _sinc(k * a * sa) * np.maximum(0.0, cb - np.abs(sb))
    amp = peak_a * pattern
    c2, s2 = math.cos(2 * r), math.sin(2 * r)
    return {"HH": amp * c2, "HV": amp * s2, "VH": amp * s2, "VV": -amp * c2}


def dihedral_amplitude(frequency_hz, angle_deg, fold_m, face_m, roll_deg, polarization) -> np.ndarray:
    """One channel of :func:`dihedral_matrix`, shape (na, nf)."""
    return dihedral_matrix(frequency_hz, angle_deg, fold_m, face_m, roll_deg)[_pol(polarization)]


# ----------------------------------------------------------------------------- trihedral
PEAK_ONLY_SHAPES = ("trihedral",)  # models that give their peak value at every angle


def shape_is_angle_independent_peak(spec: dict | None) -> bool:
    """True for a shape whose model is its peak value only, the same at every angle (trihedral)."""
    return bool(spec) and spec.get("shape") in PEAK_ONLY_SHAPES


def trihedral_amplitude(frequency_hz, angle_deg, edge_m, kind="triangular", polarization="VV") -> np.ndarray:
    """Trihedral corner reflector, peak value only (angle-independent), referred to its apex.

    sigma = 4 pi a^4/(3 lambda^2) (triangular) or 12 pi a^4/lambda^2 (square), a the inner
    edge (effective-area relation, from memory).  Odd bounce: plate-like, A = -j sqrt(sigma),
    HH = VV, cross-pol zero.  Shape (na, nf) when angle_deg is given, (nf,) when None.
    """
    f = _freq(frequency_hz)
    a = _positive(edge_m, "edge_m")
    lam = C0 / f
    if kind == "triangular":
        amp = -1j * np.sqrt(4 * np.pi / 3) * a * a / lam
    elif kind == "square":
        amp = -1j * np.sqrt(12 * np.pi) * a * a / lam
    else:
        raise InputError(f"trihedral kind must be 'triangular' or 'square', got {kind!r}")
    if _pol(polarization) in ("HV", "VH"):
        amp = np.zeros_like(amp)
    if angle_deg is None:
        return amp
    return np.broadcast_to(amp, (_angles(angle_deg).size, f.size)).copy()


# ----------------------------------------------------------------------------- tables
@dataclass
class TableReference:
    """A tabulated reference: per polarization a full (angle, frequency) grid of sigma and phase.

    ``grids[pol] = (frequency_hz (nf,), angle_deg (na,), sigma_m2 (na, nf), phase_rad (na, nf))``,
    phase unwrapped along frequency then angle; ``path`` names the source file for errors.
    """

    path: str
    grids: dict

    @property
    def polarizations(self) -> tuple[str, ...]:
        return tuple(sorted(self.grids))

    def amplitude(self, frequency_hz, angle_deg, polarization) -> np.ndarray:
        """Complex amplitude (na, nf): linear interpolation of sigma (linear units) and of the
        unwrapped phase in frequency and angle; InputError outside the table's range or for a
        polarization it lacks.  Without a phase column the phase is zero."""
        f, t, p = _freq(frequency_hz), _angles(angle_deg), _pol(polarization)
        if p not in self.grids:
            raise InputError(f"reference table has no {p} data (it has {', '.join(self.polarizations)})",
                             path=self.path)
        tf, ta, sig, ph = self.grids[p]
        for q, grid, what, unit in ((f, tf, "frequency", "Hz"), (t, ta, "angle", "deg")):
            tol = 1e-9 * max(1.0, float(np.max(np.abs(grid))))
            if q.min() < grid[0] - tol or q.max() > grid[-1] + tol:
                raise InputError(f"{p} {what} {q.min():g}..{q.max():g} {unit} outside the table's "
                                 f"{grid[0]:g}..{grid[-1]:g} {unit}", path=self.path)

        def interp2(z):
            along_f = np.array([np.interp(f, tf, row) for row in z])          # (na_table, nf)
            return np.array([np.interp(t, ta, col) for col in along_f.T]).T  # (na, nf)

        s = np.maximum(interp2(sig), 0.0)
        return np.sqrt(s) * np.exp(1j * interp2(ph))


def load_table_reference(path) -> TableReference:
    """Read a CSV reference table, header ``frequency_hz,angle_deg,polarization,rcs_dbsm[,phase_deg]``.

    One row per (polarization, angle, frequency); each polarization must form a full grid.
    Phase in degrees, this module's convention (exp(+j w t), referred to the target's centre).
    Bad rows raise InputError naming the path and line.
    """
    path = str(path)
    base = ["frequency_hz", "angle_deg", "polarization", "rcs_dbsm"]
    try:
        fh = open(path, newline="", encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot read reference table: {exc.strerror}", path=path) from None
    rows: dict[str, dict[tuple[float, float], tuple[float, float]]] = {}
    with fh:
        reader = csv.reader(fh)
        try:
            header = [h.strip().lower() for h in next(reader)]
        except StopIteration:
            raise InputError("empty reference table", path=path, line=1) from None
        except (csv.Error, UnicodeDecodeError) as exc:
            raise InputError(f"unreadable reference table: {exc}", path=path, line=1) from None
        if header not in (base, base + ["phase_deg"]):
            raise InputError("header must be frequency_hz,angle_deg,polarization,rcs_dbsm[,phase_deg], "
                             f"got {','.join(header)}", path=path, line=1)
        has_phase = len(header) == 5
        try:
            for row in reader:
                line = reader.line_num
                if not row or all(not c.strip() for c in row):
                    continue
                if len(row) != len(header):
                    raise InputError(f"expected {len(header)} fields, got {len(row)}", path=path, line=line)
                try:
                    fr, an, db = float(row[0]), float(row[1]), float(row[3])
                    ph = float(row[4]) if has_phase else 0.0
                except ValueError:
                    raise InputError(f"not a number in {','.join(row)}", path=path, line=line) from None
                if not all(math.isfinite(v) for v in (fr, an, db, ph)) or fr <= 0:
                    raise InputError("values must be finite and the frequency positive", path=path, line=line)
                pol = row[2].strip().upper()
                if pol not in POLARIZATIONS:
                    raise InputError(f"unknown polarization {row[2]!r}", path=path, line=line)
                cell = rows.setdefault(pol, {})
                if (fr, an) in cell:
                    raise InputError(f"duplicate row for {pol} at {fr:g} Hz, {an:g} deg", path=path, line=line)
                cell[(fr, an)] = (10.0 ** (db / 10.0), math.radians(ph))
        except (csv.Error, UnicodeDecodeError) as exc:
            raise InputError(f"unreadable reference table: {exc}", path=path, line=reader.line_num) from None
    if not rows:
        raise InputError("reference table has no data rows", path=path)
    grids = {}
    for pol, cell in rows.items():
        fs = np.array(sorted({k[0] for k in cell}))
        an = np.array(sorted({k[1] for k in cell}))
        if len(cell) != fs.size * an.size:
            raise InputError(f"{pol} rows do not form a full frequency x angle grid "
                             f"({len(cell)} rows for {fs.size} frequencies x {an.size} angles)", path=path)
        sig = np.array([[cell[(fr, a)][0] for fr in fs] for a in an])
        ph = np.array([[cell[(fr, a)][1] for fr in fs] for a in an])
        ph = np.unwrap(np.unwrap(ph, axis=1), axis=0)
        grids[pol] = (fs, an, sig, ph)
    return TableReference(path=path, grids=grids)


# ----------------------------------------------------------------------------- dispatcher
def required_keys(shape) -> tuple[str, ...]:
    """The manifest dimension keys a shape needs; InputError for an unknown shape."""
    if shape not in _REQUIRED:
        raise InputError(f"unknown reference shape {shape!r}: expected one of {', '.join(SHAPES)}")
    return _REQUIRED[shape]


def _get(spec: Mapping, key: str):
    if key not in spec or spec[key] is None:
        raise InputError(f"reference shape {spec.get('shape')!r} needs the key {key!r}")
    return spec[key]


def reference_amplitude(spec: Mapping, frequency_hz, angle_deg, polarization, base_dir=".") -> np.ndarray:
    """Theory amplitude (na, nf) of the reference described by manifest keys.

    spec["shape"]: sphere (radius_m), plate (width_m, height_m), disk (radius_m), cylinder
    (radius_m, length_m, orientation="upright"|"flat"), dihedral (fold_m, face_m, roll_deg=0),
    trihedral (edge_m, kind="triangular"|"square"), table (file, relative to base_dir).
    Cross-polarized channels of every shape but the dihedral and a table are zero.
    """
    if not isinstance(spec, Mapping):
        raise InputError("reference description must be a mapping with a 'shape' key")
    shape = spec.get("shape")
    keys = required_keys(shape)
    vals = {k: _get(spec, k) for k in keys}
    f, t, p = _freq(frequency_hz), _angles(angle_deg), _pol(polarization)
    co = p in ("HH", "VV")
    shape_na_nf = (t.size, f.size)
    if shape == "sphere":
        amp = sphere_amplitude(f, vals["radius_m"])
        return np.broadcast_to(amp if co else 0 * amp, shape_na_nf).copy()
    if shape == "plate":
        amp = plate_amplitude(f, t, vals["width_m"], vals["height_m"])
    elif shape == "disk":
        amp = disk_amplitude(f, t, vals["radius_m"])
    elif shape == "cylinder":
        return cylinder_amplitude(f, t, vals["radius_m"], vals["length_m"],
                                  spec.get("orientation", "upright"), p)
    elif shape == "dihedral":
        return dihedral_amplitude(f, t, vals["fold_m"], vals["face_m"], spec.get("roll_deg", 0.0) or 0.0, p)
    elif shape == "trihedral":
        return trihedral_amplitude(f, t, vals["edge_m"], spec.get("kind", "triangular"), p)
    else:  # table
        file = os.path.join(os.fspath(base_dir), os.fspath(vals["file"]))
        return load_table_reference(file).amplitude(f, t, p)
    return amp if co else np.zeros_like(amp)


def leading_surface_m(spec: Mapping) -> float:
    """Distance (m) from a shape's reference point to the surface nearest the antenna, where its
    strongest echo comes from (geometrical optics: the specular point of a convex surface).

    Sphere: its radius (the specular point at R - a); cylinder, upright or flat: its radius
    (the specular line at R - a, broadside); disk, plate: 0 (the face passes through the
    centre); dihedral, trihedral: 0 (the multiple-bounce echo appears at the fold line or apex,
    their reference points); table: 0 (unknown).
    """
    if not isinstance(spec, Mapping):
        return 0.0
    if spec.get("shape") in ("sphere", "cylinder"):
        return _positive(spec.get("radius_m"), "radius_m")
    return 0.0


def theory_is_null(spec: Mapping, polarization, atol_db: float = -60.0) -> bool:
    """True where the shape's theory for that channel is null (more than |atol_db| below the
    shape's peak co-polarized value): HV and VH for every shape but a dihedral; for a dihedral
    20 log10|cos 2r| (co-pol) or 20 log10|sin 2r| (cross-pol) below atol_db.  A table is never
    null here (a channel it lacks raises InputError when it is used)."""
    if not isinstance(spec, Mapping):
        raise InputError("reference description must be a mapping with a 'shape' key")
    shape = spec.get("shape")
    required_keys(shape)
    p = _pol(polarization)
    if shape == "table":
        return False
    if shape != "dihedral":
        return p in ("HV", "VH")
    r = math.radians(_finite(spec.get("roll_deg", 0.0) or 0.0, "roll_deg"))
    factor = abs(math.cos(2 * r)) if p in ("HH", "VV") else abs(math.sin(2 * r))
    return factor == 0.0 or 20 * math.log10(factor) < atol_db
