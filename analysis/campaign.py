"""Campaign: manifest -> targets -> labelled complex cubes, with all validation up front.

A target's sweeps load into one cube, an ``xarray.DataArray`` of complex128 with
dimensions ``(polarization, angle, repeat, frequency)``; coordinates ``angle`` in
degrees as measured, ``frequency`` in Hz, ``repeat`` the repeat index (0.. when the
pattern has no ``{repeat}``). The cube's ``attrs`` carry the echo parameter per
polarization; :class:`TargetCube` keeps each sweep's source file and SHA-256.

Use :func:`load_campaign` (raises the first problem) or :func:`inspect_campaign`
(collects every problem and warning).
"""

from __future__ import annotations

import glob
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from .constants import C0
from .errors import InputError
from .manifest import CO_POL, CROSS_POL, Manifest, TargetSpec, parse_manifest, shape_size_m

FIELD_REGEX = {
    "pol": r"(?P<pol>[HhVv][HhVv])",
    "angle": r"(?P<angle>[+-]?(?:\d+(?:\.\d*)?|\.\d+))",
    "repeat": r"(?P<repeat>\d+)",
    "bistatic": r"(?P<bistatic>[+-]?(?:\d+(?:\.\d*)?|\.\d+))",
}
BISTATIC_WARN_DEG = 10.0


def wrap_angle_deg(angle_deg):
    """Angles wrapped to (-180, 180] degrees (vectorised)."""
    a = np.mod(np.asarray(angle_deg, dtype=float) + 180.0, 360.0) - 180.0
    return np.where(a == -180.0, 180.0, a)


@dataclass(frozen=True)
class SweepFile:
    path: Path
    polarization: str
    angle_deg: float
    repeat: int
    bistatic_deg: float = 0.0


@dataclass
class TargetCube:
    """One target's sweeps: data (polarization, angle, repeat, frequency), files and hashes."""

    spec: TargetSpec
    data: xr.DataArray
    files: np.ndarray  # str paths, shape (polarization, angle, repeat)
    hashes: dict[str, str]
    n_ports: int
    parameters: dict[str, str]  # polarization -> S-parameter carrying the echo

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def polarizations(self) -> list[str]:
        return [str(p) for p in self.data.polarization.values]

    @property
    def angles_deg(self) -> np.ndarray:
        return self.data.angle.values

    @property
    def n_repeats(self) -> int:
        return self.data.sizes["repeat"]

    def to_networks(self):
        """The sweeps as scikit-rf one-port Networks of the echo parameter (a NetworkSet)."""
        import skrf
        from skrf.networkSet import NetworkSet

        freq = skrf.Frequency.from_f(self.data.frequency.values, unit="Hz")
        nets = []
        for ip, pol in enumerate(self.polarizations):
            for ia, ang in enumerate(self.angles_deg):
                for ir in range(self.n_repeats):
                    nets.append(skrf.Network(frequency=freq, s=self.data.values[ip, ia, ir][:, None, None],
                                             name=f"{self.name} {pol} {ang:g} deg #{ir}"))
        return NetworkSet(nets, name=self.name)


@dataclass
class Campaign:
    manifest: Manifest
    cubes: dict[str, TargetCube]
    frequency_hz: np.ndarray
    warnings: list[str] = field(default_factory=list)
    arm: dict = field(default_factory=dict)  # receiver-arm targets: name -> cloakrcs.bistatic.ArmCube

    def cube(self, name: str) -> TargetCube:
        return self.cubes[name]

    @property
    def file_hashes(self) -> dict[str, str]:
        out: dict[str, str] = {}
        for cube in self.cubes.values():
            out.update(cube.hashes)
        for cube in self.arm.values():
            out.update(cube.hashes)
        return out


def pattern_regex(pattern: str) -> re.Pattern:
    """Regex for a file pattern with {pol}, {angle}, {repeat} fields (a field may repeat)."""
    parts = re.split(r"(\{[a-z]+\})", pattern)
    out, used = [], set()
    for part in parts:
        m = re.fullmatch(r"\{([a-z]+)\}", part)
        if m and m.group(1) in FIELD_REGEX:
            name = m.group(1)
            out.append(f"(?P={name})" if name in used else FIELD_REGEX[name])
            used.add(name)
        else:
            out.append(re.escape(part))
    return re.compile("".join(out))


def pattern_fields(pattern: str) -> set[str]:
    return set(re.findall(r"\{([a-z]+)\}", pattern))


def _inside(path: Path, root: Path) -> bool:
    try:
        path.resolve().relative_to(root.resolve())
        return True
    except ValueError:
        return False


def find_sweep_files(manifest: Manifest, spec: TargetSpec, root: Path | None = None) -> list[SweepFile]:
    """Files matching a target's pattern, with the fields parsed; InputError if none or clashing.

    With ``root`` (an upload folder), the pattern may not be absolute and every file it
    matches must resolve inside root; a user's own manifests may climb out of their folder.
    """
    pattern = spec.files.replace("\\", "/")
    if root is not None and Path(pattern).is_absolute():
        raise InputError(f"target {spec.name}: an uploaded campaign's files pattern must be relative",
                         manifest.path, spec.line)
    unknown = pattern_fields(pattern) - set(FIELD_REGEX)
    if unknown:
        raise InputError(f"target {spec.name}: unknown field {{{sorted(unknown)[0]}}} in files pattern "
                         f"(known: {{pol}}, {{angle}}, {{repeat}}, {{bistatic}})", manifest.path, spec.line)
    folder = manifest.folder
    glob_pattern = "".join(
        "*" if re.fullmatch(r"\{[a-z]+\}", p) else glob.escape(p) for p in re.split(r"(\{[a-z]+\})", pattern))
    regex = pattern_regex(pattern)
    found: list[SweepFile] = []
    for hit in sorted(glob.glob(str(folder / glob_pattern))):
        rel = Path(hit).relative_to(folder).as_posix() if not Path(pattern).is_absolute() else Path(hit).as_posix()
        m = regex.fullmatch(rel) or regex.fullmatch(Path(hit).as_posix())
        if not m:
            continue
        if root is not None and not _inside(Path(hit), root):
            raise InputError(f"target {spec.name}: files pattern '{spec.files}' reaches outside the uploaded "
                             f"campaign's folder", manifest.path, spec.line)
        groups = m.groupdict()
        pol = groups.get("pol", spec.polarization).upper()
        angle = float(groups["angle"]) if "angle" in groups else spec.angle_deg
        repeat = int(groups["repeat"]) if "repeat" in groups else 0
        bistatic = float(groups["bistatic"]) if "bistatic" in groups else spec.bistatic_deg
        found.append(SweepFile(Path(hit), pol, angle, repeat, bistatic))
    if not found:
        raise InputError(f"target {spec.name}: files pattern '{spec.files}' matches no file", manifest.path, spec.line)
    seen: dict[tuple, Path] = {}
    for sf in found:
        key = (sf.polarization, float(wrap_angle_deg(sf.angle_deg)), sf.repeat, sf.bistatic_deg)
        if key in seen:
            other = seen[key]
            if sf.angle_deg != _angle_of(found, other):
                raise InputError(f"target {spec.name}: angles coincide once wrapped to (-180, 180]: "
                                 f"{other.name} and {sf.path.name}", manifest.path, spec.line)
            what = "add a {repeat} field to the pattern" if "repeat" not in pattern_fields(pattern) else "duplicate repeat"
            at = f" bistatic {sf.bistatic_deg:g} deg" if spec.arm else ""
            raise InputError(f"target {spec.name}: two files for {sf.polarization} at {sf.angle_deg:g} deg{at} "
                             f"({other.name}, {sf.path.name}): {what}", manifest.path, spec.line)
        seen[key] = sf.path
    return found


def _angle_of(found: list[SweepFile], path: Path) -> float:
    return next(sf.angle_deg for sf in found if sf.path == path)


def _grid_description(freq: np.ndarray) -> str:
    return f"{len(freq)} points {freq[0] / 1e9:.6g}-{freq[-1] / 1e9:.6g} GHz"


def _plan_target(manifest: Manifest, spec: TargetSpec, root: Path | None):
    """(polarizations, angles, repeats, sweeps in cube order) of a target; InputError if the grid has holes."""
    if root is not None and spec.shape and spec.shape.get("shape") == "table" and not _inside(
            Path(spec.shape["file"]), root):
        raise InputError(f"target {spec.name}: table file reaches outside the uploaded campaign's folder",
                         manifest.path, spec.line)
    sweeps = find_sweep_files(manifest, spec, root)
    pols = sorted({s.polarization for s in sweeps}, key=lambda p: ("HH", "VV", "HV", "VH").index(p))
    angles = sorted({s.angle_deg for s in sweeps})
    repeats = sorted({s.repeat for s in sweeps})
    index = {(s.polarization, s.angle_deg, s.repeat): s for s in sweeps}
    missing = [(p, a, r) for p in pols for a in angles for r in repeats if (p, a, r) not in index]
    if missing:
        p, a, r = missing[0]
        raise InputError(f"target {spec.name}: {len(missing)} sweep(s) missing from the polarization x angle x "
                         f"repeat grid, first {p} at {a:g} deg repeat {r}", manifest.path, spec.line)
    return pols, angles, repeats, [index[(p, a, r)] for p in pols for a in angles for r in repeats]


def _file_parameter(spec: TargetSpec, polarization: str) -> str | None:
    """The S-parameter to read from one file (None: the default for its port count)."""
    if isinstance(spec.parameter, dict):
        return spec.parameter.get(polarization) or None
    return spec.parameter


def load_target(manifest: Manifest, spec: TargetSpec, workers: int | None = None, root: Path | None = None,
                plan=None, echoes=None) -> TargetCube:
    """Read one target's files into its cube; InputError on the first problem.

    ``plan`` and ``echoes`` let :func:`load_campaign` read every target's files in one batch.
    """
    from . import timedomain, touchstone

    pols, angles, repeats, ordered = plan or _plan_target(manifest, spec, root)
    paths = [s.path for s in ordered]
    if echoes is None:
        echoes = touchstone.read_echoes(paths, [_file_parameter(spec, s.polarization) for s in ordered], workers)
    n_ports = echoes[0].n_ports
    params: dict[str, str] = {}
    for p in pols:
        if n_ports > 2 and spec.parameter is None:
            raise InputError(f"target {spec.name}: {n_ports}-port files need a parameter table such as "
                             f"{{ VV = \"S21\", HH = \"S43\" }}", manifest.path, spec.line)
        name = spec.parameter_for(p, n_ports)
        if not name:
            raise InputError(f"target {spec.name}: parameter table gives no S-parameter for {p}", manifest.path, spec.line)
        params[p] = name
    freq = echoes[0].frequency_hz
    timedomain.uniform_step_hz(freq, path=paths[0])
    data = np.empty((len(pols), len(angles), len(repeats), len(freq)), dtype=np.complex128)
    flat = data.reshape(-1, len(freq))
    for k, (sf, echo) in enumerate(zip(ordered, echoes)):
        if echo.n_ports != n_ports:
            raise InputError(f"has {echo.n_ports} ports, other files of target {spec.name} have {n_ports}", sf.path)
        if len(echo.frequency_hz) != len(freq) or not np.allclose(echo.frequency_hz, freq, rtol=1e-9, atol=0):
            raise InputError(f"frequency grid ({_grid_description(echo.frequency_hz)}) differs from "
                             f"{paths[0].name} ({_grid_description(freq)})", sf.path)
        if echo.values is None:
            raise InputError(f"target {spec.name}: parameter {params[sf.polarization]} needs more than "
                             f"{n_ports} ports", manifest.path, spec.line)
        flat[k] = echo.values
    cube = xr.DataArray(
        data, dims=("polarization", "angle", "repeat", "frequency"),
        coords={"polarization": pols, "angle": np.array(angles, dtype=float),
                "repeat": np.array(repeats, dtype=int), "frequency": freq},
        name=spec.name, attrs={"units": "VNA ratio", "target": spec.name, "role": spec.role},
    )
    files = np.array([str(p) for p in paths], dtype=object).reshape(len(pols), len(angles), len(repeats))
    hashes = {str(p): e.sha256 for p, e in zip(paths, echoes)}
    return TargetCube(spec=spec, data=cube, files=files, hashes=hashes, n_ports=n_ports, parameters=params)


def check_campaign(manifest: Manifest, cubes: dict[str, TargetCube], problem, warn) -> None:
    """Relations between loaded targets; calls problem(InputError) / warn(str) for each finding."""
    from . import references, timedomain

    mpath = manifest.path
    names = list(cubes)
    if not names:
        return
    first = cubes[names[0]]
    freq = first.data.frequency.values
    for name in names[1:]:
        other = cubes[name].data.frequency.values
        if len(other) != len(freq) or not np.allclose(other, freq, rtol=1e-9, atol=0):
            problem(InputError(f"target {name}: frequency grid ({_grid_description(other)}) differs from target "
                               f"{names[0]}'s ({_grid_description(freq)})", cubes[name].files.flat[0]))
    unamb = timedomain.unambiguous_range_m(freq)
    f_top = freq[-1]
    lam_min = C0 / f_top
    references_by_pol: dict[str, list[str]] = {}
    for name, cube in cubes.items():
        spec = cube.spec
        if spec.role != "background":
            bg_spec = manifest.background_of(spec)
            bg = cubes.get(bg_spec.name) if bg_spec is not None else None
            if bg is not None:
                _check_background(manifest, spec, cube, bg, problem)
                if any(bg.parameters.get(p) not in (None, cube.parameters[p]) for p in cube.polarizations):
                    problem(InputError(f"target {name}: echo parameter {_params(cube)} differs from its background "
                                       f"{bg.name}'s {_params(bg)}: they share the system response only when equal",
                                       mpath, spec.line))
            center = manifest.gate_center_m(spec)
            span = manifest.gate_span_m(spec)
            if center + span / 2 >= unamb:
                problem(InputError(f"target {name}: gate far edge {center + span / 2:.3f} m (centre {center:.3f} m + "
                                   f"span/2) lies past the unambiguous range {unamb:.3f} m = c0/(2 df): it would alias",
                                   mpath, spec.line))
            size = spec.size_m
            if size is not None:
                far = 2 * size ** 2 / lam_min
                if spec.range_m < far:
                    warn(str(InputError(f"target {name}: range {spec.range_m:g} m is shorter than the far field "
                                        f"distance 2 D^2/lambda = {far:.2f} m (D = {size:g} m at {f_top / 1e9:.3g} GHz)",
                                        mpath, spec.line)))
        if spec.role == "reference" or spec.is_check:
            if spec.shape is None:
                continue
            if spec.shape["shape"] == "table":
                try:
                    references.load_table_reference(spec.shape["file"])
                except InputError as exc:
                    problem(exc)
                    continue
            channels = spec.calibrates if spec.calibrates is not None else tuple(
                p for p in cube.polarizations if not references.theory_is_null(spec.shape, p))
            if spec.role == "reference":
                for pol in channels:
                    if references.theory_is_null(spec.shape, pol):
                        problem(InputError(f"target {name}: cannot calibrate {pol}: the {spec.shape['shape']}'s theory "
                                           f"is null in that channel", mpath, spec.line))
                    elif pol not in cube.polarizations:
                        problem(InputError(f"target {name}: no sweep for {pol}, which it must calibrate", mpath, spec.line))
                    else:
                        references_by_pol.setdefault(pol, []).append(name)
            if spec.shape["shape"] == "sphere":
                a = spec.shape["radius_m"]
                center = manifest.gate_center_m(spec)
                span = manifest.gate_span_m(spec)
                echo_center = spec.range_m + manifest.chamber.offset_m
                lo, hi = center - span / 2, center + span / 2
                if not (lo <= echo_center - a and echo_center + math.pi * a / 2 <= hi):
                    warn(str(InputError(f"target {name}: the gate [{lo:.3f}, {hi:.3f}] m does not hold both the sphere's "
                                        f"specular echo ({echo_center - a:.3f} m) and its creeping wave "
                                        f"({echo_center + math.pi * a / 2:.3f} m)", mpath, spec.line)))
    for name, cube in cubes.items():
        spec = cube.spec
        if spec.role == "subject" and spec.baseline and spec.baseline in cubes:
            base = cubes[spec.baseline]
            miss_pol = [p for p in cube.polarizations if p not in base.polarizations]
            if miss_pol:
                problem(InputError(f"target {name}: baseline {base.name} has no {miss_pol[0]} sweeps", mpath, spec.line))
            base_angles = set(np.round(wrap_angle_deg(base.angles_deg), 6))
            miss_ang = [a for a in cube.angles_deg if round(float(wrap_angle_deg(a)), 6) not in base_angles]
            if miss_ang:
                problem(InputError(f"target {name}: baseline {base.name} does not cover angle {miss_ang[0]:g} deg "
                                   f"({len(miss_ang)} angle(s) missing)", mpath, spec.line))
    refs = [c for c in cubes.values() if c.spec.role == "reference"]
    subject_pols = {p for c in cubes.values() if c.spec.role == "subject" for p in c.polarizations}
    for pol in sorted(subject_pols):
        if pol in CO_POL and pol not in references_by_pol and refs:
            problem(InputError(f"no reference calibrates {pol}, which subjects were measured in", mpath))
        if pol in CROSS_POL and pol not in references_by_pol:
            warn(str(InputError(f"{pol}: no cross-polarized reference (such as a rolled dihedral); it will be "
                                f"calibrated from the geometric mean of HH and VV, an approximation", mpath)))
    if not refs and subject_pols:
        problem(InputError("no reference target (role = \"reference\"): calibration needs one", mpath))
    for ref in refs:
        for name, cube in cubes.items():
            if cube.spec.role == "subject":
                common = [p for p in cube.polarizations if p in ref.parameters]
                if any(ref.parameters[p] != cube.parameters[p] for p in common):
                    problem(InputError(f"target {name}: echo parameter {_params(cube)} differs from reference "
                                       f"{ref.name}'s {_params(ref)}: they share the system response only when equal",
                                       mpath, cube.spec.line))
    if manifest.chamber.bistatic_deg > BISTATIC_WARN_DEG:
        warn(str(InputError(f"bistatic angle {manifest.chamber.bistatic_deg:g} deg exceeds {BISTATIC_WARN_DEG:g} deg: "
                            f"monostatic references are then approximate", mpath)))


def _params(cube: TargetCube) -> str:
    vals = set(cube.parameters.values())
    return vals.pop() if len(vals) == 1 else ", ".join(f"{k}={v}" for k, v in cube.parameters.items())


def _check_background(manifest: Manifest, spec: TargetSpec, cube: TargetCube, bg: TargetCube, problem) -> None:
    for pol in cube.polarizations:
        if pol not in bg.polarizations:
            problem(InputError(f"target {spec.name}: background {bg.name} has no {pol} sweep", manifest.path, spec.line))
            return
    if len(bg.angles_deg) == 1:
        return
    bg_angles = set(np.round(wrap_angle_deg(bg.angles_deg), 6))
    missing = [a for a in cube.angles_deg if round(float(wrap_angle_deg(a)), 6) not in bg_angles]
    if missing:
        problem(InputError(f"target {spec.name}: background {bg.name} has neither a sweep at every angle (missing "
                           f"{missing[0]:g} deg and {len(missing) - 1} more) nor a single sweep per polarization",
                           manifest.path, spec.line))


def inspect_campaign(path, workers=None, root=None) -> tuple[Campaign | None, list[InputError], list[str]]:
    """Every problem and warning of a campaign; the campaign itself when it could be loaded.

    ``root``: keep every data file inside this folder (uploaded campaigns).
    """
    problems: list[InputError] = []
    warnings: list[str] = []
    try:
        manifest, problems = parse_manifest(path, collect=True)
    except InputError as exc:
        return None, [exc], warnings
    if manifest is None:
        return None, problems, warnings
    cubes: dict[str, TargetCube] = {}
    for spec in manifest.targets:
        try:
            cubes[spec.name] = load_target(manifest, spec, workers, None if root is None else Path(root))
        except InputError as exc:
            problems.append(exc)
    check_campaign(manifest, cubes, problems.append, warnings.append)
    freq = next(iter(cubes.values())).data.frequency.values if cubes else np.array([])
    campaign = Campaign(manifest=manifest, cubes=cubes, frequency_hz=freq, warnings=warnings)
    if manifest.arm_targets:
        from . import bistatic

        campaign.arm = bistatic.inspect_arm(manifest, freq, workers, root, problems.append, warnings.append)
    return campaign, problems, warnings


def load_campaign(path, workers=None, root=None) -> Campaign:
    """Load and validate a campaign; raises the first problem as InputError.

    Every target's files are read in one batch (one process pool; ``workers=1`` reads
    serially). ``root``: keep every data file inside this folder (uploaded campaigns).
    """
    from . import touchstone

    manifest, _ = parse_manifest(path, collect=False)
    root = None if root is None else Path(root)
    plans = [_plan_target(manifest, spec, root) for spec in manifest.targets]
    paths, params, owner = [], [], []
    for k, (spec, plan) in enumerate(zip(manifest.targets, plans)):
        for sweep in plan[3]:
            paths.append(sweep.path)
            params.append(_file_parameter(spec, sweep.polarization))
            owner.append(k)
    echoes = touchstone.read_echoes(paths, params, workers)
    owner = np.asarray(owner)
    cubes = {spec.name: load_target(manifest, spec, workers, root, plan,
                                    [echoes[i] for i in np.flatnonzero(owner == k)])
             for k, (spec, plan) in enumerate(zip(manifest.targets, plans))}

    def fail(err: InputError):
        raise err

    warnings: list[str] = []
    check_campaign(manifest, cubes, fail, warnings.append)
    freq = next(iter(cubes.values())).data.frequency.values
    campaign = Campaign(manifest=manifest, cubes=cubes, frequency_hz=freq, warnings=warnings)
    if manifest.arm_targets:
        from . import bistatic

        campaign.arm = bistatic.load_arm(manifest, freq, workers, root, warnings.append)
    return campaign


def campaign_summary(campaign: Campaign) -> dict:
    """A JSON-ready description of a campaign (what `cloakrcs inspect --json` prints)."""
    from . import timedomain

    m = campaign.manifest
    freq = campaign.frequency_hz
    targets = []
    for name, cube in campaign.cubes.items():
        spec = cube.spec
        angles = cube.angles_deg
        step = float(np.median(np.diff(np.sort(angles)))) if len(angles) > 1 else None
        item = {
            "name": name, "role": spec.role, "check": spec.is_check,
            "n_files": int(cube.files.size),
            "polarizations": cube.polarizations,
            "angles_deg": [float(a) for a in angles],
            "angle_step_deg": step,
            "repeats": cube.n_repeats,
            "parameter": cube.parameters,
            "n_ports": cube.n_ports,
            "frequency_hz": {"start": float(cube.data.frequency[0]), "stop": float(cube.data.frequency[-1]),
                             "points": int(cube.data.sizes["frequency"])},
            "range_m": spec.range_m,
        }
        if spec.role != "background":
            item["gate"] = {"center_m": m.gate_center_m(spec), "span_m": m.gate_span_m(spec)}
        if spec.shape:
            item["shape"] = spec.shape
            size = shape_size_m(spec.shape)
            if size is not None:
                item["size_m"] = size
        if spec.baseline:
            item["baseline"] = spec.baseline
        if spec.revision:
            item["revision"] = spec.revision
        targets.append(item)
    out = {
        "campaign": m.name, "prototype": m.prototype, "date": m.date.isoformat() if m.date else None,
        "manifest": str(m.path),
        "chamber": {"range_m": m.chamber.range_m, "offset_m": m.chamber.offset_m, "bistatic_deg": m.chamber.bistatic_deg},
        "gate": {"window": m.gate.window, "kaiser_beta": m.gate.kaiser_beta, "span_m": m.gate.span_m,
                 "center_m": m.gate.center_m},
        "band_hz": list(m.band_hz) if m.band_hz else None,
        "targets": targets,
    }
    if len(freq) > 1:
        out["frequency_hz"] = {"start": float(freq[0]), "stop": float(freq[-1]), "points": int(len(freq)),
                               "step": float(freq[1] - freq[0])}
        out["resolution_m"] = timedomain.resolution_m(freq)
        out["unambiguous_range_m"] = timedomain.unambiguous_range_m(freq)
    return out
