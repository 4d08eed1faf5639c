"""The simulator's bistatic chamber: a fixed transmit antenna and a receive antenna on an arm.

Both antennas sit at the chamber range R from the turntable axis; the receiver at bistatic angle
beta (0 = beside the transmitter, 180 = facing it across the target).  Each arm sweep is a
two-port S21 (engineering exp(+j w t), k = 2 pi f / c0, o = chamber.offset_m per antenna)::

    S21 = d_s G [ D(beta) + sum_i c_i e^{-j2k(r_i+o)} + P_s + A(f, beta) e^{-j2k(R+o)} / R^2 ] + n

* D(beta) = sqrt(4 pi) g(beta) e^{-jk(d + 2 o)} / d: the direct path between the antennas,
  d = 2 R sin(beta / 2) (at least 5 cm), in the bracket's units (an echo of amplitude A at range
  R is A / R^2 with A = sqrt(4 pi) R E_s / E_i, so a free-space link over d is sqrt(4 pi) / d).
  g(beta) = 10^(direct_level_db/20) [10^(direct_sidelobe_db/20) + exp(-4 ln 2 ((180 - beta) /
  direct_beamwidth_deg)^2)]: full strength when the main beams face each other (forward), a
  sidelobe level elsewhere.  At beta = 180, d = 2 R: the direct path and the forward-scattered
  field arrive together, so only a coherent subtraction of the empty-chamber sweep removes it;
  each sweep's drift d_s multiplies it too (its residual is what the extinction budget counts).
* the chamber echoes and the support's echo are those of the monostatic chamber (unchanged with
  beta: an approximation).
* A(f, beta): sphere: Mie series (:mod:`cloakrcs.bistatic_references`); bare_cylinder and
  coated_cylinder: the exact 2-D series at every bistatic angle
  (:func:`cloakrcs.cloak_model.cylinder_model_bistatic_amplitude`, without seam and bolt);
  empty: zero.

Config: ``[arm]`` bistatic = {start, stop, step} or a list (degrees, default [180]);
direct_level_db = 0; direct_sidelobe_db = -35; direct_beamwidth_deg = 20.  A ``[[target]]`` with
``arm = true`` is an arm target (its own ``bistatic`` overrides the arm's angles); arm targets
name arm backgrounds.  Files: ``raw/<name>_{pol}_b{bistatic}[_{angle}][_{repeat}].s2p``.
"""

from __future__ import annotations

import math

import numpy as np

from . import bistatic_references, cloak_model
from .constants import C0
from .errors import InputError

ARM_DEFAULTS = {"bistatic": [180.0], "direct_level_db": 0.0, "direct_sidelobe_db": -35.0,
                "direct_beamwidth_deg": 20.0}
ARM_MODELS = ("empty", "sphere", "bare_cylinder", "coated_cylinder")
MIN_DIRECT_M = 0.05


def normalise_arm(raw: dict | None, path, angle_list) -> dict:
    """The [arm] table with defaults; InputError for an unknown key or a bad value."""
    arm = dict(ARM_DEFAULTS)
    raw = raw or {}
    if not isinstance(raw, dict):
        raise InputError("[arm] must be a table", path)
    bad = sorted(set(raw) - set(ARM_DEFAULTS))
    if bad:
        raise InputError(f"[arm]: unknown key '{bad[0]}' (known: {', '.join(ARM_DEFAULTS)})", path)
    arm.update(raw)
    arm["bistatic"] = bistatic_list(arm["bistatic"], "[arm] bistatic", path, angle_list)
    for key in ("direct_level_db", "direct_sidelobe_db", "direct_beamwidth_deg"):
        v = arm[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise InputError(f"[arm] {key} must be a finite number, got {v!r}", path)
        arm[key] = float(v)
    if arm["direct_beamwidth_deg"] <= 0:
        raise InputError("[arm] direct_beamwidth_deg must be positive", path)
    return arm


def bistatic_list(spec, where, path, angle_list) -> list[float]:
    """Bistatic angles from {start, stop, step} or a list, each within [0, 180] degrees."""
    vals = angle_list(spec, where, path)
    bad = [v for v in vals if not 0.0 <= v <= 180.0]
    if bad:
        raise InputError(f"{where}: bistatic angle {bad[0]:g} deg lies outside [0, 180]", path)
    return vals


def direct_path(cfg: dict, frequency_hz, bistatic_deg) -> np.ndarray:
    """D(beta) (n_beta, nf): the direct antenna-to-antenna path in the bracket's units (module docstring)."""
    arm = cfg["arm"]
    k = 2 * np.pi * np.asarray(frequency_hz, float) / C0
    beta = np.asarray(bistatic_deg, float)
    R, o = cfg["chamber"]["range_m"], cfg["chamber"]["offset_m"]
    d = np.maximum(2 * R * np.sin(np.deg2rad(beta) / 2), MIN_DIRECT_M)[:, None]
    g = 10 ** (arm["direct_level_db"] / 20) * (10 ** (arm["direct_sidelobe_db"] / 20)
                                                + np.exp(-4 * math.log(2) * ((180.0 - beta) / arm["direct_beamwidth_deg"]) ** 2))
    return math.sqrt(4 * math.pi) * g[:, None] * np.exp(-1j * k[None, :] * (d + 2 * o)) / d


def arm_amplitude(target: dict, frequency_hz, bistatic_deg, polarization) -> np.ndarray:
    """An arm target's complex amplitude (n_beta, nf), m, in the receive alignment of
    :mod:`cloakrcs.bistatic_references` (the same at every turntable angle)."""
    f = np.atleast_1d(np.asarray(frequency_hz, float))
    beta = np.atleast_1d(np.asarray(bistatic_deg, float))
    model, params = target["model"], target.get("params", {})
    if model == "empty":
        return np.zeros((beta.size, f.size), complex)
    if model == "sphere":
        return bistatic_references.sphere_bistatic_amplitude(f, params["radius_m"], beta, polarization)
    if model in ("bare_cylinder", "coated_cylinder"):
        return cloak_model.cylinder_model_bistatic_amplitude(model, params, f, beta, polarization)
    raise InputError(f"target {target['name']}: an arm target's model must be one of {', '.join(ARM_MODELS)}")


def file_name(pattern: str, pol: str, beta: float, angle: float, repeat: int, format_angle) -> str:
    return (pattern.replace("{pol}", pol).replace("{bistatic}", format_angle(beta))
            .replace("{angle}", format_angle(angle)).replace("{repeat}", str(repeat)))


def simulate_arm_target(cfg: dict, t: dict, f, rng, G, static, support, change, noise_rms, out, format_angle,
                        write_touchstone, comments) -> tuple[list, dict]:
    """Write one arm target's .s2p files; returns (paths, {pol: amplitude (n_beta, nf)})."""
    k = 2 * np.pi * f / C0
    pols = cfg["polarizations"]
    beta = np.asarray(t["bistatic"], float)
    ang = np.asarray(t["angles"], float)
    amps = {p: arm_amplitude(t, f, beta, p) for p in pols}
    R, o = t["range_m"], cfg["chamber"]["offset_m"]
    direct = direct_path(cfg, f, beta)  # (nb, nf)
    echo = np.stack([amps[p] for p in pols]) * (np.exp(-2j * k * (R + o)) / R ** 2)  # (np, nb, nf)
    sup = support * (change if t["role"] != "background" else 1.0)
    bracket = (static + sup + direct[None] + echo)[:, :, None, None, :]  # (np, nb, 1, 1, nf)
    shape = (len(pols), beta.size, ang.size, t["repeats"])
    dr = cfg["drift"]
    drift = (10 ** (rng.normal(0, dr["amplitude_db"], shape) / 20)
             * np.exp(1j * np.deg2rad(rng.normal(0, dr["phase_deg"], shape))))[..., None]
    drift = drift * np.exp(-2j * k * rng.normal(0, dr["length_m"], shape)[..., None])
    noise = (rng.normal(size=shape + (f.size,)) + 1j * rng.normal(size=shape + (f.size,))) * (noise_rms / math.sqrt(2))
    s = G * drift * bracket + noise
    match = 10 ** (-18 / 20) * np.exp(-2j * k * 0.12)
    extra = (rng.normal(size=shape + (2, f.size)) + 1j * rng.normal(size=shape + (2, f.size))) * (noise_rms / math.sqrt(2))
    paths = []
    for ip, pol in enumerate(pols):
        for ib, b in enumerate(beta):
            for ia, a in enumerate(ang):
                for ir in range(t["repeats"]):
                    path = out / file_name(t["files"], pol, float(b), float(a), ir + 1, format_angle)
                    path.parent.mkdir(parents=True, exist_ok=True)
                    data = np.empty((f.size, 2, 2), complex)
                    data[:, 1, 0] = data[:, 0, 1] = s[ip, ib, ia, ir]
                    data[:, 0, 0] = G * match + extra[ip, ib, ia, ir, 0]
                    data[:, 1, 1] = G * match * np.exp(-0.5j) + extra[ip, ib, ia, ir, 1]
                    write_touchstone(path, f, data, version=cfg["output"]["version"], fmt="RI", unit="GHz",
                                     comments=comments + [f"polarization {pol}, bistatic {b:g} deg, angle {a:g} deg, "
                                                          f"repeat {ir + 1}"],
                                     digits=cfg["output"]["digits"])
                    paths.append(path)
    return paths, amps


def extinction_truth(frequency_hz, amplitudes: dict, bistatic_deg) -> dict:
    """Noise-free extinction (m^2, (nf,)) per polarization of a model measured at 180 deg, from its
    forward amplitude by the optical theorem (-(sqrt(4 pi)/k) Im A_fsa); {} without a 180 deg sweep."""
    beta = np.asarray(bistatic_deg, float)
    fwd = np.flatnonzero(np.abs(beta - 180.0) <= 0.5)
    if not fwd.size:
        return {}
    k = 2 * np.pi * np.asarray(frequency_hz, float) / C0
    out = {}
    for pol, amp in amplitudes.items():
        a = bistatic_references.fsa_amplitude(amp[fwd[0]], pol)
        out[pol] = -np.sqrt(4 * np.pi) / k * np.imag(a)
    return out


def write_arm_truth(cfg: dict, frequency_hz, arm_amplitudes: dict, folder) -> list:
    """truth/bistatic.csv (target, polarization, bistatic_deg, frequency_hz, rcs_dbsm) and
    truth/extinction.csv (target, polarization, frequency_hz, extinction_m2) of the arm subjects."""
    f_hz = np.rint(np.asarray(frequency_hz, float)).astype(np.int64)
    by_name = {t["name"]: t for t in cfg["target"]}
    lines = ["target,polarization,bistatic_deg,frequency_hz,rcs_dbsm"]
    ext = ["target,polarization,frequency_hz,extinction_m2"]
    for name, amps in arm_amplitudes.items():
        t = by_name[name]
        if t["role"] != "subject":
            continue
        for pol, a in amps.items():
            with np.errstate(divide="ignore"):
                db = 10 * np.log10(np.abs(a) ** 2)
            for ib, b in enumerate(t["bistatic"]):
                lines += [f"{name},{pol},{b:g},{fq},{v:.3f}" for fq, v in zip(f_hz, db[ib])]
        for pol, e in extinction_truth(frequency_hz, amps, t["bistatic"]).items():
            ext += [f"{name},{pol},{fq},{v:.6g}" for fq, v in zip(f_hz, e)]
    folder.mkdir(parents=True, exist_ok=True)
    p1, p2 = folder / "bistatic.csv", folder / "extinction.csv"
    p1.write_text("\n".join(lines) + "\n", encoding="ascii", newline="\n")
    p2.write_text("\n".join(ext) + "\n", encoding="ascii", newline="\n")
    return [p1, p2]
