"""Physical model of the bare object and its cloaked revisions (for the chamber simulator).

The object is an upright conducting circular cylinder (radius a, length L) standing on the
turntable: broadside at every turntable angle.  A cloaked revision is the same cylinder with a
concentric coating a < rho < b of complex relative permittivity and permeability (engineering
convention, exp(+j w t): a lossy material has eps_r = eps' - j eps'', mu_r = mu' - j mu'').

Method: the exact 2-D boundary-value series of a coated PEC cylinder at normal incidence
(Balanis, Advanced Engineering Electromagnetics, ch. 11; Ruck, Radar Cross Section Handbook,
ch. 4; the homogeneous-cylinder limit is Bohren & Huffman ch. 8, conjugated).  TM (E along
the axis) is VV, TE (H along the axis) is HH.  With the incident wave exp(-j k x) =
sum_n j^-n J_n(k rho) e^(j n phi), the scattered field is sum_n j^-n a_n H2_n(k rho) e^(j n phi)
(H2 = outgoing for exp(+j w t)) and

    a_n = -(J_n'(kb) - q_n J_n(kb)) / (H2_n'(kb) - q_n H2_n(kb)),

q_n the normalised admittance looking into the coating at rho = b: with k1 = k sqrt(eps mu),
TM: q_n = sqrt(eps/mu) F_n'(k1 b)/F_n(k1 b), F_n(x) = J_n(x) - [J_n(k1 a)/Y_n(k1 a)] Y_n(x)
(E_z = 0 on the core); TE: q_n = sqrt(mu/eps) G_n'(k1 b)/G_n(k1 b), G_n(x) = J_n(x) -
[J_n'(k1 a)/Y_n'(k1 a)] Y_n(x) (E_phi = 0 on the core).  No coating (b = a) gives the PEC
coefficients -J_n/H2_n (TM) and -J_n'/H2_n' (TE).

Back-scatter coefficient S = sum_{all n} (-1)^n a_n; 2-D echo width (4/k)|S|^2 =
(2 lambda/pi)|S|^2.  Amplitudes follow :mod:`cloakrcs.references` exactly (same BSA sign for
HH, same 2-D to 3-D phase rule as ``references.cylinder_amplitude``):

    2-D:  amp = 2 exp(+j pi/4) S / sqrt(k)  (VV),  -2 exp(+j pi/4) S / sqrt(k)  (HH)   [m^0.5]
    3-D:  A = amp * L sqrt(k/pi) exp(+j pi/4)  i.e.  A = +-2 j L S / sqrt(pi)          [m]

so sigma_3D = sigma_2D 2 L^2 / lambda at broadside (Jenn, Radar and Laser Cross Section
Engineering; from memory), end caps ignored, valid for L >> lambda.

Angular features (single scattering, added coherently to the series; documented approximations):

* seam: a narrow axial metal strip of width w on the coating at body azimuth phi0 (where a
  coating sheet is closed).  Physical optics of a flat strip, 2-D echo width
  k w^2 cos^2 d [sin(k w sin d)/(k w sin d)]^2 (Knott, Shaeffer & Tuley; from memory), d the angle
  between the radar and the strip's normal; S_seam = -(k w/2) cos d sinc(k w sin d)
  exp(+j 2 k b cos d) for cos d > 0 and 0 when the core hides it (BSA, both polarizations);
  its interaction with the coating below it is ignored.
* bolt: a small conducting hemisphere (radius r) on the bare cylinder at body azimuth phi0,
  optical sphere amplitude -sqrt(pi) r exp(+j 2 k (a cos d + r)) times max(cos d, 0) (a taper
  for the core's shadow), added directly in 3-D; creeping waves and the hemisphere-cylinder
  interaction are ignored.
* mount_deg: the object sits on the turntable rotated by mount_deg: body azimuth = turntable
  angle - mount_deg, so a feature at phi0 faces the radar at turntable angle phi0 + mount_deg.

Angles in degrees, frequency in Hz, amplitudes complex (na, nf) in metres.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .constants import C0
from .errors import InputError

BARE_KEYS = {"radius_m", "length_m", "bolt", "mount_deg"}
COATED_KEYS = {"radius_m", "length_m", "thickness_m", "eps_r", "mu_r", "seam", "mount_deg"}
BOLT_KEYS = {"azimuth_deg", "radius_m"}
SEAM_KEYS = {"azimuth_deg", "width_m"}


# ----------------------------------------------------------------------------- helpers
def _wavenumber(frequency_hz) -> np.ndarray:
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    return 2 * np.pi * f / C0


def _n_terms(x_max: float) -> int:
    """Series length for the largest exterior argument k b: x + 4 x^(1/3) + 6 (Wiscombe's rule, padded)."""
    return int(np.floor(x_max + 4.0 * np.cbrt(x_max) + 6.0))


def _co_pol(polarization) -> str | None:
    p = str(polarization).upper()
    if p not in ("HH", "VV", "HV", "VH"):
        raise InputError(f"polarization must be HH, VV, HV or VH, got {polarization!r}")
    return p if p in ("HH", "VV") else None


def complex_value(value, name: str) -> complex:
    """A material constant from TOML: a number or [real, imag] (imag <= 0 for loss, exp(+j w t))."""
    try:
        if isinstance(value, (list, tuple)):
            if len(value) != 2:
                raise ValueError
            z = complex(float(value[0]), float(value[1]))
        else:
            z = complex(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number or [real, imag], got {value!r}") from None
    if not (np.isfinite(z.real) and np.isfinite(z.imag)) or z == 0:
        raise InputError(f"{name} must be finite and non-zero, got {value!r}")
    if z.imag > 0:
        raise InputError(f"{name} = {value!r} has a positive imaginary part: a passive material has "
                         f"imag <= 0 in the exp(+j w t) convention (eps' - j eps'')")
    return z


def _coating_admittance(n, x1a, x1b, p) -> np.ndarray:
    """F_n'(x1b)/F_n(x1b) for the coating's standing wave that satisfies the core condition
    (TM: F(x1a) = 0; TE: F'(x1a) = 0).  Two exact forms of the same function, chosen per term
    for accuracy: J/Y where the order exceeds |x1a| (Hankel forms cancel there), H1/H2 below it
    (where a lossy coating makes J and Y grow like exp|Im x| and their difference cancels)."""
    if p == "VV":
        u = special.jv(n, x1a) / special.yv(n, x1a)
        r = special.hankel2(n, x1a) / special.hankel1(n, x1a)
    else:
        u = special.jvp(n, x1a) / special.yvp(n, x1a)
        r = special.h2vp(n, x1a) / special.h1vp(n, x1a)
    jy = (special.jvp(n, x1b) - u * special.yvp(n, x1b)) / (special.jv(n, x1b) - u * special.yv(n, x1b))
    hh = (special.h2vp(n, x1b) - r * special.h1vp(n, x1b)) / (special.hankel2(n, x1b) - r * special.hankel1(n, x1b))
    return np.where(n >= np.abs(x1a), jy, hh)


# ----------------------------------------------------------------------------- 2-D series
def coated_cylinder_coefficients(frequency_hz, radius_m, outer_radius_m, eps_r=1.0, mu_r=1.0,
                                 polarization="VV", n_max: int | None = None) -> np.ndarray:
    """Scattering coefficients a_n, n = 0..n_max, of a PEC cylinder (radius a) with a coating to
    radius b, shape (nf, n_max + 1); a_-n = a_n.  VV = TM, HH = TE (see module docstring)."""
    p = _co_pol(polarization)
    if p is None:
        raise InputError("a cylinder at normal incidence has no cross-polarized coefficients")
    a, b = float(radius_m), float(outer_radius_m)
    if not (a > 0 and b >= a):
        raise InputError(f"need 0 < radius_m <= outer radius, got {a!r}, {b!r}")
    k = _wavenumber(frequency_hz)[:, None]
    n = np.arange(0, (n_max if n_max is not None else _n_terms(float(k.max() * b))) + 1)[None, :]
    x = k * b
    J, Jd = special.jv(n, x), special.jvp(n, x)
    H = J - 1j * special.yv(n, x)
    Hd = Jd - 1j * special.yvp(n, x)
    if b == a:  # no coating: the PEC coefficients
        return -J / H if p == "VV" else -Jd / Hd
    eps, mu = complex(eps_r), complex(mu_r)
    m = np.sqrt(eps * mu)
    k1 = k * m
    x1a, x1b = k1 * a, k1 * b
    with np.errstate(all="ignore"):
        ratio_q = _coating_admittance(n, x1a, x1b, p)
        q = (np.sqrt(eps / mu) if p == "VV" else np.sqrt(mu / eps)) * ratio_q
        coef = -(Jd - q * J) / (Hd - q * H)
    # terms far past k b underflow/overflow harmlessly: they carry no energy
    return np.where(np.isfinite(coef), coef, 0.0)


def backscatter_sum(coefficients: np.ndarray) -> np.ndarray:
    """S = sum over all n of (-1)^n a_n = a_0 + 2 sum_{n>=1} (-1)^n a_n, shape (nf,)."""
    n = np.arange(coefficients.shape[-1])
    w = np.where(n == 0, 1.0, 2.0) * (-1.0) ** n
    return (coefficients * w).sum(axis=-1)


def coated_cylinder_amplitude_2d(frequency_hz, radius_m, outer_radius_m, eps_r=1.0, mu_r=1.0,
                                 polarization="VV") -> np.ndarray:
    """2-D complex back-scatter amplitude (m^0.5) of the coated cylinder, shape (nf,); echo width
    = |amp|^2.  Same convention as ``references.cylinder2d_amplitude`` (BSA: HH = -TE series)."""
    p = _co_pol(polarization)
    k = _wavenumber(frequency_hz)
    if p is None:
        return np.zeros(k.shape, complex)
    s = backscatter_sum(coated_cylinder_coefficients(frequency_hz, radius_m, outer_radius_m, eps_r, mu_r, p))
    sign = 1.0 if p == "VV" else -1.0
    return sign * 2 * np.exp(1j * np.pi / 4) * s / np.sqrt(k)


def to_3d(amplitude_2d, frequency_hz, length_m) -> np.ndarray:
    """Scale a broadside 2-D amplitude to a cylinder of length L: A = amp L sqrt(k/pi) exp(+j pi/4)
    (sigma_3D = sigma_2D 2 L^2/lambda; the phase rule of ``references.cylinder_amplitude``)."""
    k = _wavenumber(frequency_hz)
    return np.asarray(amplitude_2d) * float(length_m) * np.sqrt(k / np.pi) * np.exp(1j * np.pi / 4)


# ----------------------------------------------------------------------------- features
def _body_angle(angle_deg, azimuth_deg, mount_deg) -> np.ndarray:
    """d (rad, (na, 1)): angle between the radar and the normal at body azimuth phi0."""
    t = np.atleast_1d(np.asarray(angle_deg, dtype=float))
    return np.deg2rad(t - float(mount_deg) - float(azimuth_deg))[:, None]


def seam_amplitude_2d(frequency_hz, angle_deg, outer_radius_m, width_m, azimuth_deg=0.0, mount_deg=0.0) -> np.ndarray:
    """2-D amplitude (m^0.5, BSA, both co-polarizations) of a narrow axial metal strip at radius b,
    shape (na, nf); physical optics, zero while the core hides it (see module docstring)."""
    k = _wavenumber(frequency_hz)[None, :]
    d = _body_angle(angle_deg, azimuth_deg, mount_deg)
    c = np.cos(d)
    w = float(width_m)
    u = k * w * np.sin(d)
    s = -(k * w / 2) * c * np.sinc(u / np.pi) * np.exp(2j * k * float(outer_radius_m) * c)
    s = np.where(c > 0, s, 0.0)
    return 2 * np.exp(1j * np.pi / 4) * s / np.sqrt(k)


def bolt_amplitude(frequency_hz, angle_deg, cylinder_radius_m, bolt_radius_m, azimuth_deg=0.0, mount_deg=0.0) -> np.ndarray:
    """3-D amplitude (m) of a small conducting hemisphere on the cylinder, shape (na, nf):
    -sqrt(pi) r exp(+j 2 k (a cos d + r)) max(cos d, 0) (optical sphere, shadow taper)."""
    k = _wavenumber(frequency_hz)[None, :]
    c = np.cos(_body_angle(angle_deg, azimuth_deg, mount_deg))
    r = float(bolt_radius_m)
    return -np.sqrt(np.pi) * r * np.exp(2j * k * (float(cylinder_radius_m) * c + r)) * np.maximum(c, 0.0)


# ----------------------------------------------------------------------------- objects
def _check_keys(params: dict, allowed: set, what: str) -> None:
    unknown = sorted(set(params) - allowed)
    if unknown:
        raise InputError(f"{what}: unknown key '{unknown[0]}' (known: {', '.join(sorted(allowed))})")


def _length(params: dict, key: str, what: str, required=True, default=None, allow_zero=False) -> float:
    if key not in params:
        if required:
            raise InputError(f"{what}: missing key '{key}'")
        return default
    v = params[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        raise InputError(f"{what}: '{key}' must be a positive number (m), got {v!r}")
    return float(v)


def _angle_key(params: dict, key: str, what: str) -> float:
    v = params.get(key, 0.0)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v):
        raise InputError(f"{what}: '{key}' must be a number of degrees, got {v!r}")
    return float(v)


def bare_cylinder_amplitude(params: dict, frequency_hz, angle_deg, polarization) -> np.ndarray:
    """Bare PEC cylinder (radius_m, length_m), optional bolt {azimuth_deg, radius_m} and mount_deg;
    complex amplitude (na, nf) in m, referred to the cylinder's axis."""
    _check_keys(params, BARE_KEYS, "bare_cylinder")
    a = _length(params, "radius_m", "bare_cylinder")
    L = _length(params, "length_m", "bare_cylinder")
    t = np.atleast_1d(np.asarray(angle_deg, dtype=float))
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    p = _co_pol(polarization)
    if p is None:
        return np.zeros((t.size, f.size), complex)
    amp = np.broadcast_to(to_3d(coated_cylinder_amplitude_2d(f, a, a, polarization=p), f, L), (t.size, f.size)).copy()
    bolt = params.get("bolt")
    if bolt:
        if not isinstance(bolt, dict):
            raise InputError("bare_cylinder: 'bolt' must be a table {azimuth_deg, radius_m}")
        _check_keys(bolt, BOLT_KEYS, "bare_cylinder.bolt")
        amp += bolt_amplitude(f, t, a, _length(bolt, "radius_m", "bare_cylinder.bolt"),
                              _angle_key(bolt, "azimuth_deg", "bare_cylinder.bolt"),
                              _angle_key(params, "mount_deg", "bare_cylinder"))
    return amp


def coated_cylinder_amplitude(params: dict, frequency_hz, angle_deg, polarization) -> np.ndarray:
    """Coated PEC cylinder (radius_m, length_m, thickness_m, eps_r, mu_r), optional seam
    {azimuth_deg, width_m} and mount_deg; complex amplitude (na, nf) in m, referred to the axis."""
    _check_keys(params, COATED_KEYS, "coated_cylinder")
    a = _length(params, "radius_m", "coated_cylinder")
    L = _length(params, "length_m", "coated_cylinder")
    d = _length(params, "thickness_m", "coated_cylinder", allow_zero=True)
    eps = complex_value(params.get("eps_r", 1.0), "coated_cylinder: eps_r")
    mu = complex_value(params.get("mu_r", 1.0), "coated_cylinder: mu_r")
    t = np.atleast_1d(np.asarray(angle_deg, dtype=float))
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    p = _co_pol(polarization)
    if p is None:
        return np.zeros((t.size, f.size), complex)
    b = a + d
    amp2 = np.broadcast_to(coated_cylinder_amplitude_2d(f, a, b, eps, mu, p), (t.size, f.size)).copy()
    seam = params.get("seam")
    if seam:
        if not isinstance(seam, dict):
            raise InputError("coated_cylinder: 'seam' must be a table {azimuth_deg, width_m}")
        _check_keys(seam, SEAM_KEYS, "coated_cylinder.seam")
        amp2 += seam_amplitude_2d(f, t, b, _length(seam, "width_m", "coated_cylinder.seam"),
                                  _angle_key(seam, "azimuth_deg", "coated_cylinder.seam"),
                                  _angle_key(params, "mount_deg", "coated_cylinder"))
    return to_3d(amp2, f, L)


def outer_size_m(model: str, params: dict) -> float:
    """Largest dimension (m) of a cylinder model: max(length, outer diameter)."""
    a = float(params.get("radius_m", 0.0))
    b = a + float(params.get("thickness_m", 0.0)) if model == "coated_cylinder" else a
    return max(float(params.get("length_m", 0.0)), 2 * b)


# ----------------------------------------------------------------------------- bistatic
# The series holds at every scattering angle: the far field of sum_n j^-n a_n H2_n(k rho) e^(j n phi)
# is sqrt(2/(pi k rho)) e^(-j k rho) e^(+j pi/4) T(phi), T(phi) = sum_n a_n e^(j n phi), phi measured
# from the forward direction (phi = theta_s = 180 deg - beta; phi = 180 deg is the back-scatter sum).

def angular_sum(coefficients: np.ndarray, scattering_angle_deg) -> np.ndarray:
    """T(phi) = a_0 + 2 sum_{n>=1} a_n cos(n phi) at scattering angles phi (deg), shape (n_phi, nf)."""
    phi = np.deg2rad(np.atleast_1d(np.asarray(scattering_angle_deg, dtype=float)))
    n = np.arange(coefficients.shape[-1])
    w = np.where(n == 0, 1.0, 2.0) * np.cos(np.outer(phi, n))  # (n_phi, n)
    return w @ coefficients.T


def coated_cylinder_bistatic_2d(frequency_hz, radius_m, outer_radius_m, eps_r=1.0, mu_r=1.0,
                                polarization="VV", bistatic_deg=0.0) -> np.ndarray:
    """2-D amplitude (m^0.5) of the coated cylinder at bistatic angles beta (deg), shape (n_beta, nf):
    +-2 exp(+j pi/4) T(180 - beta) / sqrt(k) (VV +, HH -: the receive alignment of
    :mod:`cloakrcs.bistatic_references`, equal to the monostatic amplitude at beta = 0);
    echo width sigma_2D(beta) = (4/k) |T|^2."""
    p = _co_pol(polarization)
    k = _wavenumber(frequency_hz)
    beta = np.atleast_1d(np.asarray(bistatic_deg, dtype=float))
    if p is None:
        return np.zeros((beta.size, k.size), complex)
    t = angular_sum(coated_cylinder_coefficients(frequency_hz, radius_m, outer_radius_m, eps_r, mu_r, p),
                    180.0 - beta)
    sign = 1.0 if p == "VV" else -1.0
    return sign * 2 * np.exp(1j * np.pi / 4) * t / np.sqrt(k)[None, :]


def scattering_width_2d(coefficients: np.ndarray, frequency_hz) -> np.ndarray:
    """Total scattering width per unit length (m), (1/2 pi) integral of sigma_2D over all angles
    = (4/k) (|a_0|^2 + 2 sum_{n>=1} |a_n|^2) (orthogonality of e^(j n phi); Bohren & Huffman ch. 8)."""
    k = _wavenumber(frequency_hz)
    n = np.arange(coefficients.shape[-1])
    w = np.where(n == 0, 1.0, 2.0)
    return 4 / k * (np.abs(coefficients) ** 2 * w).sum(axis=-1)


def extinction_width_2d(coefficients: np.ndarray, frequency_hz) -> np.ndarray:
    """Extinction width per unit length (m) from the 2-D optical theorem, -(4/k) Re T(0) in the
    exp(+j w t) convention of this module (Bohren & Huffman ch. 8 write (4/k) Re T(0) with their
    exp(-i w t) coefficients b_n = -a_n)."""
    k = _wavenumber(frequency_hz)
    return -4 / k * angular_sum(coefficients, [0.0])[0].real


def cylinder_model_bistatic_amplitude(model: str, params: dict, frequency_hz, bistatic_deg, polarization) -> np.ndarray:
    """3-D amplitude (m), shape (n_beta, nf), of a bare_cylinder or coated_cylinder model at bistatic
    angles in the horizontal plane (broadside for both antennas, so sigma_3D = sigma_2D 2 L^2 / lambda
    holds at every beta).  The series only: the seam and bolt (monostatic single-scattering
    additions) are left out, and the turntable angle does not matter (circular symmetry)."""
    keys = BARE_KEYS if model == "bare_cylinder" else COATED_KEYS
    _check_keys(params, keys, model)
    a = _length(params, "radius_m", model)
    L = _length(params, "length_m", model)
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    if model == "bare_cylinder":
        b, eps, mu = a, 1.0, 1.0
    else:
        b = a + _length(params, "thickness_m", model, allow_zero=True)
        eps = complex_value(params.get("eps_r", 1.0), f"{model}: eps_r")
        mu = complex_value(params.get("mu_r", 1.0), f"{model}: mu_r")
    amp2 = coated_cylinder_bistatic_2d(f, a, b, eps, mu, polarization, bistatic_deg)
    return to_3d(amp2, f, L)
