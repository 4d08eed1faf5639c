"""Interchange: a processing run's calibrated results as NetCDF, CSV, Touchstone or scikit-rf objects.

Conventions (README, "Exporting results")
-----------------------------------------
* The calibrated complex scattering amplitude ``A`` is in metres, ``sigma = |A|^2`` in m^2,
  referred to the target's centre, engineering time factor ``exp(+j w t)`` (an echo at range
  ``r`` carries ``exp(-j 2 k r)``).
* Touchstone and scikit-rf export it as a one-port S11 = A / (1 m), dimensionless, one network
  per target, polarization and angle, over the valid band; ``|S11|^2`` is sigma in m^2. It is
  not a circuit: the 50 ohm reference in the file is nominal.
* NetCDF follows the CF conventions (CF-1.8) for what they cover: ``units`` (UDUNITS spellings,
  "m", "m2", "Hz", "degree", "1"), ``long_name``, flags with ``flag_values`` / ``flag_meanings``.
  NetCDF 3 has no complex type: A is written as ``amplitude_real`` and ``amplitude_imag``.
  dB quantities carry ``units = "dB"`` and their reference (1 m^2 for dBsm) in ``comment``.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .errors import InputError
from .process import BOUND_ORDER, ProcessingResult

__all__ = ["result_dataset", "write_netcdf", "write_touchstone_files", "write_csv_files", "network_set",
           "export_run", "FORMATS"]

FORMATS = ("netcdf", "csv", "touchstone")
CONVENTION = ("S11 = A / (1 m): the calibrated complex scattering amplitude A of the target, normalised "
              "to 1 m, so |S11|^2 is the RCS sigma in m^2; referred to the target's centre; engineering "
              "time factor exp(+j w t). Not a circuit: the 50 ohm reference is nominal.")


def _union_angles(targets) -> np.ndarray:
    return np.unique(np.concatenate([t.amplitude.angle.values for t in targets]))


def result_dataset(result: ProcessingResult) -> xr.Dataset:
    """The calibrated cubes, floor, uncertainty and metrics of a run as one CF-style Dataset.

    Parameters
    ----------
    result : ProcessingResult
        A run, from :func:`cloakrcs.process_campaign` or the results store.

    Returns
    -------
    xarray.Dataset
        Dimensions ``target``, ``polarization``, ``angle`` (degree, as measured; the union of
        every target's angles, NaN where a target has none), ``frequency`` (Hz, the full swept
        band; ``valid_band`` flags where results are valid), ``subject`` (targets with a
        baseline). Variables: ``amplitude_real`` / ``amplitude_imag`` (m), ``sigma`` (m2),
        ``rcs_dbsm`` (dB re 1 m2), ``floor`` (m2), ``repeatability_u`` (relative standard
        uncertainty of sigma from repeated sweeps, 1), ``reduction_db``, ``reduction_bound``,
        ``band_reduction_db`` and ``band_reduction_uncertainty_db`` (expanded, k in its
        ``coverage_factor``). CF-1.8 global and variable attributes.
    """
    targets = list(result.targets.values())
    if not targets:
        raise InputError("the run holds no calibrated target to export")
    f = np.asarray(result.frequency_hz, dtype=float)
    pols = [p for p in ("HH", "VV", "HV", "VH") if any(p in t.amplitude.polarization.values for t in targets)]
    angles = _union_angles(targets)
    shape = (len(targets), len(pols), len(angles), len(f))
    amp = np.full(shape, np.nan + 0j)
    rep = np.full(shape, np.nan)
    floor = np.full((len(targets), len(pols), len(f)), np.nan)
    for it, t in enumerate(targets):
        a = t.amplitude.reindex(polarization=pols, angle=angles)
        amp[it] = a.values
        floor[it] = t.floor.reindex(polarization=pols).values
        if t.rep_rel_u is not None:
            rep[it] = t.rep_rel_u.reindex(polarization=pols, angle=angles).values
    sigma = np.abs(amp) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        rcs_db = 10 * np.log10(sigma)
    dims4 = ("target", "polarization", "angle", "frequency")
    ds = xr.Dataset(
        {
            "amplitude_real": (dims4, amp.real, {
                "units": "m", "long_name": "calibrated complex scattering amplitude A, real part",
                "comment": "A referred to the target's centre; sigma = |A|^2; time factor exp(+j w t)"}),
            "amplitude_imag": (dims4, amp.imag, {
                "units": "m", "long_name": "calibrated complex scattering amplitude A, imaginary part"}),
            "sigma": (dims4, sigma, {"units": "m2", "long_name": "radar cross section"}),
            "rcs_dbsm": (dims4, rcs_db, {"units": "dB", "long_name": "radar cross section in dBsm",
                                         "comment": "10 log10(sigma / 1 m2)"}),
            "floor": (("target", "polarization", "frequency"), floor, {
                "units": "m2", "long_name": "measurement floor (clutter and noise) referred to the target",
                "comment": "README, The processing chain, step 5"}),
            "repeatability_u": (dims4, rep, {
                "units": "1", "long_name": "relative standard uncertainty of sigma from repeated sweeps",
                "comment": "NaN where the target was swept once"}),
            "valid_band": (("frequency",), result.valid_mask.astype(np.int8), {
                "long_name": "frequency inside the valid band (after the band-edge trim)",
                "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "outside inside"}),
            "reporting_band": (("frequency",), result.band_mask.astype(np.int8), {
                "long_name": "frequency inside the reporting band of the metrics",
                "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "outside inside"}),
        },
        coords={
            "target": ("target", [t.name for t in targets], {"long_name": "target name"}),
            "role": ("target", [t.role for t in targets], {"long_name": "target role"}),
            "polarization": ("polarization", pols, {"long_name": "polarization, transmit letter first"}),
            "angle": ("angle", angles, {"units": "degree", "long_name": "turntable angle as measured"}),
            "frequency": ("frequency", f, {"units": "Hz", "long_name": "frequency", "standard_name": "frequency"}),
        },
    )
    ds = ds.merge(_reduction_variables(result, pols, angles, f))
    ds.attrs = {
        "Conventions": "CF-1.8",
        "title": f"cloakrcs calibrated RCS: campaign {result.campaign}",
        "source": f"cloakrcs {result.settings.get('software_version', __version__)}",
        "history": f"exported by cloakrcs {__version__}",
        "campaign": result.campaign, "prototype": result.prototype, "date": result.date or "",
        "time_factor": "exp(+j omega t): an echo at range r carries exp(-j 2 k r)",
        "references": "README, The processing chain and Outputs of cloakrcs process",
        "settings_json": json.dumps(_plain(result.settings), sort_keys=True),
        "warnings": "\n".join(result.warnings),
    }
    return ds


def _reduction_variables(result: ProcessingResult, pols, angles, f) -> xr.Dataset:
    subjects = [name for name, t in result.targets.items() if t.role == "subject" and t.baseline]
    if not subjects:
        return xr.Dataset()
    red = np.full((len(subjects), len(pols), len(angles), len(f)), np.nan)
    bound = np.full(red.shape, -1, dtype=np.int8)
    valid_idx = np.flatnonzero(result.valid_mask)
    for (subject, pol), r in result.reductions.items():
        i, j = subjects.index(subject), pols.index(pol)
        ia = np.searchsorted(angles, r.angle.values)
        ifr = valid_idx[np.searchsorted(f[valid_idx], r.frequency.values)]
        red[i, j][np.ix_(ia, ifr)] = r["reduction_db"].values
        codes = np.searchsorted(BOUND_ORDER, np.asarray(r["bound"].values, dtype=str))
        bound[i, j][np.ix_(ia, ifr)] = codes
    band = np.full((len(subjects), len(pols)), np.nan)
    unc = np.full(band.shape, np.nan)
    baseline = [result.targets[s].baseline for s in subjects]
    for m in result.metrics:
        if m["subject"] in subjects and m["polarization"] in pols:
            i, j = subjects.index(m["subject"]), pols.index(m["polarization"])
            band[i, j] = np.nan if m["band_reduction_db"] is None else m["band_reduction_db"]
            unc[i, j] = np.nan if m["band_reduction_uncertainty_db"] is None else m["band_reduction_uncertainty_db"]
    dims = ("subject", "polarization", "angle", "frequency")
    k = result.settings.get("coverage_k", result.settings.get("process_settings", {}).get("coverage_k", 2.0))
    return xr.Dataset(
        {
            "reduction_db": (dims, red, {
                "units": "dB", "long_name": "RCS reduction of the subject against its baseline",
                "comment": "10 log10(sigma_baseline / sigma_subject), floor-limited sigma replaced by its 95 % upper limit"}),
            "reduction_bound": (dims, bound, {
                "long_name": "what the floor makes of the reduction (-1: no such angle or frequency)",
                "flag_values": np.arange(len(BOUND_ORDER), dtype=np.int8), "flag_meanings": " ".join(BOUND_ORDER)}),
            "band_reduction_db": (("subject", "polarization"), band, {
                "units": "dB", "long_name": "band-averaged reduction over the reporting band and sector"}),
            "band_reduction_uncertainty_db": (("subject", "polarization"), unc, {
                "units": "dB", "long_name": "expanded uncertainty of the band-averaged reduction",
                "coverage_factor": float(k), "comment": "GUM (JCGM 100:2008); README, The processing chain, step 7"}),
        },
        coords={"subject": ("subject", subjects, {"long_name": "subject name"}),
                "baseline": ("subject", baseline, {"long_name": "baseline of each subject"})},
    )


def _plain(obj):
    from .outputs import json_ready

    return json_ready(obj)


# --------------------------------------------------------------------------- writers


def write_netcdf(result: ProcessingResult, path) -> Path:
    """Write :func:`result_dataset` as a NetCDF 3 file (scipy's writer, 64-bit offsets), atomically.

    Parameters
    ----------
    result : ProcessingResult
    path : str or os.PathLike
        The ``.nc`` file to write; replaced when it exists.

    Returns
    -------
    pathlib.Path
    """
    from .outputs import atomic_write

    path = Path(path)
    data = result_dataset(result).to_netcdf(engine="scipy", format="NETCDF3_64BIT")  # bytes
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(path, lambda fh: fh.write(data), binary=True)
    except OSError as exc:
        raise InputError(f"cannot write {path.name}: {exc.strerror or exc}", path.parent) from None
    return path


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(name)).strip("_") or "target"


def _angle_label(angle: float) -> str:
    return f"{angle:+g}".replace(".", "p")


def _valid_amplitudes(result: ProcessingResult):
    """(target, polarization, angle, amplitude over the valid band (m)) for every calibrated sweep."""
    valid = result.valid_mask
    for name, t in result.targets.items():
        for ip, pol in enumerate(t.amplitude.polarization.values):
            for ia, angle in enumerate(t.amplitude.angle.values):
                yield name, str(pol), float(angle), t.amplitude.values[ip, ia, valid]


def _staged_folder(out: Path):
    """A new temporary folder beside ``out``, moved over it by the caller when complete."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("exists and is not a folder", out)
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        return Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    except OSError as exc:
        raise InputError(f"cannot write to the output folder: {exc.strerror or exc}", out) from None


def _commit_folder(stage: Path, out: Path) -> None:
    """Move every file of ``stage`` into ``out`` (created), then remove ``stage``."""
    try:
        out.mkdir(parents=True, exist_ok=True)
        for item in sorted(stage.iterdir()):
            os.replace(item, out / item.name)
    except OSError as exc:
        raise InputError(f"cannot write to the output folder: {exc.strerror or exc}", out) from None
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def write_touchstone_files(result: ProcessingResult, out_dir) -> list[Path]:
    """One Touchstone v1 one-port file per target, polarization and angle: S11 = A / (1 m).

    Files are named ``<target>_<pol>_<angle>deg.s1p`` (angle signed, ``p`` for the decimal
    point), over the valid band, RI format, frequencies in Hz; each file's comments state the
    convention (module docstring), the campaign, the run's software version and the angle.

    Returns
    -------
    list of pathlib.Path
        The files written, in target, polarization, angle order.
    """
    from .touchstone import write_touchstone

    out = Path(out_dir)
    stage = _staged_folder(out)
    f = result.frequency_hz[result.valid_mask]
    names = []
    try:
        for name, pol, angle, values in _valid_amplitudes(result):
            file_name = f"{_safe(name)}_{pol}_{_angle_label(angle)}deg.s1p"
            comments = [f"cloakrcs {__version__}: calibrated result of campaign {result.campaign!r}".encode(
                "ascii", "replace").decode(), f"target {name!r}, polarization {pol}, angle {angle:g} deg".encode(
                "ascii", "replace").decode(), *_wrap(CONVENTION)]
            write_touchstone(stage / file_name, f, values.astype(complex), fmt="RI", unit="Hz", comments=comments,
                             digits=15)
            names.append(file_name)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    _commit_folder(stage, out)
    return [out / n for n in names]


def _wrap(text: str, width: int = 90) -> list[str]:
    lines, line = [], ""
    for word in text.split():
        if line and len(line) + 1 + len(word) > width:
            lines.append(line)
            line = word
        else:
            line = f"{line} {word}".strip()
    return lines + ([line] if line else [])


def write_csv_files(result: ProcessingResult, out_dir) -> list[Path]:
    """rcs.csv and reduction.csv (columns as ``cloakrcs process`` writes them) and metrics.csv.

    metrics.csv has one row per subject and polarization with the scalar keys of
    ``summary.json``'s ``metrics`` (the sector curve stays in summary.json / NetCDF).
    """
    import pandas as pd

    from .outputs import write_csv

    out = Path(out_dir)
    stage = _staged_folder(out)
    try:
        write_csv(stage / "rcs.csv", result.rcs_table())
        write_csv(stage / "reduction.csv", result.reduction_table())
        rows = [{k: v for k, v in m.items() if not isinstance(v, (list, dict))} for m in result.metrics]
        write_csv(stage / "metrics.csv", pd.DataFrame(rows))
    except OSError as exc:
        shutil.rmtree(stage, ignore_errors=True)
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", out) from None
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    _commit_folder(stage, out)
    return [out / n for n in ("rcs.csv", "reduction.csv", "metrics.csv")]


def network_set(result: ProcessingResult, target: str, polarization: str | None = None):
    """A target's calibrated sweeps as a scikit-rf NetworkSet of one-ports, S11 = A / (1 m).

    Parameters
    ----------
    result : ProcessingResult
    target : str
        A calibrated (non-background) target.
    polarization : str, optional
        Keep one polarization (HH, VV, HV, VH); default every one.

    Returns
    -------
    skrf.NetworkSet
        One Network per polarization and angle over the valid band, named
        ``"<target> <pol> <angle> deg"``; ``abs(net.s[:, 0, 0])**2`` is sigma in m^2.
    """
    import skrf
    from skrf.networkSet import NetworkSet

    if target not in result.targets:
        raise InputError(f"no calibrated target {target!r} in the run (targets: {', '.join(result.targets)})")
    freq = skrf.Frequency.from_f(result.frequency_hz[result.valid_mask], unit="Hz")
    nets = [skrf.Network(frequency=freq, s=values[:, None, None], name=f"{name} {pol} {angle:g} deg",
                         comments=CONVENTION)
            for name, pol, angle, values in _valid_amplitudes(result)
            if name == target and (polarization is None or pol == polarization)]
    if not nets:
        raise InputError(f"target {target!r} has no {polarization} sweeps")
    return NetworkSet(nets, name=target)


def export_run(result: ProcessingResult, fmt: str, out) -> list[Path]:
    """Write a run in one of FORMATS: ``netcdf`` (one file), ``csv`` or ``touchstone`` (a folder)."""
    if fmt == "netcdf":
        return [write_netcdf(result, out)]
    if fmt == "csv":
        return write_csv_files(result, out)
    if fmt == "touchstone":
        return write_touchstone_files(result, out)
    raise InputError(f"unknown export format {fmt!r} (expected {', '.join(FORMATS)})")
