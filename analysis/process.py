"""The processing chain: campaign cubes -> calibrated RCS -> checks, floor and cloak metrics.

``process_campaign(campaign, settings)`` runs the chain of README, The processing chain, steps 1 to 7,, vectorised
over polarization and angle, and returns a :class:`ProcessingResult` that the CSV/JSON
writers, the store, the report and the dashboard read. Nothing here does I/O.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from . import __version__, calibrate, metrics, references, timedomain, uncertainty
from .campaign import ECHO_WARNING, Campaign, TargetCube, band_problem, flat_top_problem, wrap_angle_deg
from .campaign import _check_echo_in_gate as check_echo_in_gate
from .constants import C0
from .errors import InputError
from .manifest import TargetSpec, target_extent_m

ANGLE_INDEPENDENT = ("sphere",)
SPECULAR_MISS_DEG = 1e-6  # an aspect-dependent target's nearest sweep further than this from specular is warned of
CENTRING_WARN_DB = 0.1  # warn of an off-axis reference when a plain angle average would lose more than this
CHECK_DYNAMIC_DB = 20.0  # check-target error is scored where theory is within this of its peak


@dataclass(frozen=True)
class ProcessSettings:
    """User choices for one processing run (the manifest gives the rest).

    Parameters
    ----------
    threshold_db : float
        Reduction threshold for the bandwidth, dB (default 10).
    floor_margin_db : float
        Points less than this above the floor are floor-limited, dB (default 10).
    check_tolerance_db : float
        Largest check-target error that passes, dB (default 1).
    sector_deg : (float, float), optional
        Angular sector START, STOP in degrees, wrapped to (-180, 180]; default every angle.
    auto_gate, align_angles, drift_correction : bool
        As the `process` options of the same names.
    trim_hz : float, optional
        Band-edge trim after gating, Hz (default c0 / (2 span)).
    band_hz : (float, float), optional
        Reporting band, Hz (default the manifest's ``[band]``, else the valid band).
    window : str, optional
        ``kaiser``, ``hann`` or ``rect``, overriding the manifest; ``kaiser_beta`` likewise.
    gate_overrides : dict
        {target name or "*": {"center_m": m, "span_m": m}}.
    coverage_k : float
        Coverage factor of the expanded uncertainty (default 2).
    """

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
    percentiles: tuple[float, ...] = (10.0, 90.0)

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
            "percentiles": list(self.percentiles),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "ProcessSettings":
        d = dict(d)
        for key in ("sector_deg", "band_hz", "percentiles"):
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
    centres: list[dict] = field(default_factory=list)  # scattering centres per subject (cloakrcs.imaging)
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
            parts["floor_limited"].append(metrics.floor_limits(sigma, floor, margin)[0].ravel())
            terms = (self.settings.get("uncertainty") or {}).get("targets", {}).get(name)
            k_cov = (self.settings.get("uncertainty") or {}).get("coverage_k", 2.0)
            u = np.stack([uncertainty.point_u_db(sigma[i], floor[i], terms, i, k_cov, self.valid_mask)
                          for i in range(npol)])
            parts["u_rcs_db"].append(u.ravel())
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

    @property
    def failed_checks(self) -> list[dict]:
        """Check rows that failed their tolerance."""
        return [c for c in self.checks if not c.get("passed", True)]

    def summary(self) -> dict[str, Any]:
        failed = [f"{c['target']} {c['polarization']}" for c in self.failed_checks]
        out = {"campaign": self.campaign, "prototype": self.prototype, "date": self.date,
               "check_failed": bool(failed), "failed_checks": failed,
               "settings": self.settings, "checks": self.checks, "floor": self.floor,
               "metrics": self.metrics, "warnings": self.warnings, "scattering_centres": self.centres,
               "uncertainty_budget": [
                   {"subject": m["subject"], "baseline": m["baseline"], "polarization": m["polarization"],
                    "metric": metric, **budget}
                   for m in self.metrics for metric, budget in (m.get("uncertainty_budget") or {}).items()]}
        if self.arm is not None:
            out["bistatic"] = self.arm.summary
        return out


def check_failure_text(c: dict) -> str:
    """The one-line statement of a failed check target (CLI, summary.json warnings, report, dashboard).

    A row judged with its uncertainty (``expanded_uncertainty_db``, dB) names the worst point's
    error, the tolerance and that expanded uncertainty; rows without it (receiver-arm checks, runs
    stored before) keep the plain statement."""
    if c.get("expanded_uncertainty_db") is None:
        return (f"CHECK TARGET FAILED: {c['target']} {c['polarization']}: max error {c['max_error_db']:.2f} dB > "
                f"tolerance {c['tolerance_db']:g} dB: the calibration or the gate is suspect")
    n = c.get("failed_points")
    where = f" at {n} scored point(s)" if n else ""
    return (f"CHECK TARGET FAILED: {c['target']} {c['polarization']}: error {c['worst_error_db']:.2f} dB > "
            f"tolerance {c['tolerance_db']:g} dB + expanded uncertainty {c['expanded_uncertainty_db']:.2f} dB "
            f"(k = {c.get('coverage_k', 2):g}){where}, max error {c['max_error_db']:.2f} dB: the calibration or the "
            f"gate is suspect")


POLARIZATION_ORDER = ["HH", "VV", "HV", "VH"]
BOUND_ORDER = sorted(metrics.BOUNDS)  # sorted, for searchsorted
RCS_COLUMNS = ["target", "polarization", "angle_deg", "frequency_hz", "rcs_dbsm", "phase_deg", "floor_dbsm",
               "floor_limited", "u_rcs_db"]
REDUCTION_COLUMNS = ["subject", "baseline", "polarization", "angle_deg", "frequency_hz", "reduction_db", "bound"]


def _gate_kwargs(campaign: Campaign, settings: ProcessSettings) -> dict[str, Any]:
    g = campaign.manifest.gate
    return {"window": settings.window or g.window,
            "kaiser_beta": settings.kaiser_beta if settings.kaiser_beta is not None else g.kaiser_beta,
            "pad_factor": g.pad_factor, "edge_fraction": g.edge_fraction}


def _subtracted(campaign: Campaign, cube: TargetCube, settings: ProcessSettings, gate: dict, center, span):
    """Background-subtracted sweeps, repeats kept: (pol, angle, repeat, f), the background's cube and
    what was subtracted (pol, angle, 1 or repeat, f); None and None when there is no background."""
    f = campaign.frequency_hz
    bg_spec = campaign.manifest.background_of(cube.spec)
    if bg_spec is None:  # no background measured: gating alone (README, The processing chain)
        return cube.data.values, None, None
    bg = campaign.cube(bg_spec.name)
    bg_data = bg.data.sel(polarization=cube.polarizations).values
    bg_mean = bg_data.mean(axis=2)
    bg_at = calibrate.background_at_angles(bg_mean, bg.angles_deg, cube.angles_deg)[:, :, None, :]
    data = cube.data.values
    if settings.drift_correction:
        bg_b = np.broadcast_to(bg_at, data.shape)
        bg_at = calibrate.drift_aligned_background(f, data, bg_b, center, span, gate["window"],
                                                   gate["kaiser_beta"], gate["pad_factor"])
    return data - bg_at, bg, bg_at


def _gate_of(campaign: Campaign, spec: TargetSpec, settings: ProcessSettings, offset_m: float | None):
    m = campaign.manifest
    over = settings.gate_overrides.get(spec.name, {}) or settings.gate_overrides.get("*", {})
    center = m.gate_center_m(spec) if offset_m is None else spec.range_m + offset_m
    span = m.gate_span_m(spec)
    center = float(over.get("center_m", center))
    span = float(over.get("span_m", span))
    return center, span


def valid_and_reporting_band(campaign: Campaign, settings: ProcessSettings, min_span_m: float,
                             warnings: list[str] | None = None):
    """(valid band mask, reporting band mask) over the campaign's grid; InputError when either is empty.

    Band messages name where the band was given (``--band-ghz`` or the manifest's ``[band]`` line);
    a band partly outside the valid band is a warning appended to ``warnings``.
    """
    m, f = campaign.manifest, campaign.frequency_hz
    trim = settings.trim_hz if settings.trim_hz is not None else m.gate.trim_hz
    try:
        valid = timedomain.valid_band_mask(f, min_span_m, trim)
    except InputError as exc:
        raise InputError(exc.message, m.path) from None
    band = settings.band_hz or m.band_hz
    band_mask = valid.copy()
    if band:
        from_flag = settings.band_hz is not None
        if band[0] >= band[1]:
            raise InputError(f"--band-ghz {band[0] / 1e9:g}:{band[1] / 1e9:g}: START must be below STOP")
        band_mask &= (f >= band[0] - 1e-6) & (f <= band[1] + 1e-6)
        valid_hz = (float(f[valid][0]), float(f[valid][-1])) if valid.any() else None
        err, warn_band = band_problem(band, f, valid_hz, "--band-ghz" if from_flag else "[band]")
        if err or not band_mask.any():
            raise InputError(err or f"reporting band {band[0] / 1e9:g}-{band[1] / 1e9:g} GHz holds no valid frequency",
                             None if from_flag else m.path, None if from_flag else m.band_line)
        if warnings is not None and warn_band and (from_flag or not any(warn_band in w for w in warnings)):
            warnings.append(warn_band if from_flag else str(InputError(warn_band, m.path, m.band_line)))
    return valid, band_mask


def settings_problems(campaign: Campaign, settings: ProcessSettings | None = None) -> list[InputError]:
    """What `process` would refuse about the gates and bands, found without processing (for `inspect`)."""
    settings = settings or ProcessSettings()
    spans, out = [], []
    for cube in campaign.cubes.values():
        if cube.spec.role != "background":
            spans.append(_gate_of(campaign, cube.spec, settings, None)[1])
    if spans and len(campaign.frequency_hz) > 1:
        try:
            valid_and_reporting_band(campaign, settings, min(spans))
        except InputError as exc:
            out.append(exc)
    return out


def estimate_offset_m(campaign: Campaign, settings: ProcessSettings) -> tuple[float, str]:
    """Reference-plane offset from the reference's echo (a sphere's peak is its specular point, R - a)."""
    ref = campaign.manifest.by_role("reference")[0]
    cube = campaign.cube(ref.name)
    gate = _gate_kwargs(campaign, settings)
    f = campaign.frequency_hz
    d, _, _ = _subtracted(campaign, cube, replace(settings, drift_correction=False), gate, 0.0, 0.0)
    unamb = timedomain.unambiguous_range_m(f)
    search = (0.25 * ref.range_m, unamb * 0.98)
    peak = timedomain.find_echo_range(f, d.reshape(-1, d.shape[-1]), gate["window"], gate["kaiser_beta"],
                                      pad_factor=8, search=search)
    lead = references.leading_surface_m(ref.shape) if ref.shape else 0.0  # echo peak at R - lead
    return peak + lead - ref.range_m, ref.name


def process_campaign(campaign: Campaign, settings: ProcessSettings | None = None, progress=None) -> ProcessingResult:
    """Run the processing chain (README, "The processing chain", steps 1 to 7) on a campaign.

    Parameters
    ----------
    campaign : Campaign
        From :func:`cloakrcs.load_campaign` (loaded and validated).
    settings : ProcessSettings, optional
        User choices (threshold, sector, band, gate overrides...); default ``ProcessSettings()``.
    progress : callable, optional
        ``progress(step_name)`` is called after each step.

    Returns
    -------
    ProcessingResult
        ``targets`` {name: TargetResult} with ``amplitude`` (complex A in m, xarray
        polarization x angle x frequency; sigma = |A|^2 m^2, time factor exp(+j w t)),
        ``floor`` (m^2) and ``rep_rel_u``; ``checks``, ``metrics`` (dicts as in summary.json;
        dB, Hz, degrees), ``reductions``, ``valid_mask``/``band_mask`` over ``frequency_hz``,
        ``settings`` and ``warnings``.

    Raises
    ------
    InputError
        Settings that do not fit the campaign (a band outside the valid band, an empty sector).
    """
    settings = settings or ProcessSettings()
    tick = progress or (lambda _name: None)
    m = campaign.manifest
    f = campaign.frequency_hz
    gate = _gate_kwargs(campaign, settings)
    warnings = list(campaign.warnings)
    early = settings_problems(campaign, settings)
    if early:  # gate and band problems are refused before any work
        raise early[0]

    offset_est, offset_ref = (None, None)
    if settings.auto_gate:
        offset_est, offset_ref = estimate_offset_m(campaign, settings)
        # the manifest's gates were checked for echoes outside them; check the measured ones instead
        warnings = [w for w in warnings if ECHO_WARNING not in w]
        check_echo_in_gate(m, campaign.cubes, campaign.frequency_hz, warnings.append,
                           lambda spec: _gate_of(campaign, spec, settings, offset_est))
        tick("auto-gate")

    # ---- gate every non-background target, average repeats
    gated: dict[str, dict[str, Any]] = {}
    noise_cache: dict[tuple, tuple[np.ndarray, str]] = {}
    for name, cube in campaign.cubes.items():
        if cube.spec.role == "background":
            continue
        center, span = _gate_of(campaign, cube.spec, settings, offset_est)
        if not center > 0:
            how = f" (measured offset {offset_est:.3f} m)" if offset_est is not None else ""
            raise InputError(f"target {name}: gate centre {center:g} m{how} is not a positive range", m.path,
                             cube.spec.line)
        _flat_top_warning(campaign, cube.spec, center, span, offset_est, warnings)
        d, bg, bg_at = _subtracted(campaign, cube, settings, gate, center, span)
        if d.shape[2] > 1:
            g_all = timedomain.time_gate(f, d, center, span, **gate)
            g_mean, var_mean, n_rep = calibrate.mean_over_repeats(g_all, axis=2)
            # relative standard uncertainty of power from the repeats: the calibration factor multiplies every
            # repeat alike, so that of the gated power is that of sigma
            rep_u = calibrate.power_repeatability(g_all, axis=2)
        else:
            g_mean = timedomain.time_gate(f, d[:, :, 0, :], center, span, **gate)
            var_mean, n_rep, rep_u = None, 1, None
        if bg is None:  # the floor from the target's own sweeps: their repeats, else their range profile
            noise, how = calibrate.gated_noise_power(f, cube.data.values, center, span, **gate)
            how = f"no background: {how.replace('background', 'target')}"
            resid = noise / n_rep
        else:
            key = (bg.name, tuple(cube.polarizations), center, span)
            if key not in noise_cache:  # targets sharing a background and a gate share its floor
                noise_cache[key] = calibrate.gated_noise_power(
                    f, bg.data.sel(polarization=cube.polarizations).values, center, span, **gate)
            noise, how = noise_cache[key]
            resid = noise * (1.0 / n_rep + 1.0 / bg.n_repeats)
        clutter = None if bg_at is None else timedomain.time_gate(f, bg_at.mean(axis=2), center, span, **gate)
        gated[name] = {"cube": cube, "g": g_mean, "var": var_mean, "noise": resid, "floor_method": how,
                       "center": center, "span": span, "noise_sweep": noise, "rep_u": rep_u, "n_rep": n_rep, "bg": bg,
                       "clutter": clutter}
        tick(f"gate {name}")

    # ---- calibration factor per polarization
    factors, ref_info, ref_use = _calibration_factors(campaign, gated, settings, warnings)
    tick("calibrate")

    # ---- valid band and reporting band
    spans = [g["span"] for g in gated.values()]
    valid, band_mask = valid_and_reporting_band(campaign, settings, min(spans), warnings)

    # ---- calibrated targets
    targets: dict[str, TargetResult] = {}
    for name, g in gated.items():
        cube, spec = g["cube"], g["cube"].spec
        k = np.stack([factors[p] for p in cube.polarizations])[:, None, :]
        amp = calibrate.calibrated_amplitude(f, k, g["g"], spec.range_m)
        floor = np.abs(k[:, 0, :]) ** 2 * spec.range_m ** 4 * g["noise"]
        rep = g["rep_u"]
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
    _check_specular_warnings(campaign, f[valid], warnings)
    warnings.extend(check_failure_text(c) for c in checks if not c["passed"])
    floor_summary = {}
    for pol in ("HH", "VV", "HV", "VH"):
        vals = [10 * np.log10(t.floor.sel(polarization=pol).values[valid]) for t in targets.values()
                if t.role == "subject" and pol in t.amplitude.polarization.values]
        if vals:
            floor_summary[pol] = float(np.median(np.concatenate(vals)))

    metric_rows, reductions, contexts = _cloak_metrics(targets, f, valid, band_mask, min(spans), settings, checks,
                                                       warnings)
    tick("metrics")
    point_terms = _uncertainty_budgets(campaign, settings, gate, gated, factors, ref_use, targets, metric_rows,
                                       contexts, warnings)
    tick("uncertainty")

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
        "sector_contents": metric_rows[0]["sector_contents"] if metric_rows else None,
        "threshold_db": settings.threshold_db,
        "floor_margin_db": settings.floor_margin_db,
        "check_tolerance_db": settings.check_tolerance_db,
        "coverage_k": settings.coverage_k,
        "drift_correction": settings.drift_correction,
        "align_angles": settings.align_angles,
        "references": ref_info,
        "files": {_rel(p, m.folder): h for p, h in sorted(hashes.items())},
        "process_settings": settings.as_dict(),
        "uncertainty": point_terms,
    }
    result = ProcessingResult(
        campaign=m.name, prototype=m.prototype, date=m.date.isoformat() if m.date else None,
        frequency_hz=f, valid_mask=valid, band_mask=band_mask, targets=targets, checks=checks,
        floor=floor_summary, metrics=metric_rows, settings=settings_out, warnings=warnings,
        reductions=reductions)
    from . import imaging

    result.centres = imaging.result_centres(result)
    tick("scattering centres")

    if campaign.arm:  # receiver-arm (bistatic) targets: README, Bistatic and forward scattering
        from . import bistatic

        result.arm = bistatic.process_arm(campaign, settings, result)
        result.warnings.extend(result.arm.warnings)
        tick("bistatic")
    return result


def _uncertainty_budgets(campaign: Campaign, settings: ProcessSettings, gate: dict, gated: dict, factors: dict,
                         ref_use: dict, targets: dict, rows: list[dict], contexts, warnings: list[str]) -> dict:
    """Attach each metric row's uncertainty budget (README, The processing chain, step 7) and return the
    per-point terms of u_rcs_db (JSON, kept in the run's settings)."""
    f = campaign.frequency_hz
    repeated = {name: c.data.values for name, c in campaign.cubes.items()
                if c.spec.role in ("background", "reference") and c.data.shape[2] > 1}
    drift = uncertainty.drift_from_repeats(repeated)
    if not drift.known and contexts:
        warnings.append("uncertainty: no repeated background or reference sweeps, so drift is not in the budget; "
                        "measure them at least twice")
    model_targets, noise_std = {}, {}
    bg_noise: dict[str, tuple] = {}  # background -> (its cube, {pol: raw noise std of one sweep})
    for name, g in gated.items():
        cube, bg = g["cube"], g["bg"]
        gain = timedomain.gate_noise_gain(f, g["center"], g["span"], **gate)
        noise_std[name] = np.sqrt(g["noise_sweep"] / np.maximum(gain, 1e-300))  # the raw noise behind the floor
        if bg is not None:  # one chamber noise: a background's sweeps have the noise its targets see
            per_pol = bg_noise.setdefault(bg.name, (bg, {}))[1]
            for ip, p in enumerate(cube.polarizations):
                per_pol.setdefault(p, noise_std[name][ip])
        model_targets[name] = uncertainty.GatedTarget(
            name=name, pols=list(cube.polarizations), g=g["g"], clutter=g["clutter"], n_rep=g["n_rep"],
            background=None if bg is None else bg.name,
            bg_index=None if bg is None else calibrate.background_angle_index(bg.angles_deg, cube.angles_deg),
            center_m=g["center"], span_m=g["span"], range_m=cube.spec.range_m,
            factor=np.stack([factors[p] for p in cube.polarizations]))
    backgrounds = {}
    for name, (bg, per_pol) in bg_noise.items():
        pols = sorted(per_pol, key=POLARIZATION_ORDER.index)
        backgrounds[name] = uncertainty.BackgroundNoise(pols=pols, n_angles=len(bg.angles_deg), n_rep=bg.n_repeats,
                                                        noise_std=np.stack([per_pol[p] for p in pols]))
    model = uncertainty.ChainModel(frequency_hz=f, gate=gate, targets=model_targets, noise_std=noise_std,
                                   backgrounds=backgrounds, reference_use=ref_use, drift=drift)

    regated: dict[tuple, np.ndarray] = {}

    def regate(name, center, span):
        if (name, center, span) not in regated:
            d, _, _ = _subtracted(campaign, campaign.cubes[name], settings, gate, center, span)
            regated[(name, center, span)] = timedomain.time_gate(f, d, center, span, **gate).mean(axis=2)
        return regated[(name, center, span)]

    ratios, tolerances, ref_range = {}, {}, {}
    for pol, uses in ref_use.items():
        per_key: dict[str, list] = {}
        for name, _ip, angles in uses:
            spec = campaign.cube(name).spec
            ref_range[pol] = spec.range_m
            base_pol = campaign.cube(name).polarizations[_ip]
            aspect = 0.0 if _angle_independent(spec.shape) else float(
                wrap_angle_deg(campaign.cube(name).angles_deg[angles[0]] - spec.specular_deg))
            for key, r in uncertainty.dimension_ratios(spec.shape, spec.tolerances, f, aspect, base_pol).items():
                per_key.setdefault(key, []).append(r)
                tolerances.setdefault(pol, {})[key] = spec.tolerances[key]
        ratios[pol] = {k: np.prod(v, axis=0) ** (1 / len(v)) for k, v in per_key.items()}
    steps = {}
    for name, t in targets.items():
        a = np.sort(np.asarray(t.amplitude.angle.values, float))
        steps[name] = float(np.median(np.diff(a))) if a.size > 1 else 0.0
    floor_rel, floor_dof, floor_note = _floor_level_uncertainty(gated)
    inputs = uncertainty.TypeBInputs(
        floor_rel_u=floor_rel, floor_dof=floor_dof, floor_note=floor_note,
        regate=regate, ranges_m={n: c.spec.range_m for n, c in campaign.cubes.items()},
        range_tolerance_m={n: c.spec.range_tolerance_m for n, c in campaign.cubes.items()},
        reference_ratios=ratios, reference_tolerances=tolerances, reference_range_m=ref_range,
        angle_step_deg=steps)
    floor_sweeps = sum(b.n_rep * b.n_angles for b in backgrounds.values()) or max(
        (g["n_rep"] for g in gated.values()), default=1)
    budgets, prop = uncertainty.metric_budgets(model, contexts, inputs, settings.coverage_k, floor_sweeps)
    for row, budget in zip(rows, budgets):
        row["uncertainty_budget"] = budget
        row["band_reduction_uncertainty_db"] = budget["band_reduction_db"]["expanded_u_db"]
        row["sector_curve_uncertainty_db"] = budget["sector_curve_db"]["expanded_u_db_per_frequency"]
        row["best_reduction_uncertainty_db"] = budget["best_reduction_db"]["expanded_u_db"]
    if not ref_use:
        return {"coverage_k": settings.coverage_k, "targets": {}}
    return uncertainty.point_terms(prop, inputs, settings.coverage_k)


def _floor_level_uncertainty(gated: dict) -> tuple[float, float | None, str]:
    """Relative standard uncertainty of the floor's noise power, its degrees of freedom and how known.

    From N repeats at M angles, smoothed over FLOOR_SMOOTHING_CELLS correlation cells, a power
    estimate has about nu = 2 (N - 1) M cells real degrees of freedom; its relative standard
    uncertainty is sqrt(2 / nu) (chi-square). Without repeats the estimate is a rough one from the
    range profile: 50 % (a stated assumption).
    """
    worst = None
    for g in gated.values():
        bg = g["bg"]
        n, m = (bg.n_repeats, len(bg.angles_deg)) if bg is not None else (g["n_rep"], len(g["cube"].angles_deg))
        if worst is None or (n - 1) * m < worst[0] * worst[1]:
            worst = (n - 1, m)
    if worst is None or worst[0] < 1:
        return 0.5, None, "no repeated sweeps: estimated from the range profile, an assumed 50 %"
    nu = 2 * worst[0] * worst[1] * calibrate.FLOOR_SMOOTHING_CELLS
    return math.sqrt(2 / nu), nu, (f"{worst[0] + 1} repeats x {worst[1]} angle(s), smoothed over "
                                   f"{calibrate.FLOOR_SMOOTHING_CELLS} cells: {nu} degrees of freedom")


def _rel(path: str, folder) -> str:
    return os.path.relpath(path, folder).replace(os.sep, "/")


def _calibration_factors(campaign: Campaign, gated: dict, settings: ProcessSettings, warnings: list[str]):
    f = campaign.frequency_hz
    factors: dict[str, np.ndarray] = {}
    info: list[dict] = []
    ref_use: dict[str, list] = {}  # pol -> [(reference, pol index, angle indices averaged)]
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
            centring = {"off_axis_m": None, "shift_spread_m": None}
            if _angle_independent(spec.shape):
                aspect = 0.0
                if len(cube.angles_deg) > 1:  # README, The processing chain, step 3: aligned, then averaged
                    d_ref, shifts = calibrate.aligned_angle_mean(f, g["g"][ip], spec.range_m,
                                                                 _fit_band(f, g["span"]))
                    centring = {"off_axis_m": calibrate.off_axis_distance_m(cube.angles_deg, shifts),
                                "shift_spread_m": float(np.ptp(shifts))}
                    _centring_warning(spec, pol, f, centring, warnings)
                    how = f"average of {len(cube.angles_deg)} angles, each aligned on its echo delay"
                    ref_use[pol] = [(spec.name, ip, np.arange(len(cube.angles_deg)))]
                else:
                    d_ref = g["g"][ip, 0]
                    how = "single angle"
                    ref_use[pol] = [(spec.name, ip, np.array([0]))]
            else:
                miss = wrap_angle_deg(cube.angles_deg - spec.specular_deg)
                ia = int(np.argmin(np.abs(miss)))
                aspect = float(miss[ia])  # theory at the measured angle (README, step 3)
                d_ref = g["g"][ip, ia]
                ref_use[pol] = [(spec.name, ip, np.array([ia]))]
                how = (f"sweep at {cube.angles_deg[ia]:g} deg (specular {spec.specular_deg:g} deg), "
                       f"theory at {aspect:g} deg from specular")
                if abs(aspect) > SPECULAR_MISS_DEG:
                    warnings.append(_specular_miss_warning(spec, pol, f, aspect, "calibrated against"))
            theory = references.reference_amplitude(spec.shape, f, np.array([aspect]), pol)[0]
            factors[pol] = calibrate.calibration_factor(f, d_ref, theory, spec.range_m)
            used.append(pol)
            info.append({"target": spec.name, "polarization": pol, "shape": spec.shape, "method": how,
                         "approximate": False, "aspect_deg": aspect, **centring})
    subject_pols = {p for g in gated.values() for p in g["cube"].polarizations}
    for pol in sorted(subject_pols - set(factors)):
        if pol in ("HV", "VH") and "HH" in factors and "VV" in factors:
            factors[pol] = calibrate.geometric_mean_factor(factors["HH"], factors["VV"])
            ref_use[pol] = ref_use["HH"] + ref_use["VV"]  # K = sqrt(K_HH K_VV): half of each relative error
            info.append({"target": None, "polarization": pol, "shape": None,
                         "method": "geometric mean of the HH and VV calibrations", "approximate": True})
            warnings.append(f"{pol}: calibrated from the geometric mean of HH and VV (approximate)")
        else:
            raise InputError(f"no reference calibrates {pol}", campaign.manifest.path)
    return factors, info, ref_use


def _flat_top_warning(campaign: Campaign, spec: TargetSpec, center: float, span: float, offset_est, warnings):
    """Warn when a gate that differs from the manifest's (an override, --auto-gate) does not hold the
    target's extent in its flat top (the manifest's own gates are checked when the campaign loads)."""
    m = campaign.manifest
    extent = target_extent_m(spec)
    if extent is None or (center, span) == (m.gate_center_m(spec), m.gate_span_m(spec)):
        return
    echo = spec.range_m + (m.chamber.offset_m if offset_est is None else offset_est)
    problem = flat_top_problem(extent, echo, center, span, m.gate.edge_fraction)
    if problem:
        warnings.append(f"target {spec.name}: {problem}")


def _check_specular_warnings(campaign: Campaign, f, warnings: list[str]) -> None:
    """Warn for each aspect-dependent check target whose sweeps miss its specular angle (its error is
    then scored against theory at the measured angles only)."""
    for spec in campaign.manifest.targets:
        if not spec.is_check or _angle_independent(spec.shape) or spec.name not in campaign.cubes:
            continue
        cube = campaign.cube(spec.name)
        miss = wrap_angle_deg(cube.angles_deg - spec.specular_deg)
        aspect = float(miss[int(np.argmin(np.abs(miss)))])
        pol = next((p for p in cube.polarizations if not references.theory_is_null(spec.shape, p)), None)
        if pol is not None and abs(aspect) > SPECULAR_MISS_DEG:
            warnings.append(_specular_miss_warning(spec, pol, f, aspect, "compared with"))


def _fit_band(f, span: float):
    """The band a delay fit uses: inside one inverse gate duration of each edge (None if that leaves nothing)."""
    try:
        return timedomain.valid_band_mask(f, span)
    except InputError:
        return None


def _angle_independent(shape: dict) -> bool:
    """A reference whose theory does not depend on the turntable angle (sphere, upright cylinder)."""
    return shape["shape"] in ANGLE_INDEPENDENT or (shape["shape"] == "cylinder"
                                                   and shape.get("orientation") == "upright")


def _specular_miss_warning(spec: TargetSpec, pol: str, f, aspect_deg: float, what: str) -> str:
    """The warning for an aspect-dependent target whose sweeps miss its specular angle."""
    try:
        peak = np.abs(references.reference_amplitude(spec.shape, f[-1:], np.array([0.0, aspect_deg]), pol)[:, 0]) ** 2
        drop = f", {10 * np.log10(peak[0] / max(peak[1], 1e-300)):.2f} dB below the specular peak at {f[-1] / 1e9:.4g} GHz"
    except InputError:  # a table that does not reach specular
        drop = ""
    return (f"{spec.name} {pol}: no sweep at its specular angle {spec.specular_deg:g} deg; the nearest is "
            f"{aspect_deg:+g} deg off it and is {what} the theory there{drop}: an error in the angle now biases "
            f"the result; measure at specular")


def _centring_warning(spec: TargetSpec, pol: str, f, centring: dict, warnings: list[str]) -> None:
    """Warn when the reference sits far enough off the turntable axis that a plain average would
    have lost more than CENTRING_WARN_DB: |J0(2 k delta)| at the top frequency."""
    from scipy.special import j0

    delta = centring["off_axis_m"]
    known = delta is not None
    if not known:
        delta = 0.5 * centring["shift_spread_m"]  # at least this far off
    loss = -20 * np.log10(max(abs(float(j0(2 * 2 * np.pi * f[-1] / C0 * delta))), 1e-30))
    if loss > CENTRING_WARN_DB:
        where = f"{1e3 * delta:.2f} mm" if known else f"at least {1e3 * delta:.2f} mm"
        warnings.append(f"{spec.name} {pol}: centring check: the reference is {where} off the turntable axis (from "
                        f"its echo delay per angle); its sweeps were aligned before averaging (a plain average would "
                        f"lose {loss:.2f} dB at {f[-1] / 1e9:.4g} GHz); recentre it for the next campaign")


def _checks(campaign: Campaign, targets: dict[str, TargetResult], valid, settings: ProcessSettings) -> list[dict]:
    """Error of each check target against its theory over the valid band (README, The processing chain, step 4).

    Errors and uncertainties in dB. Each scored point's error is judged with its own standard
    uncertainty u (:func:`metrics.power_uncertainty_db`: the floor's interference term and the
    repeatability, no type-B gate terms), expanded by k = ``settings.coverage_k``: a point fails
    when |error| - k u > tolerance (the guard band of ILAC-G8:09/2019, acceptance with the
    measurement uncertainty stated); the check passes when no scored point fails.
    """
    out = []
    f = campaign.frequency_hz[valid]
    k_cov = settings.coverage_k
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
            floor = t.floor.sel(polarization=pol).values[valid][None, :]
            rep = None if t.rep_rel_u is None else t.rep_rel_u.sel(polarization=pol).values[:, valid]
            keep = theory >= theory.max() * 10 ** (-CHECK_DYNAMIC_DB / 10)
            err = 10 * np.log10(meas / theory)
            scored = err[keep]
            u_exp = k_cov * np.broadcast_to(metrics.power_uncertainty_db(meas, floor, rep), err.shape)[keep]
            excess = np.abs(scored) - u_exp
            worst = int(np.argmax(excess))
            failed_points = int(np.sum(excess > settings.check_tolerance_db))
            mean_curve = 10 * np.log10(np.sum(np.where(keep, meas, 0), axis=0)
                                       / np.maximum(np.sum(np.where(keep, theory, 0), axis=0), 1e-300))
            max_err = float(np.max(np.abs(scored)))
            out.append({
                "target": name, "polarization": pol,
                "max_error_db": max_err,
                "rms_error_db": float(np.sqrt(np.mean(scored ** 2))),
                "mean_error_db": float(np.mean(scored)),
                "tolerance_db": settings.check_tolerance_db,
                "passed": failed_points == 0,
                "shape": spec.shape,
                "specular_deg": spec.specular_deg,
                "points": int(scored.size),
                "error_curve_db": [float(x) for x in mean_curve],
                "expanded_uncertainty_db": float(u_exp[worst]),
                "worst_error_db": float(abs(scored[worst])),
                "failed_points": failed_points,
                "coverage_k": k_cov,
                "decision_rule": f"fails when |error| - k u > tolerance at any scored point (k = {k_cov:g})",
            })
    return out


def _cloak_metrics(targets, f, valid, band_mask, min_span, settings: ProcessSettings, checks, warnings):
    """Metric rows, per-point reductions and, per row, the context its uncertainty budget needs."""
    rows, reductions, contexts = [], {}, []
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
            mo = metrics.assess_mounting_offset(s_angles, pat_b, pat_s)
            offset, corr, reliable = mo.offset_deg, mo.correlation, mo.offset_deg is not None
            s_use = s_sig
            aligned = settings.align_angles and reliable and offset != 0.0
            if settings.align_angles and not reliable:
                warnings.append(f"{name} {pol}: --align-angles did nothing: no reliable mounting offset against "
                                f"{t.baseline} ({mo.reason})")
            elif settings.align_angles and not aligned:
                warnings.append(f"{name} {pol}: --align-angles did nothing: the mounting offset against "
                                f"{t.baseline} is 0 deg")
            if aligned:
                s_use = metrics.resample_angles(s_angles, s_sig, np.asarray(s_angles) + offset)
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
            sector_info = metrics.describe_sector(s_angles, settings.sector_deg)
            mismatch = None
            if abs(t.gate["span_m"] - base.gate["span_m"]) > 1e-9 or t.gate.get("window") != base.gate.get("window"):
                mismatch = (f"{name} and its baseline {t.baseline} were gated differently (span "
                            f"{t.gate['span_m']:g} m against {base.gate['span_m']:g} m"
                            + (f", window {t.gate.get('window')} against {base.gate.get('window')}"
                               if t.gate.get("window") != base.gate.get("window") else "")
                            + "): the reduction mixes two gate responses")
                if mismatch not in warnings:
                    warnings.append(mismatch)
            fb = f[band_mask]
            cr = metrics.corrected_reduction(b_sig[sel], b_floor[0, band_mask], s_use[sel], s_floor[0, band_mask], fb,
                                             cell_hz, settings.coverage_k)
            band_red, curve = cr["band_db"], cr["curve_db"]
            bw = metrics.bandwidth_above(fb, curve, settings.threshold_db)
            iw = int(np.argmin(cr["angle_db"]))
            worst_a, worst_r = float(s_angles[sec][iw]), float(cr["angle_db"][iw])
            check_err = [c["max_error_db"] for c in checks if c["polarization"] == pol]
            contexts.append(uncertainty.RowContext(
                subject=name, baseline=t.baseline, pol=pol,
                ip_s=[str(p) for p in t.amplitude.polarization.values].index(pol),
                ip_b=[str(p) for p in base.amplitude.polarization.values].index(pol),
                idx=np.asarray(idx), sector=sec, band=band_mask, floor_s=s_floor[0], floor_b=b_floor[0],
                margin_db=margin, angles=np.asarray(s_angles, float), offset_deg=offset if aligned else None,
                frequency_hz=f, cell_hz=cell_hz, k=settings.coverage_k, nominal=cr))
            rows.append({
                "subject": name, "baseline": t.baseline, "revision": t.revision, "polarization": pol,
                "band_reduction_db": band_red,
                "band_reduction_uncertainty_db": None,  # the budget's expanded value (_uncertainty_budgets)
                "best_reduction_db": bw.best_db, "best_frequency_hz": bw.best_hz,
                "bandwidth_hz": bw.width_hz, "bandwidth_start_hz": bw.start_hz, "bandwidth_stop_hz": bw.stop_hz,
                "bandwidth_truncated": bw.truncated, "fractional_bandwidth": bw.fractional,
                "worst_angle_deg": worst_a, "worst_angle_reduction_db": worst_r,
                "bound": cr["band_bound"],
                "sector_curve_bound": [str(x) for x in cr["curve_bound"]],
                "floor_limited_points": int(np.sum(s_lim[sel] | b_lim[sel])),
                "points": int(s_lim[sel].size),
                "mounting_offset_deg": offset,
                "mounting_offset_correlation": corr,
                "mounting_offset_reliable": bool(reliable),
                "mounting_offset_note": mo.reason,
                "angles_aligned": bool(aligned),
                "check_error_db": max(check_err) if check_err else None,
                "band_hz": [float(fb[0]), float(fb[-1])],
                "sector_deg": list(settings.sector_deg) if settings.sector_deg else None,
                "sector_angles": sector_info["count"],
                "sector_range_deg": [sector_info["first_deg"], sector_info["last_deg"]],
                "sector_crosses_180": sector_info["crosses_180"],
                "sector_contents": sector_info["text"],
                "sector_reduction_db": metrics.sector_statistics(red[sel], settings.percentiles),
                "sector_rcs_dbsm": metrics.sector_statistics(10 * np.log10(s_use[sel]), settings.percentiles),
                "sector_baseline_rcs_dbsm": metrics.sector_statistics(10 * np.log10(b_sig[sel]),
                                                                      settings.percentiles),
                "gate_mismatch": mismatch,
                "sector_curve_db": [float(x) for x in curve],
                "sector_curve_frequency_hz": [float(x) for x in fb],
            })
    return rows, reductions, contexts

