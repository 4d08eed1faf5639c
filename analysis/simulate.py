"""Synthetic anechoic chamber: planning figures and demo/test campaigns (README, Signal model).

Each sweep is (engineering convention exp(+j w t), k = 2 pi f / c0, ranges in m)::

    S(f) = d_s G(f) [ C(f) + sum_i c_i e^{-j2k(r_i+o)} + P_s(f) + A(f, angle) e^{-j2k(R+o)} / R^2 ] + n(f)

* G(f) = 10^((gain_db + slope_db_per_ghz (f_GHz - f_mid))/20) e^{j phase} (1 + rho e^{-j 2 pi f tau}):
  system transfer with a gain slope and a cable-mismatch ripple (rho = 10^(ripple_db/20) - 1,
  tau = 1 / ripple_period; the ripple is a ghost of every echo c0 tau / 2 further down-range).
* o = chamber.offset_m, one-way electrical length from the VNA reference plane to the antenna.
* C(f) = 10^(coupling.level_db/20) e^{-j2k(coupling.range_m + o)}: direct antenna coupling.
* clutter echo i: amplitude sqrt(10^(level_dbsm/10)) / r_i^2 (equivalent dBsm at its range),
  a fixed random phase (seeded); P_s the support's echo (foam column / pylon), the same form at
  support.range_m, independent of angle, multiplied by (1 + change e^{j change_deg}) in sweeps
  with a target on it (target-support interaction: a repeated background cannot see it).
* A: the target's complex amplitude (m) from :mod:`cloakrcs.references` (canonical shapes) or
  :mod:`cloakrcs.cloak_model` (bare_cylinder, coated_cylinder); zero for "empty".
* d_s: each sweep's drift, 10^(N(0, amplitude_db)/20) e^{j N(0, phase_deg)} e^{-j2k N(0, length_m)}.
* n: complex Gaussian noise, rms |G(f)| 10^(noise.level_db/20) per point.

Two-port setups (sweep.ports = 2) carry the echo in S21 = S12, with antenna matches of about
-18 dB in S11 and S22; the bistatic angle is recorded in the manifest only (the amplitudes are
monostatic).  Seeded: the same config gives byte-identical files.

Config (TOML; every key, with its default)::

    seed = 1                                    # numpy Generator seed
    [campaign] name = "synthetic"; prototype = ""; date (optional TOML date)
    [chamber]  range_m (required); offset_m = 0; bistatic_deg = 0
    [sweep]    start_ghz, stop_ghz, points (required); ports = 1 (1 -> S11 .s1p, 2 -> S21 .s2p)
    polarizations = ["HH", "VV"]
    [angles]   start = 0, stop = 355, step = 5  (degrees, stop included; subjects' default)
    [system]   gain_db = -25; slope_db_per_ghz = 0; ripple_db = 0; ripple_period_ghz = 0.25; phase_deg = 0
    [coupling] level_db = -inf (re |G|; -inf = off); range_m = 0.05
    [[clutter]] range_m, level_dbsm            (any number of chamber echoes)
    [support]  level_dbsm = -inf (off); range_m = chamber.range_m; change = 0; change_deg = 0
    [noise]    level_db = -inf (re |G|, rms per point; off)
    [drift]    amplitude_db = 0; phase_deg = 0; length_m = 0    (rms per sweep)
    [gate], [band]                              copied into the manifest as they are
    [output]   digits = 7; version = "1.0"; truth = true
    [[target]] name, role (background | reference | subject), model (empty | sphere | plate |
               disk | cylinder | dihedral | trihedral | bare_cylinder | coated_cylinder | points),
               repeats = 1, angles = {start, stop, step} or [list] or angle_deg = single angle
               (default: subjects the global [angles], others 0), range_m = chamber.range_m,
               files (pattern; default raw/<name>_{pol}[_{angle}][_{repeat}].s1p), background,
               baseline, revision, size_m, gate_span_m, calibrates, notes; shape keys of the
               model (radius_m, width_m, height_m, length_m, orientation, fold_m, face_m,
               roll_deg, edge_m, kind) for canonical shapes; for cylinders radius_m, length_m,
               thickness_m, eps_r, mu_r ([re, im], im <= 0 for loss), seam = {azimuth_deg,
               width_m}, bolt = {azimuth_deg, radius_m}, mount_deg (see cloakrcs.cloak_model);
               scatterers = [{x_m, y_m, rcs_dbsm, phase_deg}] (isotropic points on the turntable,
               cloakrcs.scatterers) for model points, or added to a cylinder model.

A target whose model is a canonical shape gets ``shape`` and its keys in the manifest: as a
subject it is a check target.  Files: angles written as ``%05.1f`` (000.0, 005.0, -30.0),
repeats 1..n.  ``truth/`` holds the noise-free calibrated RCS of every subject
(rcs.csv), the reduction of each subject that has a baseline (reduction.csv) and the
band-averaged reductions (metrics.json, README, The processing chain, step 6).
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import cloak_model
from .constants import C0
from .errors import InputError
from .manifest import SHAPE_KEYS

ROLES = ("background", "reference", "subject")
SHAPE_MODELS = ("sphere", "plate", "disk", "cylinder", "dihedral", "trihedral")
CYLINDER_MODELS = ("bare_cylinder", "coated_cylinder")
MODELS = ("empty",) + SHAPE_MODELS + CYLINDER_MODELS + ("points",)
POLARIZATIONS = ("HH", "VV", "HV", "VH")
SECTIONS = {
    "campaign": {"name": "synthetic", "prototype": "", "date": None},
    "chamber": {"range_m": None, "offset_m": 0.0, "bistatic_deg": 0.0},
    "sweep": {"start_ghz": None, "stop_ghz": None, "points": None, "ports": 1},
    "angles": {"start": 0.0, "stop": 355.0, "step": 5.0},
    "system": {"gain_db": -25.0, "slope_db_per_ghz": 0.0, "ripple_db": 0.0, "ripple_period_ghz": 0.25,
               "phase_deg": 0.0},
    "coupling": {"level_db": -math.inf, "range_m": 0.05},
    "support": {"level_dbsm": -math.inf, "range_m": None, "change": 0.0, "change_deg": 0.0},
    "noise": {"level_db": -math.inf},
    "drift": {"amplitude_db": 0.0, "phase_deg": 0.0, "length_m": 0.0},
    "output": {"digits": 7, "version": "1.0", "truth": True},
}
PASSTHROUGH = ("gate", "band")  # copied into the manifest
TOP_KEYS = {"seed", "polarizations", "clutter", "target", "arm"} | set(SECTIONS) | set(PASSTHROUGH)
_GENERAL_TARGET_KEYS = {"name", "role", "model", "repeats", "angles", "angle_deg", "range_m", "files", "background",
                        "baseline", "revision", "size_m", "gate_span_m", "calibrates", "notes", "arm", "bistatic"}
TARGET_KEYS = _GENERAL_TARGET_KEYS | cloak_model.BARE_KEYS | cloak_model.COATED_KEYS | {"scatterers"} | {
    k for keys in SHAPE_KEYS.values() for k in keys}
CYLINDER_KEYS = {"bare_cylinder": cloak_model.BARE_KEYS | {"scatterers"},
                 "coated_cylinder": cloak_model.COATED_KEYS | {"scatterers"},
                 "points": {"scatterers", "mount_deg"}}  # scatterers: cloakrcs.scatterers
_NORMALISED = "_normalised"


# ============================================================================ config
def _num(value, where: str, path, positive=False, nonneg=False, integer=False, off_ok=False) -> float:
    if off_ok and isinstance(value, float) and value == -math.inf:
        return value  # a level of -inf turns the term off
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"{where} must be a finite number, got {value!r}", path)
    if integer and int(value) != value:
        raise InputError(f"{where} must be an integer, got {value!r}", path)
    if positive and value <= 0:
        raise InputError(f"{where} must be positive, got {value!r}", path)
    if nonneg and value < 0:
        raise InputError(f"{where} must not be negative, got {value!r}", path)
    return int(value) if integer else float(value)


def _angle_list(spec, where: str, path) -> list[float]:
    """Angles from {start, stop, step} (stop included) or a list of numbers (degrees)."""
    if isinstance(spec, dict):
        unknown = sorted(set(spec) - {"start", "stop", "step"})
        if unknown:
            raise InputError(f"{where}: unknown key '{unknown[0]}' (known: start, stop, step)", path)
        start = _num(spec.get("start", 0.0), f"{where}.start", path)
        stop = _num(spec.get("stop", start), f"{where}.stop", path)
        step = _num(spec.get("step", 1.0), f"{where}.step", path, positive=True)
        if stop < start:
            raise InputError(f"{where}: stop {stop:g} is below start {start:g}", path)
        n = int(math.floor((stop - start) / step + 1e-9)) + 1
        return [round(start + i * step, 9) for i in range(n)]
    if isinstance(spec, list) and spec:
        vals = [_num(v, f"{where}[{i}]", path) for i, v in enumerate(spec)]
        if len(set(vals)) != len(vals):
            raise InputError(f"{where}: repeated angle", path)
        return vals
    raise InputError(f"{where} must be a table {{start, stop, step}} or a non-empty list of degrees", path)


def _file_stem(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9.-]+", "-", name).strip("-") or "target"


def _normalise_target(t, i: int, cfg: dict, path) -> dict:
    label = f"target {t.get('name', '#' + str(i + 1))!s}" if isinstance(t, dict) else f"target #{i + 1}"
    if not isinstance(t, dict):
        raise InputError(f"{label} must be a table ([[target]])", path)
    unknown = sorted(set(t) - TARGET_KEYS)
    if unknown:
        raise InputError(f"{label}: unknown key '{unknown[0]}'", path)
    out = dict(t)
    for key in ("name", "role"):
        if not isinstance(t.get(key), str) or not t[key]:
            raise InputError(f"{label}: '{key}' (a string) is required", path)
    if t["role"] not in ROLES:
        raise InputError(f"{label}: role {t['role']!r} is not one of {', '.join(ROLES)}", path)
    model = t.get("model", "empty" if t["role"] == "background" else None)
    if model not in MODELS:
        raise InputError(f"{label}: model {model!r} is not one of {', '.join(MODELS)}", path)
    if (t["role"] == "background") != (model == "empty"):
        raise InputError(f"{label}: a background has model 'empty' and only a background has it", path)
    if t["role"] == "reference" and model not in SHAPE_MODELS:
        raise InputError(f"{label}: a reference needs a canonical shape model ({', '.join(SHAPE_MODELS)})", path)
    out["model"] = model
    allowed_params = set(SHAPE_KEYS.get(model, ())) | CYLINDER_KEYS.get(model, set())
    params = {k: t[k] for k in t if k not in _GENERAL_TARGET_KEYS}
    stray = sorted(set(params) - allowed_params)
    if stray:
        raise InputError(f"{label}: key '{stray[0]}' does not belong to model {model!r}", path)
    out["params"] = params
    if model in SHAPE_MODELS:
        from . import references
        for key in references.required_keys(model):
            if key not in params:
                raise InputError(f"{label}: model {model!r} needs the key '{key}'", path)
        defaults = {"orientation": "upright", "roll_deg": 0.0, "kind": "triangular"}
        for key in SHAPE_KEYS[model]:
            params.setdefault(key, defaults.get(key))
    out["repeats"] = _num(t.get("repeats", 1), f"{label}: repeats", path, positive=True, integer=True)
    if "angles" in t and "angle_deg" in t:
        raise InputError(f"{label}: give 'angles' or 'angle_deg', not both", path)
    if "angles" in t:
        out["angles"] = _angle_list(t["angles"], f"{label}: angles", path)
    elif "angle_deg" in t:
        out["angles"] = [_num(t["angle_deg"], f"{label}: angle_deg", path)]
    else:
        out["angles"] = list(cfg["angles"]) if t["role"] == "subject" else [0.0]
    out["range_m"] = _num(t.get("range_m", cfg["chamber"]["range_m"]), f"{label}: range_m", path, positive=True)
    if "arm" in t and not isinstance(t["arm"], bool):
        raise InputError(f"{label}: 'arm' must be true or false", path)
    out["arm"] = bool(t.get("arm", False))
    if out["arm"]:
        from . import simulate_arm
        if model not in simulate_arm.ARM_MODELS:
            raise InputError(f"{label}: an arm target's model must be one of {', '.join(simulate_arm.ARM_MODELS)}", path)
        out["bistatic"] = (simulate_arm.bistatic_list(t["bistatic"], f"{label}: bistatic", path, _angle_list)
                           if "bistatic" in t else list(cfg["arm"]["bistatic"]))
        if "angles" not in t and "angle_deg" not in t:
            out["angles"] = [0.0]
    elif "bistatic" in t:
        raise InputError(f"{label}: 'bistatic' belongs to arm targets (arm = true)", path)
    for key in ("size_m", "gate_span_m"):
        if key in t:
            out[key] = _num(t[key], f"{label}: {key}", path, positive=True)
    for key in ("background", "baseline", "revision", "notes", "files"):
        if key in t and not isinstance(t[key], str):
            raise InputError(f"{label}: '{key}' must be a string", path)
    if "calibrates" in t:
        if not isinstance(t["calibrates"], list) or not all(isinstance(p, str) and p.upper() in POLARIZATIONS
                                                            for p in t["calibrates"]):
            raise InputError(f"{label}: 'calibrates' must be a list of HH, VV, HV, VH", path)
    if "files" not in t:
        ext = ".s1p" if cfg["sweep"]["ports"] == 1 and not out["arm"] else ".s2p"
        parts = [f"raw/{_file_stem(t['name'])}", "_{pol}"] + (["_b{bistatic}"] if out["arm"] else [])
        if len(out["angles"]) > 1:
            parts.append("_{angle}")
        if out["repeats"] > 1:
            parts.append("_{repeat}")
        out["files"] = "".join(parts) + ext
    fields = set(re.findall(r"\{([a-z]+)\}", out["files"]))
    if fields - {"pol", "angle", "repeat", "bistatic"} or ("bistatic" in fields and not out["arm"]):
        raise InputError(f"{label}: unknown field in files pattern {out['files']!r}", path)
    if out["arm"] and len(out["bistatic"]) > 1 and "bistatic" not in fields:
        raise InputError(f"{label}: files pattern {out['files']!r} lacks the {{bistatic}} field", path)
    if len(out["angles"]) > 1 and "angle" not in fields or out["repeats"] > 1 and "repeat" not in fields \
            or len(cfg["polarizations"]) > 1 and "pol" not in fields:
        raise InputError(f"{label}: files pattern {out['files']!r} lacks a field that tells sweeps apart", path)
    # evaluate the model once on a tiny grid: bad parameters fail here, naming the file
    try:
        if out["arm"]:
            from . import simulate_arm
            simulate_arm.arm_amplitude(out, np.array([cfg["sweep"]["start_ghz"] * 1e9]), out["bistatic"][:1], "VV")
        model_amplitude(out, np.array([cfg["sweep"]["start_ghz"] * 1e9]), np.array(out["angles"][:1]), "VV")
    except InputError as exc:
        raise InputError(f"{label}: {exc.message}", path) from None
    return out


def normalise_config(raw: dict, path=None) -> dict:
    """Check every key of a simulator config (dict as read from TOML) and fill the defaults.

    Returns a new dict; InputError (naming ``path``) for an unknown key or a bad value.
    Idempotent: a normalised config passes through unchanged.
    """
    if not isinstance(raw, dict):
        raise InputError("simulator config must be a table", path)
    if raw.get(_NORMALISED):
        return raw
    unknown = sorted(set(raw) - TOP_KEYS)
    if unknown:
        raise InputError(f"unknown key '{unknown[0]}' (known: {', '.join(sorted(TOP_KEYS))})", path)
    cfg: dict = {"seed": _num(raw.get("seed", 1), "seed", path, nonneg=True, integer=True)}
    for sect, defaults in SECTIONS.items():
        given = raw.get(sect, {})
        if not isinstance(given, dict):
            raise InputError(f"[{sect}] must be a table", path)
        bad = sorted(set(given) - set(defaults))
        if bad:
            raise InputError(f"[{sect}]: unknown key '{bad[0]}' (known: {', '.join(defaults)})", path)
        cfg[sect] = {**defaults, **given}
    for sect, key in (("chamber", "range_m"), ("sweep", "start_ghz"), ("sweep", "stop_ghz"), ("sweep", "points")):
        if cfg[sect][key] is None:
            raise InputError(f"[{sect}]: '{key}' is required", path)
    for sect, defaults in SECTIONS.items():
        for key, value in cfg[sect].items():
            if key in ("name", "prototype", "version") and not isinstance(value, str):
                raise InputError(f"[{sect}]: '{key}' must be a string", path)
            if key == "date" and value is not None and not isinstance(value, _dt.date):
                raise InputError(f"[{sect}]: 'date' must be a TOML date such as 2026-11-20", path)
            if key == "truth" and not isinstance(value, bool):
                raise InputError(f"[{sect}]: 'truth' must be true or false", path)
            if isinstance(defaults.get(key), float) or key in ("range_m", "start_ghz", "stop_ghz"):
                if value is not None:
                    cfg[sect][key] = _num(value, f"[{sect}] {key}", path, off_ok=key.startswith("level_"))
    ch, sw = cfg["chamber"], cfg["sweep"]
    _num(ch["range_m"], "[chamber] range_m", path, positive=True)
    _num(ch["offset_m"], "[chamber] offset_m", path, nonneg=True)
    _num(sw["start_ghz"], "[sweep] start_ghz", path, positive=True)
    sw["points"] = _num(sw["points"], "[sweep] points", path, integer=True)
    sw["ports"] = _num(sw["ports"], "[sweep] ports", path, integer=True)
    if sw["points"] < 2 or sw["stop_ghz"] <= sw["start_ghz"]:
        raise InputError("[sweep]: need points >= 2 and stop_ghz > start_ghz", path)
    if sw["ports"] not in (1, 2):
        raise InputError(f"[sweep]: ports must be 1 or 2, got {sw['ports']}", path)
    cfg["output"]["digits"] = _num(cfg["output"]["digits"], "[output] digits", path, integer=True)
    if cfg["output"]["version"] not in ("1.0", "2.0", "2.1"):
        raise InputError("[output]: version must be 1.0, 2.0 or 2.1", path)
    for key in ("ripple_period_ghz",):
        _num(cfg["system"][key], f"[system] {key}", path, positive=True)
    for key in ("amplitude_db", "phase_deg", "length_m"):
        _num(cfg["drift"][key], f"[drift] {key}", path, nonneg=True)
    _num(cfg["coupling"]["range_m"], "[coupling] range_m", path, nonneg=True)
    _num(cfg["support"]["change"], "[support] change", path, nonneg=True)
    if cfg["support"]["range_m"] is None:
        cfg["support"]["range_m"] = ch["range_m"]
    _num(cfg["support"]["range_m"], "[support] range_m", path, positive=True)
    pols = raw.get("polarizations", ["HH", "VV"])
    if not isinstance(pols, list) or not pols or not all(isinstance(p, str) and p.upper() in POLARIZATIONS for p in pols):
        raise InputError("polarizations must be a non-empty list of HH, VV, HV, VH", path)
    cfg["polarizations"] = list(dict.fromkeys(p.upper() for p in pols))
    cfg["angles"] = _angle_list(cfg["angles"], "[angles]", path)
    if "arm" in raw:
        from . import simulate_arm
        cfg["arm"] = simulate_arm.normalise_arm(raw["arm"], path, _angle_list)
    else:
        cfg["arm"] = None
    clutter = raw.get("clutter", [])
    if not isinstance(clutter, list):
        raise InputError("clutter must be an array of tables [[clutter]] with range_m, level_dbsm", path)
    cfg["clutter"] = []
    for i, c in enumerate(clutter):
        if not isinstance(c, dict) or set(c) != {"range_m", "level_dbsm"}:
            raise InputError(f"clutter #{i + 1} needs exactly the keys range_m and level_dbsm", path)
        cfg["clutter"].append({"range_m": _num(c["range_m"], f"clutter #{i + 1} range_m", path, positive=True),
                               "level_dbsm": _num(c["level_dbsm"], f"clutter #{i + 1} level_dbsm", path, off_ok=True)})
    for sect in PASSTHROUGH:
        if sect in raw and not isinstance(raw[sect], dict):
            raise InputError(f"[{sect}] must be a table", path)
        cfg[sect] = dict(raw.get(sect, {}))
    targets = raw.get("target", [])
    if not isinstance(targets, list) or not targets:
        raise InputError("no [[target]] defined", path)
    cfg["target"] = [_normalise_target(t, i, cfg, path) for i, t in enumerate(targets)]
    names = [t["name"] for t in cfg["target"]]
    if len(set(names)) != len(names):
        raise InputError("duplicate target name", path)
    by_name = {t["name"]: t for t in cfg["target"]}
    backgrounds = [t["name"] for t in cfg["target"] if t["role"] == "background" and not t["arm"]]
    arm_backgrounds = [t["name"] for t in cfg["target"] if t["role"] == "background" and t["arm"]]
    if not backgrounds:
        raise InputError("no background target (role = \"background\")", path)
    if any(t["arm"] for t in cfg["target"]) and not arm_backgrounds:
        raise InputError("arm targets need an arm background (role = \"background\", arm = true)", path)
    for t in cfg["target"]:
        if t["role"] != "background":
            t.setdefault("background", (arm_backgrounds if t["arm"] else backgrounds)[0])
            if by_name.get(t["background"], {}).get("arm", False) != t["arm"]:
                raise InputError(f"target {t['name']}: background {t['background']!r} is not on the same "
                                 f"{'receiver arm' if t['arm'] else 'monostatic antenna'}", path)
            if by_name.get(t["background"], {}).get("role") != "background":
                raise InputError(f"target {t['name']}: background {t['background']!r} is not a background target", path)
        if "baseline" in t and by_name.get(t["baseline"], {}).get("role") != "subject":
            raise InputError(f"target {t['name']}: baseline {t['baseline']!r} is not a subject", path)
    cfg[_NORMALISED] = True
    return cfg


def load_simulation_config(path) -> dict:
    """Read and check a simulator config (TOML); InputError naming the file for any bad key."""
    p = Path(path)
    try:
        raw = tomllib.loads(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read the simulator config: {exc.strerror or exc}", p) from None
    except UnicodeDecodeError:
        raise InputError("simulator config is not UTF-8 text", p) from None
    except tomllib.TOMLDecodeError as exc:
        line = getattr(exc, "lineno", None)
        raise InputError(f"not valid TOML: {exc}", p, line) from None
    return normalise_config(raw, p)


# ============================================================================ physics
def frequency_grid_hz(cfg: dict) -> np.ndarray:
    """The sweep's uniform frequency grid (Hz)."""
    sw = cfg["sweep"]
    return np.linspace(sw["start_ghz"] * 1e9, sw["stop_ghz"] * 1e9, sw["points"])


def model_amplitude(target: dict, frequency_hz, angle_deg, polarization) -> np.ndarray:
    """A target's complex amplitude (na, nf) in m (zero for the empty chamber)."""
    f = np.atleast_1d(np.asarray(frequency_hz, float))
    t = np.atleast_1d(np.asarray(angle_deg, float))
    model, params = target["model"], target.get("params", {})
    if model == "empty":
        return np.zeros((t.size, f.size), complex)
    if model in CYLINDER_KEYS:  # point scatterers, alone or added to a cylinder
        from . import scatterers

        points = params.get("scatterers")
        amp = np.zeros((t.size, f.size), complex) if points is None else scatterers.points_amplitude(
            scatterers.parse_points(points), f, t, polarization, float(params.get("mount_deg", 0.0)))
        if model == "points" and points is None:
            raise InputError("model 'points' needs the key 'scatterers'")
        body = {k: v for k, v in params.items() if k != "scatterers"}
        if model == "bare_cylinder":
            amp = amp + cloak_model.bare_cylinder_amplitude(body, f, t, polarization)
        elif model == "coated_cylinder":
            amp = amp + cloak_model.coated_cylinder_amplitude(body, f, t, polarization)
        return amp
    from . import references
    return references.reference_amplitude({"shape": model, **params}, f, t, polarization)


def target_size_m(target: dict) -> float | None:
    """size_m if given, else the model's largest dimension (m)."""
    if "size_m" in target:
        return target["size_m"]
    model, p = target["model"], target.get("params", {})
    if model in CYLINDER_MODELS:
        return cloak_model.outer_size_m(model, p)
    if model == "points":
        return 2 * max(math.hypot(q["x_m"], q["y_m"]) for q in p["scatterers"]) or None
    if model in ("sphere", "disk"):
        return 2 * p["radius_m"]
    if model == "plate":
        return math.hypot(p["width_m"], p["height_m"])
    if model == "cylinder":
        return max(p["length_m"], 2 * p["radius_m"])
    if model == "dihedral":
        return math.hypot(p["fold_m"], 2 * p["face_m"])
    if model == "trihedral":
        return p["edge_m"] * math.sqrt(2)
    return None


def target_extent_m(target: dict) -> float | None:
    """The larger of size_m and the model's own largest dimension (m), as the far-field check uses."""
    sizes = [s for s in (target.get("size_m"), target_size_m({k: v for k, v in target.items() if k != "size_m"}))
             if s is not None]
    return max(sizes) if sizes else None


def system_response(cfg: dict, frequency_hz) -> np.ndarray:
    """G(f): gain with slope, constant phase and a cable-mismatch ripple (complex, (nf,))."""
    s = cfg["system"]
    f = np.asarray(frequency_hz, float)
    f_mid = 0.5 * (f[0] + f[-1])
    mag = 10 ** ((s["gain_db"] + s["slope_db_per_ghz"] * (f - f_mid) / 1e9) / 20)
    rho = 10 ** (s["ripple_db"] / 20) - 1
    tau = 1.0 / (s["ripple_period_ghz"] * 1e9)
    return mag * np.exp(1j * np.deg2rad(s["phase_deg"])) * (1 + rho * np.exp(-2j * np.pi * f * tau))


def _echo(level_dbsm: float, range_m: float, k: np.ndarray, offset_m: float, phase: float = 0.0) -> np.ndarray:
    """An equivalent point echo: sqrt(10^(L/10)) / r^2 e^{j phase} e^{-j 2 k (r + offset)}."""
    return math.sqrt(10 ** (level_dbsm / 10)) / range_m ** 2 * np.exp(1j * phase - 2j * k * (range_m + offset_m))


def chamber_terms(cfg: dict, frequency_hz, clutter_phases) -> tuple[np.ndarray, np.ndarray]:
    """(static chamber terms C + clutter, support echo) inside the bracket, each (nf,)."""
    k = 2 * np.pi * np.asarray(frequency_hz, float) / C0
    o = cfg["chamber"]["offset_m"]
    cp = cfg["coupling"]
    static = 10 ** (cp["level_db"] / 20) * np.exp(-2j * k * (cp["range_m"] + o))
    for c, ph in zip(cfg["clutter"], clutter_phases):
        static = static + _echo(c["level_dbsm"], c["range_m"], k, o, ph)
    sp = cfg["support"]
    support = _echo(sp["level_dbsm"], sp["range_m"], k, o)
    return static, support


# ============================================================================ planning
@dataclass
class PlanRow:
    target: str
    role: str
    polarization: str
    median_rcs_dbsm: float | None
    floor_dbsm: float
    noise_floor_dbsm: float
    residual_clutter_dbsm: float
    scr_db: float | None
    far_field_m: float | None
    range_m: float


def _gate_span(cfg: dict, t: dict) -> float:
    if "gate_span_m" in t:
        return t["gate_span_m"]
    if "span_m" in cfg["gate"]:
        return float(cfg["gate"]["span_m"])
    size = target_size_m(t)
    return 2.0 * size if size else 0.6  # the manifest reader's defaults


def _db(power: float) -> float:
    return 10 * math.log10(power) if power > 0 else -math.inf


def planning_rows(cfg: dict, frequency_hz, amplitudes: dict) -> list[PlanRow]:
    """Planning figures per target and polarization (see :func:`format_planning`)."""
    f = np.asarray(frequency_hz, float)
    df = (f[-1] - f[0]) / (f.size - 1)
    unamb = C0 / (2 * df)
    k_top = 2 * np.pi * f[-1] / C0
    lam_top = C0 / f[-1]
    dr = cfg["drift"]
    drift_var = 2 * ((math.log(10) / 20 * dr["amplitude_db"]) ** 2 + math.radians(dr["phase_deg"]) ** 2
                     + (2 * k_top * dr["length_m"]) ** 2)
    sp = cfg["support"]
    sigma_support = 10 ** (sp["level_dbsm"] / 10)
    n_bg = {t["name"]: t["repeats"] * len(t["angles"]) for t in cfg["target"] if t["role"] == "background"}
    rows = []
    for t in cfg["target"]:
        if t["arm"]:
            continue  # receiver-arm targets: see cloakrcs.simulate_arm
        R = t["range_m"]
        span = _gate_span(cfg, t)
        noise_point = 10 ** (cfg["noise"]["level_db"] / 10) * R ** 4  # dBsm equivalent, one point
        nb = n_bg.get(t.get("background", t["name"]), 1)
        noise = noise_point * (1 + 1 / nb) * min(1.0, span / unamb)
        in_gate = abs(sp["range_m"] - R) <= span / 2  # the support's echo inside this target's gate
        residual = sigma_support * (sp["change"] ** 2 * (t["role"] != "background") + drift_var) if in_gate else 0.0
        floor = noise + residual
        size = target_extent_m(t)  # the far field needs the largest of size_m and the model's own size
        far = 2 * size ** 2 / lam_top if size else None
        for pol in cfg["polarizations"]:
            med = None
            if t["role"] != "background":
                sig = np.abs(amplitudes[t["name"]][pol]) ** 2
                med = float(10 * np.log10(np.median(sig))) if np.median(sig) > 0 else -math.inf
            rows.append(PlanRow(t["name"], t["role"], pol, med, _db(floor), _db(noise), _db(residual),
                                None if med is None else med - _db(floor), far, R))
    return rows


def format_planning(rows: list[PlanRow], cfg: dict, frequency_hz) -> str:
    """The planning printout: floor, signal-to-clutter ratio and far-field distance per target."""
    f = np.asarray(frequency_hz, float)
    df = (f[-1] - f[0]) / (f.size - 1)
    out = [f"sweep {f[0] / 1e9:g}-{f[-1] / 1e9:g} GHz, {f.size} points: resolution c0/(2B) "
           f"{C0 / (2 * (f[-1] - f[0])) * 100:.1f} cm, unambiguous range c0/(2 df) {C0 / (2 * df):.2f} m; "
           f"chamber range {cfg['chamber']['range_m']:g} m, offset {cfg['chamber']['offset_m']:g} m",
           "floor = gated noise (background-subtracted sweep) + residual clutter in the gate (support change, drift);",
           "SCR = median RCS over the floor; far field 2 D^2/lambda at the top frequency (common practice)",
           f"{'target':<14} {'role':<10} {'pol':<3} {'median dBsm':>11} {'floor dBsm':>10} {'SCR dB':>7} "
           f"{'2D^2/lambda':>11}  range"]
    for r in rows:
        med = "-" if r.median_rcs_dbsm is None else f"{r.median_rcs_dbsm:.1f}"
        scr = "-" if r.scr_db is None else f"{r.scr_db:.1f}"
        if r.far_field_m is None:
            far = "-"
            verdict = ""
        else:
            far = f"{r.far_field_m:.2f} m"
            verdict = "ok" if r.range_m >= r.far_field_m else "NEAR FIELD"
        out.append(f"{r.target:<14} {r.role:<10} {r.polarization:<3} {med:>11} {r.floor_dbsm:>10.1f} {scr:>7} "
                   f"{far:>11}  {r.range_m:g} m {verdict}".rstrip())
    return "\n".join(out)


# ============================================================================ output
def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(float(v)) if isinstance(v, float) else str(v)
    if isinstance(v, _dt.date):
        return v.isoformat()
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(v)


def manifest_text(cfg: dict) -> str:
    """The campaign manifest (TOML) for the simulated files (schema of cloakrcs.manifest)."""
    c = cfg["campaign"]
    lines = ["# Synthetic campaign written by `cloakrcs simulate` (invented scenario).", "", "[campaign]",
             f"name = {_toml_value(c['name'])}"]
    if c["prototype"]:
        lines.append(f"prototype = {_toml_value(c['prototype'])}")
    if c["date"] is not None:
        lines.append(f"date = {_toml_value(c['date'])}")
    ch = cfg["chamber"]
    lines += ["", "[chamber]", f"range_m = {_toml_value(ch['range_m'])}", f"offset_m = {_toml_value(ch['offset_m'])}",
              f"bistatic_deg = {_toml_value(ch['bistatic_deg'])}"]
    for sect in PASSTHROUGH:
        if cfg[sect]:
            lines += ["", f"[{sect}]"] + [f"{k} = {_toml_value(v)}" for k, v in cfg[sect].items()]
    param = "S11" if cfg["sweep"]["ports"] == 1 else "S21"
    for t in cfg["target"]:
        lines += ["", "[[target]]", f"name = {_toml_value(t['name'])}", f"role = {_toml_value(t['role'])}",
                  f"files = {_toml_value(t['files'])}", f"parameter = {_toml_value('S21' if t['arm'] else param)}"]
        if t["arm"] and (len(t["bistatic"]) == 1 or "{bistatic}" not in t["files"]):
            lines.append(f"bistatic_deg = {_toml_value(float(t['bistatic'][0]))}")
        if len(t["angles"]) == 1:
            lines.append(f"angle_deg = {_toml_value(float(t['angles'][0]))}")
        if len(cfg["polarizations"]) == 1:
            lines.append(f"polarization = {_toml_value(cfg['polarizations'][0])}")
        if t["role"] != "background":
            lines.append(f"background = {_toml_value(t['background'])}")
            lines.append(f"range_m = {_toml_value(t['range_m'])}")
        for key in ("baseline", "revision", "size_m", "gate_span_m", "notes"):
            if key in t:
                lines.append(f"{key} = {_toml_value(t[key])}")
        if t["role"] == "reference":
            cal = [p.upper() for p in t.get("calibrates", [p for p in cfg["polarizations"] if p in ("HH", "VV")])]
            lines.append(f"calibrates = {_toml_value(cal)}")
        if t["model"] in SHAPE_MODELS:
            lines.append(f"shape = {_toml_value(t['model'])}")
            lines += [f"{k} = {_toml_value(v)}" for k, v in t["params"].items()]
    return "\n".join(lines) + "\n"


def format_angle(angle_deg: float) -> str:
    """Angle field of a file name: a signed decimal number of degrees, e.g. 000.0, 005.0, -30.0."""
    return f"{angle_deg:05.1f}"


def _file_name(pattern: str, pol: str, angle: float, repeat: int) -> str:
    return pattern.replace("{pol}", pol).replace("{angle}", format_angle(angle)).replace("{repeat}", str(repeat))


def band_mask(cfg: dict, frequency_hz) -> np.ndarray:
    """Frequencies of the reporting band ([band] start_ghz..stop_ghz; the whole sweep without one)."""
    f = np.asarray(frequency_hz, float)
    b = cfg.get("band") or {}
    lo, hi = b.get("start_ghz", -math.inf) * 1e9, b.get("stop_ghz", math.inf) * 1e9
    return (f >= lo - 1e-3) & (f <= hi + 1e-3)


def truth_metrics(cfg: dict, frequency_hz, amplitudes: dict) -> dict:
    """Band-averaged reduction per subject with a baseline and per polarization (README, The processing chain, step 6):
    10 log10(sum sigma_baseline / sum sigma_subject) over the band and all angles (linear sums, then
    dB), and the best of the all-angle curve R(f) = 10 log10(sum_angles sigma_b / sum_angles sigma_s)."""
    f = np.asarray(frequency_hz, float)
    band = band_mask(cfg, f)
    out = {"band_ghz": [float(f[band][0] / 1e9), float(f[band][-1] / 1e9)],
           "definition": "band-averaged reduction = 10 log10(sum sigma_baseline / sum sigma_subject) over all "
                         "frequencies of the band and all angles (linear sums, then dB); noise-free model",
           "subjects": {}}
    by_name = {t["name"]: t for t in cfg["target"]}
    for t in cfg["target"]:
        if t["role"] != "subject" or "baseline" not in t or t["arm"]:
            continue
        base = by_name[t["baseline"]]
        common = [a for a in t["angles"] if a in base["angles"]]
        it = [t["angles"].index(a) for a in common]
        ib = [base["angles"].index(a) for a in common]
        entry = {"baseline": base["name"], "revision": t.get("revision"), "angles": len(common),
                 "band_averaged_reduction_db": {}, "full_sweep_reduction_db": {}, "best_reduction_db": {},
                 "best_frequency_ghz": {}}
        for pol in cfg["polarizations"]:
            ss = np.abs(amplitudes[t["name"]][pol][it]) ** 2
            sb = np.abs(amplitudes[base["name"]][pol][ib]) ** 2
            if not (sb[:, band].sum() > 0 and ss[:, band].sum() > 0):
                continue
            entry["band_averaged_reduction_db"][pol] = round(float(10 * np.log10(sb[:, band].sum() / ss[:, band].sum())), 4)
            entry["full_sweep_reduction_db"][pol] = round(float(10 * np.log10(sb.sum() / ss.sum())), 4)
            curve = 10 * np.log10(sb[:, band].sum(axis=0) / ss[:, band].sum(axis=0))
            i = int(np.argmax(curve))
            entry["best_reduction_db"][pol] = round(float(curve[i]), 4)
            entry["best_frequency_ghz"][pol] = round(float(f[band][i] / 1e9), 6)
        out["subjects"][t["name"]] = entry
    return out


def write_truth(cfg: dict, frequency_hz, amplitudes: dict, folder: Path) -> list[Path]:
    """truth/rcs.csv, truth/reduction.csv, truth/metrics.json (columns in sample_measurements/README.md)."""
    folder.mkdir(parents=True, exist_ok=True)
    f_hz = np.rint(np.asarray(frequency_hz, float)).astype(np.int64)
    by_name = {t["name"]: t for t in cfg["target"]}
    subjects = [t for t in cfg["target"] if t["role"] == "subject" and not t["arm"]]

    def rows(name, pol, angles, values):
        na, nf = values.shape
        ang = np.repeat([f"{a:g}" for a in angles], nf)
        fr = np.tile(f_hz.astype(str), na)
        val = np.char.mod("%.3f", values.ravel())
        return [f"{name},{pol},{a},{fq},{v}" for a, fq, v in zip(ang, fr, val)]

    lines = ["target,polarization,angle_deg,frequency_hz,rcs_dbsm"]
    for t in subjects:
        for pol in cfg["polarizations"]:
            with np.errstate(divide="ignore"):
                db = 10 * np.log10(np.abs(amplitudes[t["name"]][pol]) ** 2)
            lines += rows(t["name"], pol, t["angles"], db)
    rcs = folder / "rcs.csv"
    rcs.write_text("\n".join(lines) + "\n", encoding="ascii", newline="\n")
    lines = ["subject,baseline,polarization,angle_deg,frequency_hz,reduction_db"]
    for t in subjects:
        if "baseline" not in t:
            continue
        base = by_name[t["baseline"]]
        common = [a for a in t["angles"] if a in base["angles"]]
        it = [t["angles"].index(a) for a in common]
        ib = [base["angles"].index(a) for a in common]
        for pol in cfg["polarizations"]:
            with np.errstate(divide="ignore", invalid="ignore"):
                red = 10 * np.log10(np.abs(amplitudes[base["name"]][pol][ib]) ** 2
                                    / np.abs(amplitudes[t["name"]][pol][it]) ** 2)
            lines += rows(f"{t['name']},{base['name']}", pol, common, red)
    red_path = folder / "reduction.csv"
    red_path.write_text("\n".join(lines) + "\n", encoding="ascii", newline="\n")
    met = folder / "metrics.json"
    met.write_text(json.dumps(truth_metrics(cfg, frequency_hz, amplitudes), indent=2, sort_keys=False) + "\n",
                   encoding="ascii", newline="\n")
    return [rcs, red_path, met]


@dataclass
class SimulationResult:
    out_dir: Path
    manifest_path: Path
    files: list[Path]
    truth_files: list[Path]
    frequency_hz: np.ndarray
    amplitudes: dict  # target name -> polarization -> complex (na, nf), m
    angles: dict  # target name -> list of degrees
    planning: list[PlanRow] = field(default_factory=list)
    planning_text: str = ""
    metrics: dict = field(default_factory=dict)
    arm_amplitudes: dict = field(default_factory=dict)  # arm target -> polarization -> complex (n_beta, nf), m


def simulate_campaign(config: dict, out_dir) -> SimulationResult:
    """Write a synthetic campaign (Touchstone files, manifest.toml, truth/) into ``out_dir``.

    ``config``: a dict as from :func:`load_simulation_config` (or raw TOML keys, checked here).
    Vectorised: each target's amplitudes for all angles and frequencies are one array per
    polarization; the loop runs over files only.
    """
    from .touchstone import write_touchstone

    cfg = normalise_config(config)
    out = Path(out_dir)
    f = frequency_grid_hz(cfg)
    k = 2 * np.pi * f / C0
    rng = np.random.default_rng(cfg["seed"])
    clutter_phases = rng.uniform(0, 2 * np.pi, len(cfg["clutter"]))
    static, support = chamber_terms(cfg, f, clutter_phases)
    G = system_response(cfg, f)
    offset = cfg["chamber"]["offset_m"]
    sp = cfg["support"]
    change = 1 + sp["change"] * np.exp(1j * np.deg2rad(sp["change_deg"]))
    noise_rms = np.abs(G) * 10 ** (cfg["noise"]["level_db"] / 20)
    dr = cfg["drift"]
    ports = cfg["sweep"]["ports"]
    pols = cfg["polarizations"]
    out_cfg = cfg["output"]
    amplitudes: dict = {}
    arm_amplitudes: dict = {}
    files: list[Path] = []
    for t in cfg["target"]:
        if t["arm"]:
            from . import simulate_arm
            cp = cfg["coupling"]
            coupling = 10 ** (cp["level_db"] / 20) * np.exp(-2j * k * (cp["range_m"] + offset))
            paths, arm_amplitudes[t["name"]] = simulate_arm.simulate_arm_target(
                cfg, t, f, rng, G, static - coupling, support, change, noise_rms, out, format_angle,
                write_touchstone,
                [f"synthetic sweep (cloakrcs simulate, seed {cfg['seed']}): invented scenario, not a measurement",
                 f"target {t['name']} ({t['role']}, model {t['model']}, receiver arm)"])
            files += paths
            continue
        ang = np.asarray(t["angles"], float)
        amps = {p: model_amplitude(t, f, ang, p) for p in pols}
        amplitudes[t["name"]] = amps
        R = t["range_m"]
        echo = np.stack([amps[p] for p in pols])[:, :, None, :] * (np.exp(-2j * k * (R + offset)) / R ** 2)
        sup = support * (change if t["role"] != "background" else 1.0)
        bracket = static + sup + echo  # (np, na, 1, nf)
        shape = (len(pols), ang.size, t["repeats"])
        drift = (10 ** (rng.normal(0, dr["amplitude_db"], shape) / 20)
                 * np.exp(1j * np.deg2rad(rng.normal(0, dr["phase_deg"], shape))))[..., None]
        dlen = rng.normal(0, dr["length_m"], shape)[..., None]
        drift = drift * np.exp(-2j * k * dlen)
        noise = (rng.normal(size=shape + (f.size,)) + 1j * rng.normal(size=shape + (f.size,))) * (noise_rms / math.sqrt(2))
        s = G * drift * bracket + noise  # (np, na, nr, nf)
        if ports == 2:
            match = 10 ** (-18 / 20) * np.exp(-2j * k * 0.12)
            extra = (rng.normal(size=shape + (2, f.size)) + 1j * rng.normal(size=shape + (2, f.size))) * (noise_rms / math.sqrt(2))
        comments = [f"synthetic sweep (cloakrcs simulate, seed {cfg['seed']}): invented scenario, not a measurement",
                    f"target {t['name']} ({t['role']}, model {t['model']})"]
        for ip, pol in enumerate(pols):
            for ia, a in enumerate(ang):
                for ir in range(t["repeats"]):
                    path = out / _file_name(t["files"], pol, float(a), ir + 1)
                    path.parent.mkdir(parents=True, exist_ok=True)
                    if ports == 1:
                        data = s[ip, ia, ir]
                    else:
                        data = np.empty((f.size, 2, 2), complex)
                        data[:, 1, 0] = data[:, 0, 1] = s[ip, ia, ir]
                        data[:, 0, 0] = G * match + extra[ip, ia, ir, 0]
                        data[:, 1, 1] = G * match * np.exp(-0.5j) + extra[ip, ia, ir, 1]
                    write_touchstone(path, f, data, version=out_cfg["version"], fmt="RI", unit="GHz",
                                     comments=comments + [f"polarization {pol}, angle {a:g} deg, repeat {ir + 1}"],
                                     digits=out_cfg["digits"])
                    files.append(path)
    out.mkdir(parents=True, exist_ok=True)
    manifest_path = out / "manifest.toml"
    manifest_path.write_text(manifest_text(cfg), encoding="utf-8", newline="\n")
    truth_files = write_truth(cfg, f, amplitudes, out / "truth") if out_cfg["truth"] else []
    if arm_amplitudes and out_cfg["truth"]:
        from . import simulate_arm
        truth_files += simulate_arm.write_arm_truth(cfg, f, arm_amplitudes, out / "truth")
    rows = planning_rows(cfg, f, amplitudes)
    return SimulationResult(out_dir=out, manifest_path=manifest_path, files=files, truth_files=truth_files,
                            frequency_hz=f, amplitudes=amplitudes, angles={t["name"]: list(t["angles"]) for t in cfg["target"]},
                            planning=rows, planning_text=format_planning(rows, cfg, f),
                            metrics=truth_metrics(cfg, f, amplitudes), arm_amplitudes=arm_amplitudes)
