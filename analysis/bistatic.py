"""Receiver-arm (bistatic) chain: bistatic RCS, forward scattering, extinction and cloak metrics over directions.

A ``[[target]]`` whose files pattern has a ``{bistatic}`` field, or that sets its own
``bistatic_deg``, is a receiver-arm target (README, "Bistatic and forward scattering"): its
sweeps form a cube (polarization, bistatic, angle, repeat, frequency) and are processed here,
apart from the monostatic chain, which is left exactly as it is.  Arm targets name arm
backgrounds, an arm reference (a sphere), and arm baselines.

Chain, per polarization, bistatic angle beta and turntable angle (engineering exp(+j w t)):

1. coherent background subtraction with the empty-chamber sweep at the same beta (at beta = 180
   the direct path arrives with the forward-scattered field: a time gate cannot separate them);
2. the monostatic time gate (centre = range + offset: the arm radius equals the target range);
3. substitution calibration on the sphere at the same beta, with the Mie theory of
   :mod:`cloakrcs.bistatic_references`: A = A_sphere(beta) D / D_sphere (same position);
4. at beta = 180: extinction from the optical theorem, sigma_ext = (4 pi / k^2) Re S(0)
   (Bohren & Huffman eq. 4.76, exp(-i w t)); with A = -j sqrt(4 pi) conj(S) / k in the
   forward-scattering alignment (exp(+j w t), conjugated) this is
   sigma_ext = -(sqrt(4 pi) / k) Im A_fsa(0);
5. uncertainty of the extinction (GUM, JCGM 100:2008): every random input enters linearly, so
   each is propagated exactly through the chain's linear part (see :func:`extinction_budget`);
6. cloak metrics over directions: the reduction against beta, the reduction of the
   arc-integrated bistatic RCS, the extinction reduction, and a warning whenever a monostatic
   reduction is reported while the arm shows the cloaked object scattering more than the bare
   one in some direction.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from . import bistatic_references, calibrate, metrics, timedomain
from .campaign import SweepCubeAxes
from .constants import C0
from .errors import InputError

DB = 10.0 / math.log(10.0)
FORWARD_DEG = 180.0
FORWARD_TOL_DEG = 0.5  # an arm sweep within this of 180 deg is a forward-scattering sweep
ANGLE_DIGITS = 6
BISTATIC_COLUMNS = ["target", "polarization", "bistatic_deg", "frequency_hz", "rcs_dbsm", "angle_deg", "phase_deg"]
EXTINCTION_COLUMNS = ["target", "baseline", "polarization", "angle_deg", "frequency_hz", "extinction_m2",
                      "extinction_dbsm", "u_extinction_m2", "extinction_reduction_db"]
POLARIZATION_ORDER = ["HH", "VV", "HV", "VH"]


# ============================================================================ manifest relations
def arm_target(manifest, name: str):
    """The arm target of that name, or None."""
    return next((t for t in manifest.arm_targets if t.name == name), None)


def arm_background_of(manifest, spec):
    """The arm background an arm target is subtracted with (its ``background``, else the only one)."""
    if spec.background:
        return arm_target(manifest, spec.background)
    found = [t for t in manifest.arm_targets if t.role == "background"]
    return found[0] if found else None


def check_arm_relations(manifest, check) -> None:
    """Relations between arm targets (called by the manifest parser); check.problem for each finding."""
    arm = {t.name: t for t in manifest.arm_targets}
    if not manifest.targets:
        check.problem("receiver-arm targets are processed alongside a monostatic campaign: add its background, "
                      "reference and subjects", None)
    backgrounds = [t for t in arm.values() if t.role == "background"]
    for t in arm.values():
        if not 0.0 <= t.bistatic_deg <= 180.0:
            check.problem(f"target {t.name}: bistatic_deg {t.bistatic_deg:g} lies outside [0, 180]", t.line)
        if t.role == "background":
            continue
        if t.background is not None:
            bg = arm.get(t.background)
            if bg is None or bg.role != "background":
                check.problem(f"target {t.name}: background '{t.background}' is not a receiver-arm background "
                              f"(a target with {{bistatic}} in its files or its own bistatic_deg)", t.line)
        elif len(backgrounds) != 1:
            check.problem(f"target {t.name}: name its receiver-arm background with 'background' "
                          f"({len(backgrounds)} arm backgrounds exist)", t.line)
        if t.role == "reference" and (t.shape is None or t.shape.get("shape") != "sphere"):
            check.problem(f"target {t.name}: a receiver-arm reference must be a sphere (its Mie series is known "
                          f"at every bistatic angle)", t.line)
        if t.baseline is not None:
            base = arm.get(t.baseline)
            if base is None or base.role != "subject":
                check.problem(f"target {t.name}: baseline '{t.baseline}' is not a receiver-arm subject", t.line)
        if t.is_check and t.shape.get("shape") != "sphere":
            check.problem(f"target {t.name}: a receiver-arm check target must be a sphere", t.line)
    if any(t.role == "subject" for t in arm.values()) and not any(t.role == "reference" for t in arm.values()):
        check.problem("receiver-arm subjects need a receiver-arm reference sphere", None)


# ============================================================================ cubes
@dataclass
class ArmCube(SweepCubeAxes):
    """One arm target's sweeps: data (polarization, bistatic, angle, repeat, frequency), files and hashes."""

    spec: Any
    data: xr.DataArray
    hashes: dict[str, str]
    n_ports: int
    parameters: dict[str, str]

    @property
    def bistatic_deg(self) -> np.ndarray:
        return self.data.bistatic.values


def _plan(manifest, spec, root):
    from .campaign import find_sweep_files

    sweeps = find_sweep_files(manifest, spec, root)
    pols = sorted({s.polarization for s in sweeps}, key=POLARIZATION_ORDER.index)
    betas = sorted({s.bistatic_deg for s in sweeps})
    for b in betas:
        if not 0.0 <= b <= 180.0:
            raise InputError(f"target {spec.name}: bistatic angle {b:g} deg lies outside [0, 180]",
                             manifest.path, spec.line)
    angles = sorted({s.angle_deg for s in sweeps})
    repeats = sorted({s.repeat for s in sweeps})
    index = {(s.polarization, s.bistatic_deg, s.angle_deg, s.repeat): s for s in sweeps}
    grid = [(p, b, a, r) for p in pols for b in betas for a in angles for r in repeats]
    missing = [g for g in grid if g not in index]
    if missing:
        p, b, a, r = missing[0]
        raise InputError(f"target {spec.name}: {len(missing)} sweep(s) missing from the polarization x bistatic x "
                         f"angle x repeat grid, first {p} at bistatic {b:g} deg, angle {a:g} deg, repeat {r}",
                         manifest.path, spec.line)
    return pols, betas, angles, repeats, [index[g] for g in grid]


def _cube(manifest, spec, plan, echoes) -> ArmCube:
    from .campaign import _file_parameter  # noqa: F401  (same parameter rule as the monostatic targets)

    pols, betas, angles, repeats, ordered = plan
    n_ports = echoes[0].n_ports
    params = {}
    for p in pols:
        if n_ports > 2 and spec.parameter is None:
            raise InputError(f"target {spec.name}: {n_ports}-port files need a parameter table", manifest.path,
                             spec.line)
        params[p] = spec.parameter_for(p, n_ports)
        if not params[p]:
            raise InputError(f"target {spec.name}: parameter table gives no S-parameter for {p}", manifest.path,
                             spec.line)
    freq = echoes[0].frequency_hz
    timedomain.uniform_step_hz(freq, path=ordered[0].path)
    data = np.empty((len(pols), len(betas), len(angles), len(repeats), len(freq)), complex)
    flat = data.reshape(-1, len(freq))
    for k, (sf, echo) in enumerate(zip(ordered, echoes)):
        if echo.n_ports != n_ports:
            raise InputError(f"has {echo.n_ports} ports, other files of target {spec.name} have {n_ports}", sf.path)
        if len(echo.frequency_hz) != len(freq) or not np.allclose(echo.frequency_hz, freq, rtol=1e-9, atol=0):
            raise InputError(f"frequency grid differs from {ordered[0].path.name}'s", sf.path)
        if echo.values is None:
            raise InputError(f"target {spec.name}: parameter {params[sf.polarization]} needs more than "
                             f"{n_ports} ports", manifest.path, spec.line)
        flat[k] = echo.values
    cube = xr.DataArray(data, dims=("polarization", "bistatic", "angle", "repeat", "frequency"),
                        coords={"polarization": pols, "bistatic": np.array(betas, float),
                                "angle": np.array(angles, float), "repeat": np.array(repeats, int),
                                "frequency": freq},
                        name=spec.name, attrs={"units": "VNA ratio", "target": spec.name, "role": spec.role})
    return ArmCube(spec=spec, data=cube, hashes={str(s.path): e.sha256 for s, e in zip(ordered, echoes)},
                   n_ports=n_ports, parameters=params)


def _load_one(manifest, spec, workers, root) -> ArmCube:
    from . import touchstone
    from .campaign import _file_parameter

    plan = _plan(manifest, spec, root)
    echoes = touchstone.read_echoes([s.path for s in plan[4]],
                                    [_file_parameter(spec, s.polarization) for s in plan[4]], workers)
    return _cube(manifest, spec, plan, echoes)


def load_arm(manifest, frequency_hz, workers=None, root=None, warn=None) -> dict[str, ArmCube]:
    """Read and check every arm target; raises the first problem as InputError."""
    cubes = {spec.name: _load_one(manifest, spec, workers, root) for spec in manifest.arm_targets}

    def fail(err):
        raise err

    check_arm_cubes(manifest, cubes, frequency_hz, fail, warn or (lambda _w: None))
    return cubes


def inspect_arm(manifest, frequency_hz, workers, root, problem, warn) -> dict[str, ArmCube]:
    """Like :func:`load_arm`, collecting every problem instead of raising."""
    cubes = {}
    for spec in manifest.arm_targets:
        try:
            cubes[spec.name] = _load_one(manifest, spec, workers, None if root is None else Path(root))
        except InputError as exc:
            problem(exc)
    check_arm_cubes(manifest, cubes, frequency_hz, problem, warn)
    return cubes


def _keys(values) -> set:
    return {round(float(v), ANGLE_DIGITS) for v in np.atleast_1d(values)}


def check_arm_cubes(manifest, cubes: dict[str, ArmCube], frequency_hz, problem, warn) -> None:
    """Cross-target checks of the arm: grids, coverage of backgrounds, reference and baselines, parameters, gates."""
    from .campaign import wrap_angle_deg

    mpath = manifest.path
    f = np.asarray(frequency_hz, float)
    unamb = timedomain.unambiguous_range_m(f) if f.size > 1 else math.inf
    refs = [c for c in cubes.values() if c.spec.role == "reference"]
    for name, cube in cubes.items():
        spec = cube.spec
        other = cube.data.frequency.values
        if f.size and (other.size != f.size or not np.allclose(other, f, rtol=1e-9, atol=0)):
            problem(InputError(f"target {name}: its frequency grid differs from the monostatic targets'", mpath,
                               spec.line))
            continue
        if spec.role == "background":
            continue
        bg_spec = arm_background_of(manifest, spec)
        bg = cubes.get(bg_spec.name) if bg_spec is not None else None
        if bg is not None:
            miss_p = [p for p in cube.polarizations if p not in bg.polarizations]
            miss_b = sorted(_keys(cube.bistatic_deg) - _keys(bg.bistatic_deg))
            if miss_p or miss_b:
                what = f"{miss_p[0]}" if miss_p else f"bistatic {miss_b[0]:g} deg"
                problem(InputError(f"target {name}: background {bg.name} has no sweep for {what} (the direct path "
                                   f"changes with the receiver's position: subtract at the same bistatic angle)",
                                   mpath, spec.line))
            if len(bg.angles_deg) > 1 and _keys(wrap_angle_deg(cube.angles_deg)) - _keys(wrap_angle_deg(bg.angles_deg)):
                problem(InputError(f"target {name}: background {bg.name} has neither a sweep at every turntable angle "
                                   f"nor a single one", mpath, spec.line))
            if any(bg.parameters.get(p) not in (None, cube.parameters[p]) for p in cube.polarizations):
                problem(InputError(f"target {name}: echo parameter differs from its background {bg.name}'s", mpath,
                                   spec.line))
        center = manifest.gate_center_m(spec)
        span = manifest.gate_span_m(spec)
        if center + span / 2 >= unamb:
            problem(InputError(f"target {name}: gate far edge {center + span / 2:.3f} m lies past the unambiguous "
                               f"range {unamb:.3f} m = c0/(2 df): it would alias", mpath, spec.line))
        if spec.role == "subject":
            if not refs:
                continue
            ref = refs[0]
            miss_p = [p for p in cube.polarizations if p not in ref.polarizations]
            miss_b = sorted(_keys(cube.bistatic_deg) - _keys(ref.bistatic_deg))
            if miss_p or miss_b:
                what = f"{miss_p[0]}" if miss_p else f"bistatic {miss_b[0]:g} deg"
                problem(InputError(f"target {name}: reference {ref.name} has no sweep for {what}: the arm is "
                                   f"calibrated at each bistatic angle", mpath, spec.line))
            if any(ref.parameters.get(p) not in (None, cube.parameters[p]) for p in cube.polarizations):
                problem(InputError(f"target {name}: echo parameter differs from reference {ref.name}'s", mpath,
                                   spec.line))
            if spec.baseline and spec.baseline in cubes:
                base = cubes[spec.baseline]
                if (_keys(cube.bistatic_deg) - _keys(base.bistatic_deg)
                        or [p for p in cube.polarizations if p not in base.polarizations]):
                    problem(InputError(f"target {name}: baseline {base.name} does not cover its polarizations and "
                                       f"bistatic angles", mpath, spec.line))
                if not _keys(wrap_angle_deg(cube.angles_deg)) & _keys(wrap_angle_deg(base.angles_deg)):
                    problem(InputError(f"target {name}: baseline {base.name} shares no turntable angle with it", mpath,
                                       spec.line))


# ============================================================================ results
@dataclass
class ArmTarget:
    name: str
    role: str
    revision: str
    baseline: str | None
    amplitude: xr.DataArray  # complex (polarization, bistatic, angle, frequency), m
    gate: dict[str, float]
    shape: dict | None = None
    extinction: xr.Dataset | None = None  # (polarization, angle, frequency): extinction_m2, u_extinction_m2

    @property
    def sigma(self) -> xr.DataArray:
        return np.abs(self.amplitude) ** 2


@dataclass
class ArmResult:
    frequency_hz: np.ndarray
    valid_mask: np.ndarray
    band_mask: np.ndarray
    targets: dict[str, ArmTarget]
    summary: dict[str, Any]
    warnings: list[str] = field(default_factory=list)

    def bistatic_table(self) -> pd.DataFrame:
        """bistatic.csv rows: every arm subject, polarization, bistatic angle, turntable angle, valid frequency."""
        f = self.frequency_hz[self.valid_mask]
        rows = []
        for name, t in self.targets.items():
            if t.role != "subject":
                continue
            amp = t.amplitude.values[..., self.valid_mask]  # (p, b, a, f)
            npol, nb, na, nf = amp.shape
            idx = np.indices((npol, nb, na, nf)).reshape(4, -1)
            rows.append(pd.DataFrame({
                "target": name,
                "polarization": np.asarray(t.amplitude.polarization.values, dtype=object)[idx[0]],
                "bistatic_deg": t.amplitude.bistatic.values[idx[1]],
                "frequency_hz": f[idx[3]],
                "rcs_dbsm": 10 * np.log10(np.abs(amp.ravel()) ** 2),
                "angle_deg": t.amplitude.angle.values[idx[2]],
                "phase_deg": np.degrees(np.angle(amp.ravel())),
            }))
        if not rows:
            return pd.DataFrame(columns=BISTATIC_COLUMNS)
        return pd.concat(rows, ignore_index=True)[BISTATIC_COLUMNS]

    def extinction_table(self) -> pd.DataFrame:
        """extinction.csv rows: every arm subject measured at 180 deg, per polarization, angle and frequency."""
        f = self.frequency_hz[self.valid_mask]
        rows = []
        for name, t in self.targets.items():
            if t.role != "subject" or t.extinction is None:
                continue
            ext = t.extinction["extinction_m2"].values[..., self.valid_mask]
            u = t.extinction["u_extinction_m2"].values[..., self.valid_mask]
            npol, na, nf = ext.shape
            red = np.full(ext.shape, np.nan)
            base = self.targets.get(t.baseline) if t.baseline else None
            if base is not None and base.extinction is not None:
                b = base.extinction["extinction_m2"].sel(polarization=t.extinction.polarization)
                b = b.reindex(angle=t.extinction.angle.values, method="nearest", tolerance=1e-6)
                with np.errstate(divide="ignore", invalid="ignore"):
                    red = 10 * np.log10(b.values[..., self.valid_mask] / ext)
            idx = np.indices((npol, na, nf)).reshape(3, -1)
            rows.append(pd.DataFrame({
                "target": name, "baseline": t.baseline or "",
                "polarization": np.asarray(t.extinction.polarization.values, dtype=object)[idx[0]],
                "angle_deg": t.extinction.angle.values[idx[1]],
                "frequency_hz": f[idx[2]],
                "extinction_m2": ext.ravel(),
                "extinction_dbsm": 10 * np.log10(np.where(ext > 0, ext, np.nan)).ravel(),
                "u_extinction_m2": u.ravel(),
                "extinction_reduction_db": red.ravel(),
            }))
        if not rows:
            return pd.DataFrame(columns=EXTINCTION_COLUMNS)
        return pd.concat(rows, ignore_index=True)[EXTINCTION_COLUMNS]


# ============================================================================ physics helpers
def extinction_from_forward(frequency_hz, amplitude_fsa) -> np.ndarray:
    """Extinction cross-section (m^2) from the forward amplitude in the forward-scattering alignment:
    sigma_ext = (4 pi / k^2) Re S(0) (Bohren & Huffman eq. 4.76, exp(-i w t)) with
    S = conj(j k A / sqrt(4 pi)) (this package's exp(+j w t) amplitude), i.e. -(sqrt(4 pi)/k) Im A."""
    k = 2 * np.pi * np.asarray(frequency_hz, float) / C0
    return -np.sqrt(4 * np.pi) / k * np.imag(amplitude_fsa)


def drift_and_noise(gated_repeats: np.ndarray) -> dict[str, float]:
    """Per-sweep drift and noise of repeated gated sweeps (repeat, nf) of a stable scene.

    Each repeat's deviation from the mean is split into a complex scale delta_r times the mean
    (drift: gain and phase of the whole sweep) and a residual (noise): delta_r = sum(dev conj(mean))
    / sum |mean|^2.  Returns the variances of Re delta and Im delta per sweep (gain in neper,
    phase in rad), the noise variance per point and sweep, and the repeat count (README,
    "Bistatic and forward scattering": drift from repeated sweeps of a stable target)."""
    g = np.asarray(gated_repeats)
    n = g.shape[0]
    if n < 2:
        return {"var_re": 0.0, "var_im": 0.0, "noise_var": 0.0, "repeats": n}
    mean = g.mean(axis=0)
    dev = g - mean
    den = np.sum(np.abs(mean) ** 2)
    delta = (dev @ np.conj(mean)) / den if den > 0 else np.zeros(n, complex)
    resid = dev - delta[:, None] * mean
    return {"var_re": float(np.sum(delta.real ** 2) / (n - 1)), "var_im": float(np.sum(delta.imag ** 2) / (n - 1)),
            "noise_var": float(np.sum(np.abs(resid) ** 2) / ((n - 1) * g.shape[1])), "repeats": n}


def im_linear_uncertainty(c, total, stats: dict, n_sweeps: int, frequency_hz, cell_hz: float,
                          shared: bool = False) -> tuple[float, float]:
    """Standard uncertainties (noise, drift) of Q = Im(sum over angle and frequency of c D) when D is a
    mean of ``n_sweeps`` sweeps, each with circular complex noise of variance stats["noise_var"] per
    point and a drift delta (Re, Im variances stats["var_re"], stats["var_im"]) multiplying the
    whole gated sweep ``total`` (GUM law of propagation, exact for this linear model).

    c, total: (angle, frequency).  Noise: var Im(c n) = |c|^2 var / 2, frequency samples within one
    correlation cell added linearly (:func:`cloakrcs.metrics.correlated_sum_uncertainty`).  Drift
    is common to a sweep's frequencies: var = (sum Im(c T))^2 var_re + (sum Re(c T))^2 var_im.
    ``shared``: the same sweeps serve every angle (one background angle), so angles add coherently.
    """
    c = np.atleast_2d(c)
    total = np.broadcast_to(total, c.shape)
    ct = c * total
    if shared:
        c = c.sum(axis=0, keepdims=True)
        ct = ct.sum(axis=0, keepdims=True)
    if n_sweeps < 1:
        return 0.0, 0.0
    u_pt = np.abs(c) * math.sqrt(stats["noise_var"] / (2 * n_sweeps))
    u_noise = metrics.correlated_sum_uncertainty(u_pt, frequency_hz, cell_hz)
    a, b = ct.imag.sum(axis=1), ct.real.sum(axis=1)
    u_drift = math.sqrt(float(np.sum(a ** 2 * stats["var_re"] + b ** 2 * stats["var_im"])) / n_sweeps)
    return u_noise, u_drift


def budget(components: list[dict], coverage_k: float) -> dict:
    """A GUM budget: components {component, type, u_db, samples, dof, note}, combined (root sum of squares
    of u_db, uncorrelated components), coverage_k and expanded = k x combined (JCGM 100:2008).

    Type A components estimated from few repeats have few degrees of freedom: the effective degrees
    of freedom follow Welch-Satterthwaite, nu_eff = u_c^4 / sum(u_i^4 / nu_i), and the coverage factor
    is Student's t at the coverage probability that ``coverage_k`` gives for a normal distribution
    (k = 2: 95.45 %; JCGM 100:2008, G.4).  ``nominal_coverage_k`` keeps the requested k."""
    from scipy import stats

    combined = float(math.sqrt(sum(c["u_db"] ** 2 for c in components)))
    den = sum(c["u_db"] ** 4 / c["dof"] for c in components if c.get("dof") and c["u_db"] > 0)
    nu = combined ** 4 / den if den > 0 else math.inf
    p = 2 * stats.norm.cdf(coverage_k) - 1
    k = float(stats.t.ppf((1 + p) / 2, nu)) if math.isfinite(nu) else float(coverage_k)
    return {"components": components, "combined": combined, "coverage_k": k, "expanded": k * combined,
            "effective_dof": nu if math.isfinite(nu) else None, "nominal_coverage_k": coverage_k}


def arc_integrated(sigma, bistatic_deg) -> np.ndarray:
    """Arc-integrated bistatic RCS (m^2): (1 / 2 pi) integral of sigma over the measured arc of bistatic
    angles (radians, trapezoid rule), along axis -2 of sigma (..., beta, f): a partial total scattering
    cross-section in the measurement plane, on one side of the transmitter's axis."""
    order = np.argsort(bistatic_deg)
    b = np.deg2rad(np.asarray(bistatic_deg, float)[order])
    s = np.take(np.asarray(sigma), order, axis=-2)
    return np.trapezoid(s, b, axis=-2) / (2 * np.pi)


# ============================================================================ the chain
def process_arm(campaign, settings, mono=None) -> ArmResult:
    """Run the arm chain on a loaded campaign (``campaign.arm``); ``mono`` the monostatic
    ProcessingResult (reporting band, warnings, metrics for the direction warning)."""
    m = campaign.manifest
    f = campaign.frequency_hz
    k = 2 * np.pi * f / C0
    g = m.gate
    gate = {"window": settings.window or g.window,
            "kaiser_beta": settings.kaiser_beta if settings.kaiser_beta is not None else g.kaiser_beta,
            "pad_factor": g.pad_factor, "edge_fraction": g.edge_fraction}
    cubes = campaign.arm
    warnings: list[str] = []

    def gate_of(spec):
        over = settings.gate_overrides.get(spec.name, {}) or settings.gate_overrides.get("*", {})
        return float(over.get("center_m", m.gate_center_m(spec))), float(over.get("span_m", m.gate_span_m(spec)))

    spans = [gate_of(c.spec)[1] for c in cubes.values() if c.spec.role != "background"]
    if not spans:
        raise InputError("the receiver arm has no target besides its background", m.path)
    trim = settings.trim_hz if settings.trim_hz is not None else m.gate.trim_hz
    valid = timedomain.valid_band_mask(f, min(spans), trim)
    band_mask = valid & (mono.band_mask if mono is not None else True)
    if not band_mask.any():
        band_mask = valid.copy()
    cell_hz = C0 / (2 * min(spans))

    # ---- gate backgrounds (repeats kept) and their drift/noise per (pol, beta)
    bg_info: dict[str, dict] = {}

    def background(name, center, span):
        key = (name, center, span)
        if key not in bg_info:
            bg = cubes[name]
            gb = timedomain.time_gate(f, bg.data.values, center, span, **gate)  # (p, b, a, r, f)
            if bg.n_repeats < 2:
                warnings.append(f"receiver-arm background {name} has no repeated sweeps: the drift and noise of the "
                                f"forward-scattering subtraction cannot be estimated (budgeted as zero)")
            stats = {}
            for ip, pol in enumerate(bg.polarizations):
                for ib, beta in enumerate(bg.bistatic_deg):
                    reps = gb[ip, ib].transpose(1, 0, 2).reshape(bg.n_repeats, -1, f.size)
                    st = [drift_and_noise(reps[:, ia][:, valid]) for ia in range(reps.shape[1])]
                    stats[(pol, round(float(beta), ANGLE_DIGITS))] = {
                        key2: float(np.mean([s[key2] for s in st])) for key2 in ("var_re", "var_im", "noise_var")
                    } | {"repeats": bg.n_repeats}
            bg_info[key] = {"cube": bg, "mean": bg.data.values.mean(axis=3), "gated_mean": gb.mean(axis=3),
                            "stats": stats}
        return bg_info[key]

    gated: dict[str, dict] = {}
    for name, cube in cubes.items():
        spec = cube.spec
        if spec.role == "background":
            continue
        center, span = gate_of(spec)
        bg = background(arm_background_of(m, spec).name, center, span)
        bcube = bg["cube"]
        bi = [list(_round(bcube.bistatic_deg)).index(b) for b in _round(cube.bistatic_deg)]
        pi = [bcube.polarizations.index(p) for p in cube.polarizations]
        bmean = bg["mean"][np.ix_(pi, bi)]  # (p, b, a_bg, f)
        bgated = bg["gated_mean"][np.ix_(pi, bi)]
        if bmean.shape[2] == 1:
            bmean = np.repeat(bmean, len(cube.angles_deg), axis=2)
            bgated = np.repeat(bgated, len(cube.angles_deg), axis=2)
            shared = True
        else:
            from .campaign import wrap_angle_deg
            keys = list(_round(wrap_angle_deg(bcube.angles_deg)))
            ai = [keys.index(a) for a in _round(wrap_angle_deg(cube.angles_deg))]
            bmean, bgated, shared = bmean[:, :, ai], bgated[:, :, ai], False
        data = cube.data.values
        d = data - bmean[:, :, :, None, :]
        gd = timedomain.time_gate(f, d, center, span, **gate)
        g_mean, var_obs, n_rep = calibrate.mean_over_repeats(gd, axis=3)
        total = timedomain.time_gate(f, data.mean(axis=3), center, span, **gate)
        gated[name] = {"cube": cube, "g": g_mean, "var_obs": var_obs, "n": n_rep, "total": total,
                       "bg_total": bgated, "bg_shared": shared, "bg": bg, "center": center, "span": span}

    # ---- calibration per (pol, beta) on the arm sphere
    ref_spec = next((c.spec for c in cubes.values() if c.spec.role == "reference"), None)
    factors: dict[str, dict] = {}
    ref_info = []
    if ref_spec is not None:
        rg = gated[ref_spec.name]
        rc = rg["cube"]
        d_ref = rg["g"].mean(axis=2)  # average over turntable angles (a sphere)
        for ip, pol in enumerate(rc.polarizations):
            theory = bistatic_references.sphere_bistatic_amplitude(f, ref_spec.shape["radius_m"], rc.bistatic_deg, pol)
            factors[pol] = {"K": calibrate.calibration_factor(f, d_ref[ip], theory, ref_spec.range_m),
                            "beta": list(_round(rc.bistatic_deg)), "d_ref": d_ref[ip], "ip": ip}
            ref_info.append({"target": ref_spec.name, "polarization": pol, "shape": ref_spec.shape,
                             "bistatic_deg": [float(b) for b in rc.bistatic_deg],
                             "method": f"Mie series at each bistatic angle; average of {len(rc.angles_deg)} angle(s)"})

    # ---- calibrated amplitudes and extinction
    targets: dict[str, ArmTarget] = {}
    sens: dict[str, dict] = {}
    for name, x in gated.items():
        cube, spec = x["cube"], x["cube"].spec
        if spec.role == "reference" or not factors:
            kk = np.ones((len(cube.polarizations), len(cube.bistatic_deg), f.size), complex)
        else:
            kk = np.stack([factors[p]["K"][[factors[p]["beta"].index(b) for b in _round(cube.bistatic_deg)]]
                           for p in cube.polarizations])
        amp = calibrate.calibrated_amplitude(f, kk[:, :, None, :], x["g"], spec.range_m)
        if spec.role == "reference":
            theory = np.stack([bistatic_references.sphere_bistatic_amplitude(
                f, spec.shape["radius_m"], cube.bistatic_deg, p) for p in cube.polarizations])
            amp = np.broadcast_to(theory[:, :, None, :], amp.shape).copy()
        coords = {"polarization": cube.polarizations, "bistatic": cube.bistatic_deg, "angle": cube.angles_deg,
                  "frequency": f}
        at = ArmTarget(name=name, role=spec.role, revision=spec.revision or name, baseline=spec.baseline,
                       amplitude=xr.DataArray(amp, dims=("polarization", "bistatic", "angle", "frequency"),
                                              coords=coords, name=name),
                       gate={"center_m": x["center"], "span_m": x["span"]}, shape=spec.shape)
        fwd = np.flatnonzero(np.abs(cube.bistatic_deg - FORWARD_DEG) <= FORWARD_TOL_DEG)
        if spec.role == "subject" and fwd.size and factors:
            ib = int(fwd[0])
            sign = np.array([-1.0 if p == "HH" else 1.0 for p in cube.polarizations])[:, None, None]
            ext = extinction_from_forward(f, sign * amp[:, ib])
            # Im-linear sensitivity: sigma_ext = Im(c D), c = -s sqrt(4 pi)/k K R^2 exp(+j 2 k R)
            c = (-sign * np.sqrt(4 * np.pi) / k * kk[:, ib, None, :] * spec.range_m ** 2
                 * calibrate.range_phase(f, spec.range_m))
            u_pt = _pointwise_u(c, x, ib, cube, factors, gated[ref_spec.name], f)
            at.extinction = xr.Dataset(
                {"extinction_m2": (("polarization", "angle", "frequency"), ext),
                 "u_extinction_m2": (("polarization", "angle", "frequency"), u_pt)},
                coords={"polarization": cube.polarizations, "angle": cube.angles_deg, "frequency": f})
            sens[name] = {"c": c, "ib": ib}
        targets[name] = at

    summary = _summary(campaign, settings, mono, targets, gated, sens, factors, ref_spec, ref_info, f, valid,
                       band_mask, cell_hz, warnings)
    return ArmResult(frequency_hz=f, valid_mask=valid, band_mask=band_mask, targets=targets, summary=summary,
                     warnings=warnings)


def _round(values):
    return [round(float(v), ANGLE_DIGITS) for v in np.atleast_1d(values)]


def _stats(x, pol, ib):
    beta = _round(x["cube"].bistatic_deg)[ib]
    return x["bg"]["stats"][(pol, beta)]


def _pointwise_u(c, x, ib, cube, factors, ref, f) -> np.ndarray:
    """Per-point standard uncertainty (m^2) of sigma_ext (pol, angle, f): noise of the target's and the
    background's sweeps, their drift, and the reference's, in quadrature (no frequency correlation needed)."""
    out = np.zeros(c.shape[:1] + (len(cube.angles_deg), f.size))
    for ip, pol in enumerate(cube.polarizations):
        st = _stats(x, pol, ib)
        n, nb = x["n"], st["repeats"]
        cc = c[ip]
        var = np.abs(cc) ** 2 * st["noise_var"] / 2 * (1 / n + 1 / nb)
        for tot, nn in ((x["total"][ip, ib], n), (x["bg_total"][ip, ib], nb)):
            ct = cc * tot
            var = var + (ct.imag ** 2 * st["var_re"] + ct.real ** 2 * st["var_im"]) / nn
        fr = factors[pol]
        rb = fr["beta"].index(_round(cube.bistatic_deg)[ib])
        q = -cc * x["g"][ip, ib] / fr["d_ref"][rb]  # sensitivity to the reference's gated sweep
        n_ref = ref["n"] * len(ref["cube"].angles_deg)
        rst = _stats(ref, pol, rb)
        qt = q * ref["total"][fr["ip"], rb].mean(axis=0)
        var = var + np.abs(q) ** 2 * rst["noise_var"] / (2 * n_ref) + (
            qt.imag ** 2 * rst["var_re"] + qt.real ** 2 * rst["var_im"]) / n_ref
        out[ip] = np.sqrt(var)
    return out


def extinction_budget(x, sens_c, ib, pol, ip, sel_angles, band, f, cell_hz, weight, label="") -> list[tuple]:
    """Budget components (u in absolute m^2 of sum sigma_ext over band and angles, times ``weight``) for one
    target: noise and drift of its own sweeps, the shared empty-chamber sweeps, and optionally the reference.

    ``weight`` (scalar or per-angle/frequency array) turns the sum's sensitivity into the metric's
    (10/ln10 / P for a dB value of a sum P).  Returns raw components with u_abs (in the metric's unit)."""
    st = _stats(x, pol, ib)
    c = sens_c[ip][sel_angles][:, band] * weight
    fb = f[band]
    comps = []
    u_n, u_d = im_linear_uncertainty(c, x["total"][ip, ib][sel_angles][:, band], st, x["n"], fb, cell_hz)
    comps.append((f"noise, {label} sweeps", "A", u_n, st["repeats"],
                  "VNA noise per point from the empty-chamber repeats' residual after removing each sweep's drift; "
                  "frequency samples within one inverse gate duration fully correlated"))
    comps.append((f"drift, {label} sweeps", "A", u_d, st["repeats"],
                  f"per-sweep gain {_gain_db(st):.3g} dB and phase {_phase_deg(st):.3g} deg rms (from the "
                  f"empty-chamber repeats), times the whole gated sweep with its direct path"))
    if x["n"] >= 2:
        model = (st["noise_var"] + (st["var_re"] + st["var_im"]) * np.abs(x["total"][ip, ib]) ** 2) / x["n"]
        excess = float(max(0.0, np.mean(x["var_obs"][ip, ib][sel_angles][:, band] - model[sel_angles][:, band])))
        u_pt = np.abs(c) * math.sqrt(excess / 2)
        comps.append((f"repeatability beyond noise and drift, {label}", "A",
                      metrics.correlated_sum_uncertainty(u_pt, fb, cell_hz), x["n"],
                      "spread of the target's own repeats in excess of the modelled noise and drift"))
    return comps


def _gain_db(st):
    return 20 / math.log(10) * math.sqrt(st["var_re"])


def _phase_deg(st):
    return math.degrees(math.sqrt(st["var_im"]))


def _bg_components(x_list, c_list, ib_list, pol, ip_list, sel_list, band, f, cell_hz) -> tuple[float, float, dict]:
    """Noise and drift (standard uncertainty in the metric's unit) of the shared empty-chamber sweeps, which
    enter every target's difference with a minus sign: sensitivities of all targets add before squaring."""
    x0 = x_list[0]
    st = _stats(x0, pol, ib_list[0])
    fb = f[band]
    c_sum = sum(c[ip][sel][:, band] for c, ip, sel in zip(c_list, ip_list, sel_list))
    total = x0["bg_total"][ip_list[0], ib_list[0]][sel_list[0]][:, band]
    u_n, u_d = im_linear_uncertainty(c_sum, total, st, st["repeats"], fb, cell_hz, shared=x0["bg_shared"])
    return u_n, u_d, st


def _ref_components(x, c, ib, pol, ip, sel, band, f, cell_hz, factors, ref) -> tuple[float, float]:
    """Noise and drift of the reference sphere's sweeps through the calibration factor K (common to every
    target of the polarization): delta sigma = Im(-c D_t delta D_ref / D_ref)."""
    fr = factors[pol]
    rb = fr["beta"].index(_round(x["cube"].bistatic_deg)[ib])
    q = (-c[ip][sel] * x["g"][ip, ib][sel] / fr["d_ref"][rb])[:, band].sum(axis=0, keepdims=True)
    rst = _stats(ref, pol, rb)
    n_ref = ref["n"] * len(ref["cube"].angles_deg)
    tot = ref["total"][fr["ip"], rb].mean(axis=0)[band][None, :]
    return im_linear_uncertainty(q, tot, rst, n_ref, f[band], cell_hz)


def _component(name, kind, u, samples, note, dof=None) -> dict:
    """A budget row; dof defaults to samples - 1 for a type A component (None: infinite)."""
    if dof is None and kind == "A":
        dof = max(int(samples) - 1, 1)
    return {"component": name, "type": kind, "u_db": float(u), "samples": int(samples), "dof": dof, "note": note}


def _summary(campaign, settings, mono, targets, gated, sens, factors, ref_spec, ref_info, f, valid, band, cell_hz,
             warnings) -> dict:
    from .campaign import wrap_angle_deg

    m = campaign.manifest
    kcov = settings.coverage_k
    fb = f[band]
    out: dict[str, Any] = {
        "monostatic_bistatic_deg": m.chamber.bistatic_deg,
        "valid_band_hz": [float(f[valid][0]), float(f[valid][-1])],
        "reporting_band_hz": [float(fb[0]), float(fb[-1])],
        "targets": [], "references": ref_info, "patterns": [], "reduction_vs_bistatic": [], "arc_reduction": [],
        "extinction": [], "extinction_reduction": [], "checks": [], "drift": [],
        "conventions": {
            "bistatic_deg": "angle between transmit and receive directions seen from the target: 0 monostatic, "
                            "180 forward",
            "amplitude": "exp(+j w t); VV = -j sqrt(4 pi) conj(S1)/k, HH = +j sqrt(4 pi) conj(S2)/k at the "
                         "scattering angle 180 - beta (Bohren & Huffman ch. 4); HH changes sign in the "
                         "forward-scattering alignment",
            "extinction": "sigma_ext = (4 pi / k^2) Re S(0) (Bohren & Huffman eq. 4.76, exp(-i w t)) = "
                          "-(sqrt(4 pi)/k) Im A_fsa(0) here",
            "arc_integrated": "(1 / 2 pi) integral of sigma over the measured bistatic arc (radians), one side of "
                              "the plane; its reduction sums over the reporting band",
        },
        "files": {os.path.relpath(p, m.folder).replace(os.sep, "/"): h
                  for c in campaign.arm.values() for p, h in sorted(c.hashes.items())},
    }
    for name, c in campaign.arm.items():
        out["targets"].append({"name": name, "role": c.spec.role, "baseline": c.spec.baseline,
                               "revision": c.spec.revision or name,
                               "bistatic_deg": [float(b) for b in c.bistatic_deg],
                               "angles_deg": [float(a) for a in c.angles_deg], "polarizations": c.polarizations,
                               "repeats": c.n_repeats, "shape": c.spec.shape,
                               "gate": targets[name].gate if name in targets else None})
    for (bg_name, _center, _span), info in _bg_items(gated):
        for (pol, beta), st in info["stats"].items():
            out["drift"].append({"background": bg_name, "polarization": pol, "bistatic_deg": beta,
                                 "gain_db": _gain_db(st), "phase_deg": _phase_deg(st),
                                 "noise_var": st["noise_var"], "repeats": st["repeats"]})
    # ---- patterns (band and angle averaged) of every subject, per polarization
    for name, t in targets.items():
        if t.role != "subject":
            continue
        sig = t.sigma.values[..., band].mean(axis=(2, 3))  # (p, b)
        for ip, pol in enumerate(t.amplitude.polarization.values):
            out["patterns"].append({"target": name, "polarization": str(pol),
                                    "bistatic_deg": [float(b) for b in t.amplitude.bistatic.values],
                                    "band_rcs_dbsm": [float(v) for v in 10 * np.log10(sig[ip])]})
    # ---- checks: arm check spheres against the Mie series
    for name, t in targets.items():
        spec = campaign.arm[name].spec
        if not spec.is_check:
            continue
        for ip, pol in enumerate(t.amplitude.polarization.values):
            pol = str(pol)
            theory = np.abs(bistatic_references.sphere_bistatic_amplitude(
                f[valid], spec.shape["radius_m"], t.amplitude.bistatic.values, pol)) ** 2
            meas = t.sigma.values[ip][..., valid]  # (b, a, f)
            err = 10 * np.log10(meas / theory[:, None, :])
            item = {"target": name, "polarization": pol,
                    "max_error_db_per_bistatic": [float(v) for v in np.max(np.abs(err), axis=(1, 2))],
                    "bistatic_deg": [float(b) for b in t.amplitude.bistatic.values],
                    "max_error_db": float(np.max(np.abs(err))), "tolerance_db": settings.check_tolerance_db}
            item["passed"] = bool(item["max_error_db"] <= settings.check_tolerance_db)
            if t.extinction is not None:
                s1, _ = bistatic_references.sphere_s1_s2(fb, spec.shape["radius_m"], [0.0])
                kb = 2 * np.pi * fb / C0
                th = 4 * np.pi / kb ** 2 * s1[0].real
                me = t.extinction["extinction_m2"].sel(polarization=pol).values[:, band].mean(axis=0)
                item["extinction_theory_m2"] = float(th.mean())
                item["extinction_measured_m2"] = float(me.mean())
                item["extinction_error_db"] = float(DB * math.log(me.mean() / th.mean()))
            out["checks"].append(item)
    # ---- extinction per subject (band and angle mean) with its budget
    for name, t in targets.items():
        if t.extinction is None:
            continue
        x, s = gated[name], sens[name]
        ib = s["ib"]
        for ip, pol in enumerate(t.extinction.polarization.values):
            pol = str(pol)
            ext = t.extinction["extinction_m2"].values[ip][:, band]
            P = float(ext.sum())
            sel = np.arange(len(t.extinction.angle))
            w = DB / P if P > 0 else 0.0
            comps = [_component(*c) for c in extinction_budget(x, s["c"], ib, pol, ip, sel, band, f, cell_hz, w,
                                                                 label=name)]
            un, ud, st = _bg_components([x], [s["c"] * w], [ib], pol, [ip], [sel], band, f, cell_hz)
            comps.append(_component("empty-chamber sweeps (noise)", "A", un, st["repeats"],
                                    "the background mean subtracted from every sweep"))
            comps.append(_component("empty-chamber sweeps (drift)", "A", ud, st["repeats"],
                                    "drift of the background sweeps times their direct path"))
            rn, rd = _ref_components(x, s["c"] * w, ib, pol, ip, sel, band, f, cell_hz, factors, gated[ref_spec.name])
            comps.append(_component("reference sphere sweeps (noise and drift)", "A", math.hypot(rn, rd),
                                    gated[ref_spec.name]["n"],
                                    "through the calibration factor at 180 deg; the sphere's Mie theory is exact "
                                    "(radius tolerance not included; correlation through a shared background "
                                    "neglected)", dof=st["repeats"] - 1))
            out["extinction"].append({
                "target": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
                "band_mean_m2": P / ext.size, "band_mean_dbsm": 10 * math.log10(P / ext.size) if P > 0 else None,
                "angles_deg": [float(a) for a in t.extinction.angle.values],
                "frequency_hz": [float(v) for v in fb],
                "extinction_m2": [float(v) for v in ext.mean(axis=0)],
                "u_extinction_m2": [float(v) for v in np.sqrt(np.mean(
                    t.extinction["u_extinction_m2"].values[ip][:, band] ** 2, axis=0))],
                "budget": budget(comps, kcov)})
    # ---- reductions over directions and of the extinction
    for name, t in targets.items():
        if t.role != "subject" or not t.baseline or t.baseline not in targets:
            continue
        base = targets[t.baseline]
        common = sorted(set(_round(wrap_angle_deg(t.amplitude.angle.values)))
                        & set(_round(wrap_angle_deg(base.amplitude.angle.values))))
        sa = [list(_round(wrap_angle_deg(t.amplitude.angle.values))).index(a) for a in common]
        ba = [list(_round(wrap_angle_deg(base.amplitude.angle.values))).index(a) for a in common]
        for ip, pol in enumerate(t.amplitude.polarization.values):
            pol = str(pol)
            bp = list(base.amplitude.polarization.values).index(pol)
            bb = [list(_round(base.amplitude.bistatic.values)).index(b) for b in _round(t.amplitude.bistatic.values)]
            s_sig = t.sigma.values[ip][:, sa][..., band]  # (b, a, f)
            b_sig = base.sigma.values[bp][bb][:, ba][..., band]
            red = DB * np.log(b_sig.sum(axis=(1, 2)) / s_sig.sum(axis=(1, 2)))
            betas = [float(b) for b in t.amplitude.bistatic.values]
            out["reduction_vs_bistatic"].append({
                "subject": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
                "bistatic_deg": betas, "reduction_db": [float(r) for r in red],
                "angles_deg": [float(a) for a in common]})
            if len(betas) >= 2:
                arc_s = arc_integrated(s_sig.mean(axis=1), betas)  # (f,)
                arc_b = arc_integrated(b_sig.mean(axis=1), betas)
                out["arc_reduction"].append({
                    "subject": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
                    "arc_deg": [min(betas), max(betas)], "bistatic_samples": len(betas),
                    "arc_integrated_baseline_m2": float(arc_b.mean()), "arc_integrated_subject_m2": float(arc_s.mean()),
                    "reduction_db": float(DB * math.log(arc_b.sum() / arc_s.sum())),
                    "curve_db": [float(v) for v in DB * np.log(arc_b / arc_s)]})
            if t.extinction is not None and base.extinction is not None and factors:
                out["extinction_reduction"].append(_extinction_reduction(
                    name, t, base, pol, gated, sens, sa, ba, band, f, cell_hz, kcov))
    _direction_warnings(campaign, mono, out, warnings)
    out["warnings"] = list(warnings)
    return out


def _bg_items(gated):
    seen = {}
    for x in gated.values():
        bg = x["bg"]
        seen[(bg["cube"].name, x["center"], x["span"])] = bg
    return list(seen.items())


def _extinction_reduction(name, t, base, pol, gated, sens, sa, ba, band, f, cell_hz, kcov) -> dict:
    xs, xb = gated[name], gated[t.baseline]
    ss, sb = sens[name], sens[t.baseline]
    ip = list(t.extinction.polarization.values).index(pol)
    bp = list(base.extinction.polarization.values).index(pol)
    es = t.extinction["extinction_m2"].values[ip][sa][:, band]
    eb = base.extinction["extinction_m2"].values[bp][ba][:, band]
    Ps, Pb = float(es.sum()), float(eb.sum())
    comps = []
    red = None
    if Ps > 0 and Pb > 0:
        red = DB * math.log(Pb / Ps)
        # R = 10 log10(Pb / Ps): dR = DB (dPb / Pb - dPs / Ps)
        for c in extinction_budget(xb, sb["c"], sb["ib"], pol, bp, np.array(ba), band, f, cell_hz, DB / Pb,
                                   label=f"{t.baseline} (baseline)"):
            comps.append(_component(*c))
        for c in extinction_budget(xs, ss["c"], ss["ib"], pol, ip, np.array(sa), band, f, cell_hz, DB / Ps,
                                   label=f"{name} (subject)"):
            comps.append(_component(*c))
        same_bg = xs["bg"] is xb["bg"]
        if same_bg:
            un, ud, st = _bg_components([xb, xs], [sb["c"] * (DB / Pb), ss["c"] * (-DB / Ps)], [sb["ib"], ss["ib"]],
                                        pol, [bp, ip], [np.array(ba), np.array(sa)], band, f, cell_hz)
            note = "one background serves both: its error enters both sums and largely cancels in the ratio"
            comps.append(_component("empty-chamber sweeps (noise), shared", "A", un, st["repeats"], note))
            comps.append(_component("empty-chamber sweeps (drift), shared", "A", ud, st["repeats"], note))
        else:
            for x, s_, ip_, sel, w, lab in ((xb, sb, bp, np.array(ba), DB / Pb, t.baseline),
                                            (xs, ss, ip, np.array(sa), -DB / Ps, name)):
                un, ud, st = _bg_components([x], [s_["c"] * w], [s_["ib"]], pol, [ip_], [sel], band, f, cell_hz)
                comps.append(_component(f"empty-chamber sweeps of {lab} (noise)", "A", un, st["repeats"], ""))
                comps.append(_component(f"empty-chamber sweeps of {lab} (drift)", "A", ud, st["repeats"], ""))
        comps.append(_component("reference sphere", "A", 0.0, xs["n"],
                                "one calibration factor serves subject and baseline: it cancels in the ratio"))
    return {"subject": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
            "baseline_band_mean_m2": Pb / max(eb.size, 1), "subject_band_mean_m2": Ps / max(es.size, 1),
            "reduction_db": red, "budget": budget(comps, kcov),
            "definition": "10 log10(sum sigma_ext,baseline / sum sigma_ext,subject) over the reporting band and the "
                          "common turntable angles (linear sums, then dB)"}


def _direction_warnings(campaign, mono, out, warnings) -> None:
    """Warn where a monostatic reduction is reported while the arm shows the cloaked object scattering more
    than the bare one at some bistatic angle (band-averaged, per angle; pairs by revision label)."""
    if mono is None:
        return
    mono_by_rev = {(r.get("revision") or r["subject"], r["polarization"]): r for r in mono.metrics}
    for item in out["reduction_vs_bistatic"]:
        row = mono_by_rev.get((item["revision"], item["polarization"]))
        if row is None:
            continue
        worse = [(b, r) for b, r in zip(item["bistatic_deg"], item["reduction_db"]) if r < 0]
        if worse:
            b, r = min(worse, key=lambda br: br[1])
            angles = ", ".join(f"{x:g}" for x, _ in worse)
            warnings.append(f"{row['subject']} {item['polarization']}: a monostatic reduction of "
                            f"{row['band_reduction_db']:.1f} dB is reported, but on the receiver arm "
                            f"{item['subject']} scatters more than {item['baseline']} at bistatic {angles} deg "
                            f"(by {-r:.1f} dB at {b:g} deg)")
    ext = {(e["revision"], e["polarization"]): e for e in out["extinction_reduction"]}
    for (rev, pol), e in ext.items():
        row = mono_by_rev.get((rev, pol))
        if row is not None and e["reduction_db"] is not None and e["reduction_db"] < 0:
            warnings.append(f"{row['subject']} {pol}: a monostatic reduction of {row['band_reduction_db']:.1f} dB is "
                            f"reported, but the cloaked object's extinction is {-e['reduction_db']:.1f} dB higher than "
                            f"the bare one's")


# ============================================================================ outputs
def write_arm_outputs(result: ArmResult, out_dir) -> dict[str, Path]:
    """bistatic.csv and extinction.csv (README, Outputs of cloakrcs process), atomically."""
    out = Path(out_dir)
    paths = {"bistatic": out / "bistatic.csv", "extinction": out / "extinction.csv"}
    try:
        _write_table(paths["bistatic"], result.bistatic_table())
        _write_table(paths["extinction"], result.extinction_table())
    except OSError as exc:
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", out) from None
    return paths


CSV_DECIMALS = {"rcs_dbsm": 4, "phase_deg": 3, "angle_deg": 6, "bistatic_deg": 6, "extinction_dbsm": 4,
                "extinction_reduction_db": 4}


def _write_table(path: Path, table: pd.DataFrame) -> None:
    """CSV with dB values rounded as in rcs.csv, other floats in full (repr) precision, empty cells for
    undefined values (no baseline), booleans true/false; deterministic and atomic."""
    from .outputs import atomic_write

    t = table.copy()
    for col, dec in CSV_DECIMALS.items():
        if col in t:
            t[col] = np.round(t[col].astype(float), dec) + 0.0
    text = t.to_csv(index=False, na_rep="", lineterminator="\n", float_format=None)
    atomic_write(path, lambda fh: fh.write(text))
