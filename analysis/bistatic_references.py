"""Analytic bistatic references: the PEC sphere (Mie series) and the flat plate (physical optics).

Geometry: the bistatic angle beta (degrees) is the angle between the directions from the target
to the transmitter and to the receiver, both in the horizontal measurement plane: 0 =
monostatic, 180 = forward.  The scattering angle (from the forward direction) is
theta_s = 180 - beta.

Polarization (README, "Bistatic and forward scattering"): with the measurement plane
horizontal, V (E perpendicular to that plane) goes with Bohren & Huffman's S1 (field
perpendicular to the scattering plane) and H (E in the plane) with S2 (Bohren & Huffman,
Absorption and Scattering of Light by Small Particles, ch. 4, eqs. 4.74).  Bohren & Huffman use
exp(-i w t); this module returns engineering amplitudes (exp(+j w t), conjugated) with the
convention of :mod:`cloakrcs.references`: A in metres, sigma = |A|^2, referred to the centre,
and the receive channel aligned so that every channel reduces to the monostatic
(backscatter-alignment) value at beta = 0::

    A_VV = -j sqrt(4 pi) conj(S1(theta_s)) / k,    A_HH = +j sqrt(4 pi) conj(S2(theta_s)) / k

so sigma(beta) = (4 pi / k^2) |S_j(theta_s)|^2.  In the forward-scattering alignment (FSA: the
scattered field compared with the incident field, the frame of the optical theorem) the VV
amplitude is unchanged and the HH amplitude changes sign (the backscatter/forward-scattering
alignment relation, S_BSA = diag(-1, 1) S_FSA for (H, V); from memory).
:func:`fsa_amplitude` converts.

The bistatic equivalence theorem's small-angle approximation (monostatic RCS at the
bisector, at the frequency f cos(beta/2); Crispin & Siegel, from memory) is stated in
:func:`equivalence_theorem_rcs` for tests only: it is never used as a reference.
"""

from __future__ import annotations

import numpy as np

from .constants import C0
from .references import _angles, _freq, _pol, _positive, pec_mie_coefficients


def bistatic_angles(bistatic_deg) -> np.ndarray:
    """Bistatic angles (degrees), a non-empty 1-D array within [0, 180]; InputError otherwise."""
    from .errors import InputError

    b = _angles(bistatic_deg)
    if np.any(b < -1e-9) or np.any(b > 180 + 1e-9):
        raise InputError("bistatic angles must lie in [0, 180] degrees")
    return np.clip(b, 0.0, 180.0)


def _pi_tau(mu: np.ndarray, n_max: int) -> tuple[np.ndarray, np.ndarray]:
    """Angular functions pi_n(mu), tau_n(mu), n = 1..n_max, shape (len(mu), n_max)
    (Bohren & Huffman eq. 4.47 recurrences)."""
    mu = np.asarray(mu, float)
    pi = np.zeros((mu.size, n_max + 1))
    tau = np.zeros((mu.size, n_max + 1))
    if n_max >= 1:
        pi[:, 1] = 1.0
    for n in range(2, n_max + 1):
        pi[:, n] = ((2 * n - 1) * mu * pi[:, n - 1] - n * pi[:, n - 2]) / (n - 1)
    n = np.arange(n_max + 1)
    tau[:, 1:] = n[1:] * mu[:, None] * pi[:, 1:] - (n[1:] + 1) * pi[:, :-1]
    return pi[:, 1:], tau[:, 1:]


def sphere_s1_s2(frequency_hz, radius_m, scattering_angle_deg) -> tuple[np.ndarray, np.ndarray]:
    """Mie amplitude functions (S1, S2) of a PEC sphere in Bohren & Huffman's normalisation and
    convention (exp(-i w t)), each shape (n_angles, nf).

    PEC limit of the Mie coefficients: a_n = psi_n'(x)/xi_n'(x), b_n = psi_n(x)/xi_n(x),
    psi_n = x j_n(x), xi_n = x h_n^(1)(x), x = k a (Bohren & Huffman eqs. 4.53, m -> infinity);
    S1 = sum (2n+1)/(n(n+1)) (a_n pi_n + b_n tau_n), S2 = sum (2n+1)/(n(n+1)) (a_n tau_n + b_n pi_n)
    (eq. 4.74).  Optical theorem: C_ext = (4 pi / k^2) Re S(0) (eq. 4.76).  Terms: Wiscombe's n_max.
    """
    f = _freq(frequency_hz)
    a = _positive(radius_m, "radius_m")
    theta = np.deg2rad(_angles(scattering_angle_deg))
    n, use, an, bn = pec_mie_coefficients(2 * np.pi * f * a / C0)
    w = np.where(use, (2 * n + 1) / (n * (n + 1.0)), 0.0)
    an, bn = np.where(use, an * w, 0.0), np.where(use, bn * w, 0.0)  # (nf, n)
    pi, tau = _pi_tau(np.cos(theta), n.size)  # (nt, n)
    s1 = pi @ an.T + tau @ bn.T
    s2 = tau @ an.T + pi @ bn.T
    return s1, s2


def sphere_bistatic_amplitude(frequency_hz, radius_m, bistatic_deg, polarization) -> np.ndarray:
    """PEC sphere at bistatic angles beta, engineering amplitude (m), shape (n_beta, nf).

    VV = -j sqrt(4 pi) conj(S1(180 - beta)) / k, HH = +j sqrt(4 pi) conj(S2(180 - beta)) / k
    (module docstring); HV = VH = 0 in the measurement plane.  At beta = 0 this equals
    :func:`cloakrcs.references.sphere_amplitude` in both channels.
    """
    f = _freq(frequency_hz)
    beta = bistatic_angles(bistatic_deg)
    p = _pol(polarization)
    if p in ("HV", "VH"):
        return np.zeros((beta.size, f.size), complex)
    s1, s2 = sphere_s1_s2(f, radius_m, 180.0 - beta)
    k = 2 * np.pi * f / C0
    if p == "VV":
        return -1j * np.sqrt(4 * np.pi) * np.conj(s1) / k
    return 1j * np.sqrt(4 * np.pi) * np.conj(s2) / k


def fsa_amplitude(amplitude, polarization):
    """Amplitude in the forward-scattering alignment: VV unchanged, HH with its sign changed."""
    return -np.asarray(amplitude) if _pol(polarization) == "HH" else np.asarray(amplitude)


def plate_bistatic_amplitude(frequency_hz, angle_deg, bistatic_deg, width_m, height_m, polarization="VV"):
    """Flat PEC rectangular plate, physical optics, bistatic; shape (n_angle, n_beta, nf).

    Turntable angle t turns the plate's normal away from the transmitter (t = 0: normal towards
    it); the receiver lies at bistatic angle beta on the side of positive t.  Seen from the
    normal, the transmitter is at the signed angle a_t = -t and the receiver at a_r = beta - t.
    PO over the plate (w in the rotation plane, h vertical):

        A = -j (2 sqrt(pi) w h / lambda) F sinc(k w (sin a_t + sin a_r) / 2),
        F = cos a_t for V (E along h: the PO current follows the incident H-field),
        F = cos a_r for H (the current lies along w and radiates with cos a_r),

    both faces (|F|), zero when transmitter and receiver see opposite faces.  The bistatic
    specular direction is t = beta / 2 (normal on the bisector): sigma = 4 pi w^2 h^2
    cos^2(beta/2) / lambda^2 (Knott, Shaeffer & Tuley, PO plate; from memory).  At beta = 0
    this is :func:`cloakrcs.references.plate_amplitude`.  HH = VV at the specular direction in
    the module's receive alignment; PO is not reciprocal away from it; no edge diffraction.
    """
    f, t = _freq(frequency_hz), np.deg2rad(_angles(angle_deg))
    beta = np.deg2rad(bistatic_angles(bistatic_deg))
    w, h = _positive(width_m, "width_m"), _positive(height_m, "height_m")
    p = _pol(polarization)
    a_t = -t[:, None]
    a_r = beta[None, :] - t[:, None]
    if p in ("HV", "VH"):
        return np.zeros((t.size, beta.size, f.size), complex)
    c_t, c_r = np.cos(a_t), np.cos(a_r)
    same_face = np.sign(c_t) * np.sign(c_r) > 0
    factor = np.where(same_face, np.abs(c_t if p == "VV" else c_r), 0.0)
    k = (2 * np.pi * f / C0)[None, None, :]
    lam = C0 / f[None, None, :]
    u = k * w * (np.sin(a_t) + np.sin(a_r))[:, :, None] / 2
    return (-2j * np.sqrt(np.pi) * w * h / lam) * factor[:, :, None] * np.sinc(u / np.pi)


def equivalence_theorem_rcs(monostatic_rcs, frequency_hz, bistatic_deg) -> np.ndarray:
    """Bistatic RCS (m^2, (n_beta, nf)) by the equivalence theorem's small-angle form:
    sigma(beta, f) ~ sigma_mono(bisector, f cos(beta/2)), with ``monostatic_rcs(f)`` the
    monostatic RCS at the bisector aspect.  Smooth bodies and small beta only (Crispin &
    Siegel; from memory).  For tests; never used as a reference."""
    f = _freq(frequency_hz)
    beta = np.deg2rad(bistatic_angles(bistatic_deg))
    return np.array([np.asarray(monostatic_rcs(f * np.cos(b / 2)), float) for b in beta])
