"""The processing chain: campaign cubes -> calibrated RCS -> checks, floor and cloak metrics.

``process_campaign(campaign, settings)`` runs the chain of README, The processing chain, steps 1 to 7,, vectorised
over polarization and angle, and returns a :class:`ProcessingResult` that the CSV/JSON
writers, the store, the report and the dashboard read. Nothing here does I/O.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from . import __version__, calibrate, metrics, references, timedomain
from .campaign import Campaign, TargetCube, wrap_angle_deg
from .constants import C0
from .errors import InputError
from .manifest import TargetSpec

ANGLE_INDEPENDENT = ("sphere",)
CHECK_DYNAMIC_DB = 20.0  # check-target error is scored where theory is within this of its peak


@dataclass(frozen=True)
class ProcessSettings:
    """User choices for one processing run (the manifest gives the rest)."""

    threshold_db: float = 10.0
    floor_margin_db: float = 10.0
    check_tolerance_db: float = 1.0
    sector_deg: tuple[float, float] | None = None
    auto_gate: bool = False
    align_angles: bool = False
    drift_correction: bool = False
    trim_hz: float | None = None
    band_hz: tuple[float, float] | None = None
    window: str | None = None
    kaiser_beta: float | None = None
    gate_overrides: dict[str, dict[str, float]] = field(default_factory=dict)
    coverage_k: float = 2.0

    def as_dict(self) -> dict[str, Any]:
        return {
            "threshold_db": self.threshold_db, "floor_margin_db": self.floor_margin_db,
            "check_tolerance_db": self.check_tolerance_db,
            "sector_deg": list(self.sector_deg) if self.sector_deg else None,
            "auto_gate": self.auto_gate, "align_angles": self.align_angles,
            "drift_correction": self.drift_correction, "trim_hz": self.trim_hz,
            "band_hz": list(self.band_hz) if self.band_hz else None,
            "window": self.window, "kaiser_beta": self.kaiser_beta,
            "gate_overrides": self.gate_overrides, "coverage_k": self.coverage_k,
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "ProcessSettings":
        d = dict(d)
        for key in ("sector_deg", "band_hz"):
            if d.get(key) is not None:
                d[key] = tuple(d[key])
        return cls(**{k: v for k, v in d.items() if k in cls.__dataclass_fields__})


@dataclass
class TargetResult:
    """A calibrated target: amplitude A (m) over the full band, floor and repeatability."""

    name: str
    role: str
    revision: str
    baseline: str | None
    amplitude: xr.DataArray  # complex (polarization, angle, frequency)
    floor: xr.DataArray  # m^2 (polarization, frequency)
    rep_rel_u: xr.DataArray | None  # relative standard uncertainty of power from repeats
    gate: dict[str, float]
    shape: dict | None = None

    @property
    def sigma(self) -> xr.DataArray:
        return np.abs(self.amplitude) ** 2


@dataclass
class ProcessingResult:
    campaign: str
    prototype: str
    date: str | None
    frequency_hz: np.ndarray
    valid_mask: np.ndarray
    band_mask: np.ndarray
    targets: dict[str, TargetResult]
    checks: list[dict]
    floor: dict[str, float]
    metrics: list[dict]
    settings: dict[str, Any]
    warnings: list[str]
    reductions: dict[tuple[str, str], xr.Dataset]  # (subject, polarization) -> reduction_db, bound
    arm: Any = None  # cloakrcs.bistatic.ArmResult when the campaign has receiver-arm targets

    def rcs_table(self) -> pd.DataFrame:
        """rcs.csv rows: every subject, over the valid band (string columns categorical)."""
        f = self.frequency_hz[self.valid_mask]
        margin = self.settings["floor_margin_db"]
        subjects = [name for name, t in self.targets.items() if t.role == "subject"]
        if not subjects:
            return pd.DataFrame(columns=RCS_COLUMNS)
        parts = {k: [] for k in RCS_COLUMNS}
        for k, name in enumerate(subjects):
            t = self.targets[name]
            amp = t.amplitude.values[:, :, self.valid_mask]
            floor = np.broadcast_to(t.floor.values[:, None, self.valid_mask], amp.shape)
            sigma = np.abs(amp) ** 2
            npol, nang, nf = amp.shape
            pols = [POLARIZATION_ORDER.index(str(p)) for p in t.amplitude.polarization.values]
            parts["target"].append(np.full(amp.size, k, dtype=np.int16))
            parts["polarization"].append(np.repeat(np.array(pols, dtype=np.int8), nang * nf))
            parts["angle_deg"].append(np.tile(np.repeat(t.amplitude.angle.values, nf), npol))
            parts["frequency_hz"].append(np.tile(f, npol * nang))
            parts["rcs_dbsm"].append((10 * np.log10(sigma)).ravel())
            parts["phase_deg"].append(np.degrees(np.angle(amp)).ravel())
            parts["floor_dbsm"].append((10 * np.log10(floor)).ravel())
            parts["floor_limited"].append((sigma < floor * 10 ** (margin / 10)).ravel())
        cols = {k: np.concatenate(v) for k, v in parts.items()}
        cols["target"] = pd.Categorical.from_codes(cols["target"], categories=subjects)
        cols["polarization"] = pd.Categorical.from_codes(cols["polarization"], categories=POLARIZATION_ORDER)
        return pd.DataFrame(cols, columns=RCS_COLUMNS)

    def reduction_table(self) -> pd.DataFrame:
        """reduction.csv rows: every subject with a baseline, over the valid band (strings categorical)."""
        if not self.reductions:
            return pd.DataFrame(columns=REDUCTION_COLUMNS)
        names = list(self.targets)
        parts = {k: [] for k in REDUCTION_COLUMNS}
        for (subject, pol), ds in self.reductions.items():
            red = ds["reduction_db"].values
            nang, nf = red.shape
            parts["subject"].append(np.full(red.size, names.index(subject), dtype=np.int16))
            parts["baseline"].append(np.full(red.size, names.index(self.targets[subject].baseline), dtype=np.int16))
            parts["polarization"].append(np.full(red.size, POLARIZATION_ORDER.index(pol), dtype=np.int8))
            parts["angle_deg"].append(np.repeat(ds.angle.values, nf))
            parts["frequency_hz"].append(np.tile(ds.frequency.values, nang))
            parts["reduction_db"].append(red.ravel())
            parts["bound"].append(np.searchsorted(BOUND_ORDER, ds["bound"].values.ravel().astype(str)).astype(np.int8))
        cols = {k: np.concatenate(v) for k, v in parts.items()}
        for key in ("subject", "baseline"):
            cols[key] = pd.Categorical.from_codes(cols[key], categories=names)
        cols["polarization"] = pd.Categorical.from_codes(cols["polarization"], categories=POLARIZATION_ORDER)
        cols["bound"] = pd.Categorical.from_codes(cols["bound"], categories=BOUND_ORDER)
        return pd.DataFrame(cols, columns=REDUCTION_COLUMNS)

    def summary(self) -> dict[str, Any]:
        out = {"campaign": self.campaign, "prototype": self.prototype, "date": self.date,
               "settings": self.settings, "checks": self.checks, "floor": self.floor,
               "metrics": self.metrics, "warnings": self.warnings}
        if self.arm is not None:
            out["bistatic"] = self.arm.summary
        return out


POLARIZATION_ORDER = ["HH", "VV", "HV", "VH"]
BOUND_ORDER = sorted(metrics.BOUNDS)  # sorted, for searchsorted
RCS_COLUMNS = ["target", "polarization", "angle_deg", "frequency_hz", "rcs_dbsm", "phase_deg", "floor_dbsm",
               "floor_limited"]
REDUCTION_COLUMNS = ["subject", "baseline", "polarization", "angle_deg", "frequency_hz", "reduction_db", "bound"]


def _gate_kwargs(campaign: Campaign, settings: ProcessSettings) -> dict[str, Any]:
    g = campaign.manifest.gate
    return {"window": settings.window or g.window,
            "kaiser_beta": settings.kaiser_beta if settings.kaiser_beta is not None else g.kaiser_beta,
            "pad_factor": g.pad_factor, "edge_fraction": g.edge_fraction}


def _subtracted(campaign: Campaign, cube: TargetCube, settings: ProcessSettings, gate: dict, center, span):
    """Background-subtracted sweeps, repeats kept: (pol, angle, repeat, f), and the background repeats."""
    f = campaign.frequency_hz
    bg = campaign.cube(campaign.manifest.background_of(cube.spec).name)
    bg_data = bg.data.sel(polarization=cube.polarizations).values
    bg_mean = bg_data.mean(axis=2)
    bg_at = calibrate.background_at_angles(bg_mean, bg.angles_deg, cube.angles_deg)[:, :, None, :]
    data = cube.data.values
    if settings.drift_correction:
        bg_b = np.broadcast_to(bg_at, data.shape)
        bg_at = calibrate.drift_aligned_background(f, data, bg_b, center, span, gate["window"],
                                                   gate["kaiser_beta"], gate["pad_factor"])
    return data - bg_at, bg


def _gate_of(campaign: Campaign, spec: TargetSpec, settings: ProcessSettings, offset_m: float | None):
    m = campaign.manifest
    over = settings.gate_overrides.get(spec.name, {}) or settings.gate_overrides.get("*", {})
    center = m.gate_center_m(spec) if offset_m is None else spec.range_m + offset_m
    span = m.gate_span_m(spec)
    center = float(over.get("center_m", center))
    span = float(over.get("span_m", span))
    return center, span


def estimate_offset_m(campaign: Campaign, settings: ProcessSettings) -> tuple[float, str]:
    """Reference-plane offset from the reference's echo (a sphere's peak is its specular point, R - a)."""
    ref = campaign.manifest.by_role("reference")[0]
    cube = campaign.cube(ref.name)
    gate = _gate_kwargs(campaign, settings)
    f = campaign.frequency_hz
    d, _ = _subtracted(campaign, cube, replace(settings, drift_correction=False), gate, 0.0, 0.0)
    unamb = timedomain.unambiguous_range_m(f)
    search = (0.25 * ref.range_m, unamb * 0.98)
    peak = timedomain.find_echo_range(f, d.reshape(-1, d.shape[-1]), gate["window"], gate["kaiser_beta"],
                                      pad_factor=8, search=search)
    lead = ref.shape["radius_m"] if ref.shape and ref.shape["shape"] == "sphere" else 0.0
    return peak + lead - ref.range_m, ref.name


def process_campaign(campaign: Campaign, settings: ProcessSettings | None = None, progress=None) -> ProcessingResult:
    """Run the chain on a loaded, validated campaign. ``progress(step_name)`` is called per step."""
    settings = settings or ProcessSettings()
    tick = progress or (lambda _name: None)
    m = campaign.manifest
    f = campaign.frequency_hz
    gate = _gate_kwargs(campaign, settings)
    warnings = list(campaign.warnings)

    offset_est, offset_ref = (None, None)
    if settings.auto_gate:
        offset_est, offset_ref = estimate_offset_m(campaign, settings)
        tick("auto-gate")

    # ---- gate every non-background target, average repeats
    gated: dict[str, dict[str, Any]] = {}
    noise_cache: dict[tuple, tuple[np.ndarray, str]] = {}
    for name, cube in campaign.cubes.items():
        if cube.spec.role == "background":
            continue
        center, span = _gate_of(campaign, cube.spec, settings, offset_est)
        d, bg = _subtracted(campaign, cube, settings, gate, center, span)
        if d.shape[2] > 1:
            g_all = timedomain.time_gate(f, d, center, span, **gate)
            g_mean, var_mean, n_rep = calibrate.mean_over_repeats(g_all, axis=2)
        else:
            g_mean = timedomain.time_gate(f, d[:, :, 0, :], center, span, **gate)
            var_mean, n_rep = None, 1
        key = (bg.name, tuple(cube.polarizations), center, span)
        if key not in noise_cache:  # targets sharing a background and a gate share its floor
            noise_cache[key] = calibrate.gated_noise_power(f, bg.data.sel(polarization=cube.polarizations).values,
                                                           center, span, **gate)
        noise, how = noise_cache[key]
        resid = noise * (1.0 / n_rep + 1.0 / bg.n_repeats)
        gated[name] = {"cube": cube, "g": g_mean, "var": var_mean, "noise": resid, "floor_method": how,
                       "center": center, "span": span}
        tick(f"gate {name}")

    # ---- calibration factor per polarization
    factors, ref_info = _calibration_factors(campaign, gated, settings, warnings)
    tick("calibrate")

    # ---- valid band and reporting band
    spans = [g["span"] for g in gated.values()]
    trim = settings.trim_hz if settings.trim_hz is not None else m.gate.trim_hz
    valid = timedomain.valid_band_mask(f, min(spans), trim)
    band = settings.band_hz or m.band_hz
    band_mask = valid.copy()
    if band:
        band_mask &= (f >= band[0] - 1e-6) & (f <= band[1] + 1e-6)
        if not band_mask.any():
            raise InputError(f"reporting band {band[0] / 1e9:g}-{band[1] / 1e9:g} GHz lies outside the valid band "
                             f"{f[valid][0] / 1e9:.4g}-{f[valid][-1] / 1e9:.4g} GHz", m.path)

    # ---- calibrated targets
    targets: dict[str, TargetResult] = {}
    for name, g in gated.items():
        cube, spec = g["cube"], g["cube"].spec
        k = np.stack([factors[p] for p in cube.polarizations])[:, None, :]
        amp = calibrate.calibrated_amplitude(f, k, g["g"], spec.range_m)
        floor = np.abs(k[:, 0, :]) ** 2 * spec.range_m ** 4 * g["noise"]
        rep = None
        if g["var"] is not None:
            rep = 2 * np.sqrt(g["var"]) / np.maximum(np.abs(g["g"]), 1e-300)
        coords = {"polarization": cube.polarizations, "angle": cube.angles_deg, "frequency": f}
        targets[name] = TargetResult(
            name=name, role=spec.role, revision=spec.revision or name, baseline=spec.baseline,
            amplitude=xr.DataArray(amp, dims=("polarization", "angle", "frequency"), coords=coords, name=name),
            floor=xr.DataArray(floor, dims=("polarization", "frequency"),
                               coords={"polarization": cube.polarizations, "frequency": f}),
            rep_rel_u=None if rep is None else xr.DataArray(rep, dims=("polarization", "angle", "frequency"),
                                                            coords=coords),
            gate={"center_m": g["center"], "span_m": g["span"]}, shape=spec.shape)
    tick("calibrated RCS")

    checks = _checks(campaign, targets, valid, settings)
    floor_summary = {}
    for pol in ("HH", "VV", "HV", "VH"):
        vals = [10 * np.log10(t.floor.sel(polarization=pol).values[valid]) for t in targets.values()
                if t.role == "subject" and pol in t.amplitude.polarization.values]
        if vals:
            floor_summary[pol] = float(np.median(np.concatenate(vals)))

    metric_rows, reductions = _cloak_metrics(targets, f, valid, band_mask, min(spans), settings, checks,
                                             warnings)
    tick("metrics")

    hashes = campaign.file_hashes
    settings_out = {
        "software_version": __version__,
        "manifest": str(m.path),
        "window": gate["window"], "kaiser_beta": gate["kaiser_beta"], "pad_factor": gate["pad_factor"],
        "edge_fraction": gate["edge_fraction"],
        "gates": {name: {"center_m": g["center"], "span_m": g["span"], "floor_method": g["floor_method"]}
                  for name, g in gated.items()},
        "auto_gate": settings.auto_gate,
        "estimated_offset_m": offset_est, "offset_reference": offset_ref,
        "valid_band_hz": [float(f[valid][0]), float(f[valid][-1])],
        "reporting_band_hz": [float(f[band_mask][0]), float(f[band_mask][-1])],
        "sector_deg": list(settings.sector_deg) if settings.sector_deg else None,
        "threshold_db": settings.threshold_db,
        "floor_margin_db": settings.floor_margin_db,
        "check_tolerance_db": settings.check_tolerance_db,
        "coverage_k": settings.coverage_k,
        "drift_correction": settings.drift_correction,
        "align_angles": settings.align_angles,
        "references": ref_info,
        "files": {_rel(p, m.folder): h for p, h in sorted(hashes.items())},
        "process_settings": settings.as_dict(),
    }
    result = ProcessingResult(
        campaign=m.name, prototype=m.prototype, date=m.date.isoformat() if m.date else None,
        frequency_hz=f, valid_mask=valid, band_mask=band_mask, targets=targets, checks=checks,
        floor=floor_summary, metrics=metric_rows, settings=settings_out, warnings=warnings,
        reductions=reductions)
    if campaign.arm:  # receiver-arm (bistatic) targets: README, Bistatic and forward scattering
        from . import bistatic

        result.arm = bistatic.process_arm(campaign, settings, result)
        result.warnings.extend(result.arm.warnings)
        tick("bistatic")
    return result


def _rel(path: str, folder) -> str:
    return os.path.relpath(path, folder).replace(os.sep, "/")


def _calibration_factors(campaign: Campaign, gated: dict, settings: ProcessSettings, warnings: list[str]):
    f = campaign.frequency_hz
    factors: dict[str, np.ndarray] = {}
    info: list[dict] = []
    for spec in campaign.manifest.by_role("reference"):
        g = gated[spec.name]
        cube = g["cube"]
        channels = spec.calibrates if spec.calibrates is not None else tuple(
            p for p in cube.polarizations if not references.theory_is_null(spec.shape, p))
        used = []
        for pol in channels:
            if pol in factors:
                continue  # first reference listed for a channel calibrates it
            ip = cube.polarizations.index(pol)
            if spec.shape["shape"] in ANGLE_INDEPENDENT or (spec.shape["shape"] == "cylinder"
                                                             and spec.shape.get("orientation") == "upright"):
                d_ref = g["g"][ip].mean(axis=0)
                how = f"average of {len(cube.angles_deg)} angle(s)"
            else:
                ia = int(np.argmin(np.abs(wrap_angle_deg(cube.angles_deg - spec.specular_deg))))
                d_ref = g["g"][ip, ia]
                how = f"sweep at {cube.angles_deg[ia]:g} deg (specular {spec.specular_deg:g} deg)"
            theory = references.reference_amplitude(spec.shape, f, np.array([0.0]), pol)[0]
            factors[pol] = calibrate.calibration_factor(f, d_ref, theory, spec.range_m)
            used.append(pol)
            info.append({"target": spec.name, "polarization": pol, "shape": spec.shape, "method": how,
                         "approximate": False})
    subject_pols = {p for g in gated.values() for p in g["cube"].polarizations}
    for pol in sorted(subject_pols - set(factors)):
        if pol in ("HV", "VH") and "HH" in factors and "VV" in factors:
            factors[pol] = calibrate.geometric_mean_factor(factors["HH"], factors["VV"])
            info.append({"target": None, "polarization": pol, "shape": None,
                         "method": "geometric mean of the HH and VV calibrations", "approximate": True})
            warnings.append(f"{pol}: calibrated from the geometric mean of HH and VV (approximate)")
        else:
            raise InputError(f"no reference calibrates {pol}", campaign.manifest.path)
    return factors, info


def _checks(campaign: Campaign, targets: dict[str, TargetResult], valid, settings: ProcessSettings) -> list[dict]:
    """Error of each check target against its theory over the valid band (README, The processing chain, step 4)."""
    out = []
    f = campaign.frequency_hz[valid]
    for name, t in targets.items():
        spec = campaign.cube(name).spec
        if not spec.is_check:
            continue
        for pol in t.amplitude.polarization.values:
            pol = str(pol)
            if references.theory_is_null(spec.shape, pol):
                continue
            aspect = np.asarray(wrap_angle_deg(t.amplitude.angle.values - spec.specular_deg))
            theory = np.abs(references.reference_amplitude(spec.shape, f, aspect, pol)) ** 2
            meas = t.sigma.sel(polarization=pol).values[:, valid]
            keep = theory >= theory.max() * 10 ** (-CHECK_DYNAMIC_DB / 10)
            err = 10 * np.log10(meas / theory)
            scored = err[keep]
            mean_curve = 10 * np.log10(np.sum(np.where(keep, meas, 0), axis=0)
                                       / np.maximum(np.sum(np.where(keep, theory, 0), axis=0), 1e-300))
            max_err = float(np.max(np.abs(scored)))
            out.append({
                "target": name, "polarization": pol,
                "max_error_db": max_err,
                "rms_error_db": float(np.sqrt(np.mean(scored ** 2))),
                "mean_error_db": float(np.mean(scored)),
                "tolerance_db": settings.check_tolerance_db,
                "passed": bool(max_err <= settings.check_tolerance_db),
                "shape": spec.shape,
                "points": int(scored.size),
                "error_curve_db": [float(x) for x in mean_curve],
            })
    return out


def _cloak_metrics(targets, f, valid, band_mask, min_span, settings: ProcessSettings, checks, warnings):
    rows, reductions = [], {}
    cell_hz = C0 / (2 * min_span)
    margin = settings.floor_margin_db
    for name, t in targets.items():
        if t.role != "subject" or not t.baseline:
            continue
        base = targets[t.baseline]
        for pol in t.amplitude.polarization.values:
            pol = str(pol)
            s_sig = t.sigma.sel(polarization=pol).values
            s_angles = t.amplitude.angle.values
            b_all = base.sigma.sel(polarization=pol)
            b_keys = {round(float(a), 6): i for i, a in enumerate(wrap_angle_deg(b_all.angle.values))}
            idx = [b_keys[round(float(a), 6)] for a in wrap_angle_deg(s_angles)]
            b_sig = b_all.values[idx]
            pat_b = 10 * np.log10(b_sig[:, band_mask].mean(axis=1))
            pat_s = 10 * np.log10(s_sig[:, band_mask].mean(axis=1))
            offset, corr = metrics.mounting_offset(s_angles, pat_b, pat_s)
            reliable = corr >= metrics.OFFSET_MIN_CORRELATION
            s_use = s_sig
            s_rep = None if t.rep_rel_u is None else t.rep_rel_u.sel(polarization=pol).values
            aligned = settings.align_angles and reliable and offset != 0.0
            if settings.align_angles and not reliable:
                warnings.append(f"{name} {pol}: mounting offset not applied: its angular pattern and "
                                f"{t.baseline}'s correlate too weakly ({corr:.2f}) to align on")
            if aligned:
                s_use = metrics.resample_angles(s_angles, s_sig, np.asarray(s_angles) + offset)
                if s_rep is not None:
                    s_rep = metrics.resample_angles(s_angles, s_rep, np.asarray(s_angles) + offset)
            b_rep = None if base.rep_rel_u is None else base.rep_rel_u.sel(polarization=pol).values[idx]
            s_floor = np.broadcast_to(t.floor.sel(polarization=pol).values, s_use.shape)
            b_floor = np.broadcast_to(base.floor.sel(polarization=pol).values, b_sig.shape)
            s_b, s_lim = metrics.bounded_sigma(s_use, s_floor, margin)
            b_b, b_lim = metrics.bounded_sigma(b_sig, b_floor, margin)
            red = metrics.reduction_db(b_b, s_b)
            bounds = metrics.point_bounds(s_lim, b_lim)
            reductions[(name, pol)] = xr.Dataset(
                {"reduction_db": (("angle", "frequency"), red[:, valid]),
                 "bound": (("angle", "frequency"), bounds[:, valid])},
                coords={"angle": s_angles, "frequency": f[valid]})
            sec = metrics.sector_mask(s_angles, settings.sector_deg)
            if not sec.any():
                raise InputError(f"sector {settings.sector_deg[0]:g}:{settings.sector_deg[1]:g} deg holds no "
                                 f"measured angle of {name}")
            sel = np.ix_(sec, band_mask)
            fb = f[band_mask]
            band_red = metrics.band_reduction_db(b_b[sel], s_b[sel])
            curve = metrics.sector_curve_db(b_b[sel], s_b[sel])
            bw = metrics.bandwidth_above(fb, curve, settings.threshold_db)
            worst_a, worst_r = metrics.worst_angle(s_angles[sec], b_b[sel], s_b[sel])
            u = metrics.band_reduction_uncertainty_db(
                b_b[sel], b_floor[sel], None if b_rep is None else b_rep[sel],
                s_b[sel], s_floor[sel], None if s_rep is None else s_rep[sel], fb, cell_hz, settings.coverage_k)
            check_err = [c["max_error_db"] for c in checks if c["polarization"] == pol]
            rows.append({
                "subject": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
                "band_reduction_db": band_red,
                "band_reduction_uncertainty_db": u,
                "best_reduction_db": bw.best_db, "best_frequency_hz": bw.best_hz,
                "bandwidth_hz": bw.width_hz, "bandwidth_start_hz": bw.start_hz, "bandwidth_stop_hz": bw.stop_hz,
                "bandwidth_truncated": bw.truncated, "fractional_bandwidth": bw.fractional,
                "worst_angle_deg": worst_a, "worst_angle_reduction_db": worst_r,
                "bound": metrics.aggregate_bound(s_lim[sel], b_lim[sel]),
                "floor_limited_points": int(np.sum(s_lim[sel] | b_lim[sel])),
                "points": int(s_lim[sel].size),
                "mounting_offset_deg": offset,
                "mounting_offset_correlation": corr,
                "mounting_offset_reliable": bool(reliable),
                "angles_aligned": bool(aligned),
                "check_error_db": max(check_err) if check_err else None,
                "sector_curve_db": [float(x) for x in curve],
                "sector_curve_frequency_hz": [float(x) for x in fb],
            })
    return rows, reductions

