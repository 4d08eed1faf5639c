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
import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from .constants import C0
from .errors import InputError
from .manifest import CO_POL, CROSS_POL, Manifest, TargetSpec, parse_manifest, shape_size_m, target_extent_m

FIELD_REGEX = {
    "pol": r"(?P<pol>[HhVv][HhVv])",
    "angle": r"(?P<angle>[+-]?(?:\d+(?:\.\d*)?|\.\d+))",
    "repeat": r"(?P<repeat>\d+)",
    "bistatic": r"(?P<bistatic>[+-]?(?:\d+(?:\.\d*)?|\.\d+))",
}
BISTATIC_WARN_DEG = 10.0
MAX_REPEAT = 999_999  # largest {repeat} number
MAX_ANGLE_DEG = 3600.0  # largest |{angle}| (ten turns)
# A sweep file's plausible size: at most MAX_SWEEP_POINTS frequencies (the largest sweep of common VNAs,
# 100 001 points: from memory), each row a frequency and 2 x ports^2 numbers of at most BYTES_PER_NUMBER
# characters, plus room for comments. A larger file is refused before it is read.
MAX_SWEEP_POINTS = 100_001
BYTES_PER_NUMBER = 40
HEADER_ALLOWANCE_BYTES = 1024 ** 2
# Work one campaign may ask for: complex samples through the range-profile transforms of one target
# (FFT length x its sweeps), and the FFT length itself. Uploads to the dashboard get the smaller limit.
MAX_TRANSFORM_LENGTH = 1 << 22
MAX_TRANSFORM_SAMPLES = 200_000_000  # 3.2 GB of complex128: a workstation's share
UPLOAD_TRANSFORM_SAMPLES = 20_000_000  # 320 MB: one request to a shared server
MAX_SWEEP_MAGNITUDE = 1e6  # |S| above 120 dB is no VNA ratio: a corrupt or mis-scaled file


def max_sweep_file_bytes(path: Path) -> tuple[int, int]:
    """(largest plausible size in bytes, ports assumed) of a Touchstone file, from its .sNp suffix (4 ports otherwise)."""
    m = re.fullmatch(r"\.s(\d)p", Path(path).suffix.lower())
    ports = int(m.group(1)) if m and 1 <= int(m.group(1)) <= 4 else 4
    return MAX_SWEEP_POINTS * (1 + 2 * ports ** 2) * BYTES_PER_NUMBER + HEADER_ALLOWANCE_BYTES, ports


def check_sweep_file(path: Path) -> None:
    """InputError unless ``path`` resolves to a regular file of plausible Touchstone size (checked before reading)."""
    try:
        info = os.stat(path)  # follows links: the file a link points to is what would be read
    except FileNotFoundError:
        raise InputError("is a link to nothing (a broken symbolic link)", path) from None
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror or exc}", path) from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError("is a directory, not a sweep file", path)
    if not stat.S_ISREG(info.st_mode):
        kind = ("a FIFO" if stat.S_ISFIFO(info.st_mode) else "a device" if stat.S_ISCHR(info.st_mode)
                or stat.S_ISBLK(info.st_mode) else "a socket" if stat.S_ISSOCK(info.st_mode) else "not a file")
        raise InputError(f"is {kind}, not a regular file: only regular Touchstone files are read", path)
    limit, ports = max_sweep_file_bytes(path)
    if info.st_size > limit:
        raise InputError(f"is {info.st_size} bytes, larger than a {ports}-port Touchstone file of "
                         f"{MAX_SWEEP_POINTS} frequencies can plausibly be ({limit} bytes): refused unread", path)


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


class SweepCubeAxes:
    """Names and axes of a cube of sweeps (``spec`` and an xarray ``data`` with polarization, angle
    and repeat dimensions); shared by monostatic and receiver-arm cubes."""

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


@dataclass
class TargetCube(SweepCubeAxes):
    """One target's sweeps: data (polarization, angle, repeat, frequency), files and hashes."""

    spec: TargetSpec
    data: xr.DataArray
    files: np.ndarray  # str paths, shape (polarization, angle, repeat)
    hashes: dict[str, str]
    n_ports: int
    parameters: dict[str, str]  # polarization -> S-parameter carrying the echo
    warnings: list[str] = field(default_factory=list)  # what the reader tolerated in its files
    # {flat sweep index: the reader's warnings for that file, its path taken off the front}, kept in the
    # store so that a later run taking the sweeps from there warns as a fresh read would
    file_warnings: dict[str, list[str]] = field(default_factory=dict)

    def to_networks(self):
        """The raw sweeps as scikit-rf one-port Networks of the echo parameter.

        Returns
        -------
        skrf.NetworkSet
            One Network per polarization, angle and repeat, named ``"<target> <pol> <angle> deg #<repeat>"``;
            S11 holds the raw VNA ratio of the echo parameter (not calibrated).
        """
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
    # with a store: {"from_store": n, "read": n, "changed": [paths whose stored sweep changed]}
    reuse: dict | None = None

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
        if "repeat" in groups and (len(groups["repeat"]) > 6 or int(groups["repeat"]) > MAX_REPEAT):
            raise InputError(f"{{repeat}} {groups['repeat'][:20]} is larger than {MAX_REPEAT}", hit)
        if not abs(angle) <= MAX_ANGLE_DEG:
            raise InputError(f"{{angle}} {groups['angle'][:20]} deg lies outside [-{MAX_ANGLE_DEG:g}, "
                             f"{MAX_ANGLE_DEG:g}] deg", hit)
        repeat = int(groups["repeat"]) if "repeat" in groups else 0
        check_sweep_file(Path(hit))
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


def grid_difference(freq: np.ndarray, ref: np.ndarray) -> str:
    """How grid ``freq`` differs from ``ref``: point counts, or the first differing frequency in full (Hz)."""
    if len(freq) != len(ref):
        return f"{len(freq)} points against {len(ref)} ({_grid_description(freq)}; {_grid_description(ref)})"
    k = int(np.flatnonzero(~np.isclose(freq, ref, rtol=1e-9, atol=0))[0])
    return (f"frequency #{k + 1} is {freq[k]:.12g} Hz against {ref[k]:.12g} Hz "
            f"({freq[k] - ref[k]:+.6g} Hz; {_grid_description(ref)})")


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
        per_pol = {p: [s for s in sweeps if s.polarization == p] for p in pols}
        most = max(len(v) for v in per_pol.values())
        stray = [p for p in pols if len(per_pol[p]) * 2 <= most]
        if stray:
            files = per_pol[stray[0]]
            names = ", ".join(s.path.name for s in files[:3]) + (f" and {len(files) - 3} more" if len(files) > 3 else "")
            raise InputError(f"target {spec.name}: {names} introduce{'s' if len(files) == 1 else ''} polarization "
                             f"{stray[0]}, which no other file of the target has ({len(files)} {stray[0]} file(s) "
                             f"against {most} per other polarization): rename or remove "
                             f"{'it' if len(files) == 1 else 'them'}", manifest.path, spec.line)
        p, a, r = missing[0]
        raise InputError(f"target {spec.name}: {len(missing)} sweep(s) missing from the polarization x angle x "
                         f"repeat grid, first {p} at {a:g} deg repeat {r}", manifest.path, spec.line)
    return pols, angles, repeats, [index[(p, a, r)] for p in pols for a in angles for r in repeats]


def reader_warnings(spec: TargetSpec, paths, echoes) -> list[str]:
    """The reader's warnings for a target's files, one line per distinct warning.

    A warning that many files share is shown once, on its first file, with the count of the others.
    """
    seen: dict[str, list] = {}
    for path, echo in zip(paths, echoes):
        prefix = str(path)
        for w in echo.warnings:
            core = re.sub(r"^:\d+: |^: ", "", w[len(prefix):]) if w.startswith(prefix) else w
            if core in seen:
                seen[core][1] += 1
            else:
                seen[core] = [w, 0]
    return [w + (f" (and {n} more file(s) of target {spec.name})" if n else "") for w, n in seen.values()]


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
            raise InputError(f"frequency grid differs from {paths[0].name}'s: "
                             f"{grid_difference(echo.frequency_hz, freq)}", sf.path)
        if echo.values is None:
            raise InputError(f"target {spec.name}: parameter {params[sf.polarization]} needs more than "
                             f"{n_ports} ports", manifest.path, spec.line)
        flat[k] = echo.values
        with np.errstate(all="ignore"):
            peak = np.max(np.abs(echo.values)) if echo.values.size else 0.0
        if not peak <= MAX_SWEEP_MAGNITUDE:  # also catches inf and NaN
            raise InputError(f"{params[sf.polarization]} reaches |S| = {peak:.3g}, "
                             f"above {MAX_SWEEP_MAGNITUDE:g} (120 dB): no VNA ratio is that large", sf.path)
    cube = xr.DataArray(
        data, dims=("polarization", "angle", "repeat", "frequency"),
        coords={"polarization": pols, "angle": np.array(angles, dtype=float),
                "repeat": np.array(repeats, dtype=int), "frequency": freq},
        name=spec.name, attrs={"units": "VNA ratio", "target": spec.name, "role": spec.role},
    )
    files = np.array([str(p) for p in paths], dtype=object).reshape(len(pols), len(angles), len(repeats))
    hashes = {str(p): e.sha256 for p, e in zip(paths, echoes)}
    per_file = {str(k): [w[len(str(p)):] for w in e.warnings] for k, (p, e) in enumerate(zip(paths, echoes))
                if e.warnings}
    return TargetCube(spec=spec, data=cube, files=files, hashes=hashes, n_ports=n_ports, parameters=params,
                      warnings=reader_warnings(spec, paths, echoes), file_warnings=per_file)


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
            problem(InputError(f"target {name}: frequency grid differs from target {names[0]}'s: "
                               f"{grid_difference(other, freq)}", cubes[name].files.flat[0]))
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
            alias = timedomain.gate_alias_problem(freq, center, span, manifest.gate.edge_fraction)
            if alias:
                problem(InputError(f"target {name}: {alias}", mpath, spec.line))
            size = target_extent_m(spec)  # size_m and the shape's own dimensions: the largest
            if size is not None:
                far = 2 * size ** 2 / lam_min
                if spec.range_m < far:
                    warn(str(InputError(f"target {name}: range {spec.range_m:g} m is shorter than the far field "
                                        f"distance 2 D^2/lambda = {far:.2f} m (D = {size:g} m at {f_top / 1e9:.3g} GHz)",
                                        mpath, spec.line)))
                top = flat_top_problem(size, spec.range_m + manifest.chamber.offset_m, center, span,
                                       manifest.gate.edge_fraction)
                if top:
                    warn(str(InputError(f"target {name}: {top}", mpath, spec.line)))
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
            if references.shape_is_angle_independent_peak(spec.shape) and len(cube.angles_deg) > 1:
                warn(str(InputError(f"target {name}: the {spec.shape['shape']} model is its peak RCS only, the same "
                                    f"at every angle, but the target was measured at {len(cube.angles_deg)} angles: "
                                    f"only sweeps at its peak aspect agree with it", mpath, spec.line)))
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
            lacking = [p for p in base.polarizations if p not in cube.polarizations]
            if lacking:
                warn(str(InputError(f"target {name}: no {'/'.join(lacking)} sweeps although its baseline {base.name} "
                                    f"has them: no {'/'.join(lacking)} reduction for {name} (misnamed files?)",
                                    mpath, spec.line)))
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
    if not manifest.by_role("background") and manifest.targets:
        warn(str(InputError("no background target (role = \"background\"): processing without background "
                            "subtraction, by the time gate alone; clutter and coupling inside each gate remain in "
                            "every result, and the floor comes from the targets' own sweeps", mpath)))
    ref_pols = sorted({p for c in refs for p in c.polarizations}, key=("HH", "VV", "HV", "VH").index)
    for name, cube in cubes.items():
        spec = cube.spec
        if spec.role == "subject" and not (spec.baseline and spec.baseline in cubes):
            lacking = [p for p in ref_pols if p not in cube.polarizations]
            if lacking:
                warn(str(InputError(f"target {name}: no {'/'.join(lacking)} sweeps although the reference has them "
                                    f"(misnamed files?)", mpath, spec.line)))
    _check_band(manifest, cubes, freq, problem, warn)
    _check_echo_in_gate(manifest, cubes, freq, warn)
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


def flat_top_problem(extent_m: float, echo_center_m: float, center_m: float, span_m: float,
                     edge_fraction: float) -> str | None:
    """Why a target of largest dimension ``extent_m`` (m), centred at ``echo_center_m`` on the
    range axis, is not held by the gate's flat top, or None when it is.

    The flat top is centre +/- span (1 - edge_fraction) / 2 (README, The processing chain,
    step 2); the target may reach extent/2 either side of its centre down-range. Echoes on the
    soft edges are attenuated, so the calibration of such a target is biased low.
    """
    half_top = 0.5 * span_m * (1.0 - edge_fraction)
    lo, hi = echo_center_m - extent_m / 2, echo_center_m + extent_m / 2
    if lo >= center_m - half_top - 1e-9 and hi <= center_m + half_top + 1e-9:
        return None
    return (f"its extent {extent_m:g} m ({lo:.3f}-{hi:.3f} m down-range) exceeds the gate's flat top "
            f"[{center_m - half_top:.3f}, {center_m + half_top:.3f}] m (span {span_m:g} m minus its soft edges): "
            f"echoes on the edges are attenuated; widen the gate span")
def valid_band_of(manifest: Manifest, frequency_hz, spans_m=None, trim_hz=None) -> tuple[float, float] | None:
    """First and last frequency (Hz) of the valid band for the manifest's gates (None: nothing valid)."""
    from . import timedomain

    spans = spans_m or [manifest.gate_span_m(t) for t in manifest.targets if t.role != "background"]
    if not spans or len(frequency_hz) < 2:
        return None
    valid = timedomain.valid_band_mask(frequency_hz, min(spans), manifest.gate.trim_hz if trim_hz is None else trim_hz)
    return (float(frequency_hz[valid][0]), float(frequency_hz[valid][-1])) if valid.any() else None


def band_problem(band_hz, frequency_hz, valid_hz, source: str) -> tuple[str | None, str | None]:
    """(error, warning) for a reporting band against the data: ``source`` names where it was given.

    An error when the band holds no valid frequency (outside the measured grid, or inside it but
    outside the valid band that gating leaves); a warning when only part of it is outside (the
    metrics then use the overlap).
    """
    lo, hi = band_hz
    text = f"{source} {lo / 1e9:g}-{hi / 1e9:g} GHz"
    f0, f1 = float(frequency_hz[0]), float(frequency_hz[-1])
    if hi < f0 or lo > f1:
        return f"{text} lies outside the measured frequencies {f0 / 1e9:.4g}-{f1 / 1e9:.4g} GHz", None
    if valid_hz is None:
        return None, None
    v0, v1 = valid_hz
    if hi < v0 - 1e-6 or lo > v1 + 1e-6:
        return (f"{text} lies outside the valid band {v0 / 1e9:.4g}-{v1 / 1e9:.4g} GHz (the measured band less the "
                f"gate's edge trim)"), None
    if lo < v0 - 1e-6 or hi > v1 + 1e-6:
        return None, (f"{text} reaches beyond the valid band {v0 / 1e9:.4g}-{v1 / 1e9:.4g} GHz: the metrics use "
                      f"{max(lo, v0) / 1e9:.4g}-{min(hi, v1) / 1e9:.4g} GHz")
    return None, None


def _check_band(manifest: Manifest, cubes, freq, problem, warn) -> None:
    if not manifest.band_hz or len(freq) < 2:
        return
    err, warning = band_problem(manifest.band_hz, freq, valid_band_of(manifest, freq), "[band]")
    if err:
        problem(InputError(err, manifest.path, manifest.band_line))
    if warning:
        warn(str(InputError(warning, manifest.path, manifest.band_line)))


ECHO_CHECK_ROLES = ("reference",)


def echo_outside_gate(manifest: Manifest, cube: TargetCube, bg: TargetCube | None, frequency_hz,
                      center_m: float, span_m: float) -> float | None:
    """Range (m) of a target's strongest echo when it lies outside its gate, else None.

    The echo is the background-subtracted sweeps' RMS range profile, searched from a quarter
    of the target's range to the unambiguous range (the antenna coupling sits near 0 m).
    """
    from . import timedomain

    data = cube.data.values.mean(axis=2)
    if bg is not None:
        bg_mean = bg.data.sel(polarization=cube.polarizations).values.mean(axis=2)
        from .calibrate import background_at_angles

        data = data - background_at_angles(bg_mean, bg.angles_deg, cube.angles_deg)
    unamb = timedomain.unambiguous_range_m(frequency_hz)
    g = manifest.gate
    try:
        peak = timedomain.find_echo_range(frequency_hz, data.reshape(-1, data.shape[-1]), g.window, g.kaiser_beta,
                                          pad_factor=4, search=(0.25 * cube.spec.range_m, 0.98 * unamb))
    except InputError:
        return None
    return peak if not (center_m - span_m / 2 <= peak <= center_m + span_m / 2) else None


ECHO_WARNING = "its echo peaks at"


def _check_echo_in_gate(manifest: Manifest, cubes, freq, warn, gate_of=None) -> None:
    """Warn when a reference's, check target's or baseline's echo peaks outside its gate (README, Campaign manifest).

    ``gate_of(spec) -> (center_m, span_m)``: the gates used (default: the manifest's).
    """
    if len(freq) < 8:
        return
    baselines = {c.spec.baseline for c in cubes.values() if c.spec.baseline}
    for name, cube in cubes.items():
        spec = cube.spec
        if not (spec.role in ECHO_CHECK_ROLES or spec.is_check or name in baselines):
            continue
        bg_spec = manifest.background_of(spec)
        bg = cubes.get(bg_spec.name) if bg_spec is not None else None
        if bg_spec is not None and bg is None:
            continue
        if bg is not None and any(p not in bg.polarizations for p in cube.polarizations):
            continue
        center, span = gate_of(spec) if gate_of else (manifest.gate_center_m(spec), manifest.gate_span_m(spec))
        try:
            peak = echo_outside_gate(manifest, cube, bg, freq, center, span)
        except KeyError:  # the background does not cover the target's angles: reported as a problem already
            continue
        if peak is not None:
            warn(str(InputError(
                f"target {name}: {ECHO_WARNING} {peak:.3f} m, outside its gate {center - span / 2:.3f}-"
                f"{center + span / 2:.3f} m: is the reference-plane offset missing ([chamber] offset_m = "
                f"{peak - spec.range_m:+.3f} would centre it)? Use --auto-gate or set the offset", manifest.path,
                spec.line)))


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


def work_problem(manifest: Manifest, cubes: dict[str, TargetCube],
                 max_samples: int = MAX_TRANSFORM_SAMPLES) -> InputError | None:
    """The work the campaign asks for, against the limits: FFT length (points x pad_factor) at most
    MAX_TRANSFORM_LENGTH, and per target FFT length x sweeps (polarizations x angles x repeats) at most
    ``max_samples`` complex samples. None when within them."""
    from .timedomain import transform_length

    pad = manifest.gate.pad_factor
    for name, cube in cubes.items():
        nf = cube.data.sizes["frequency"]
        if nf > MAX_SWEEP_POINTS:
            return InputError(f"target {name}: {nf} frequencies a sweep, more than the limit of {MAX_SWEEP_POINTS}",
                              manifest.path, cube.spec.line)
        length = transform_length(nf, pad)
        if length > MAX_TRANSFORM_LENGTH:
            return InputError(f"[gate]: pad_factor {pad} x {nf} frequencies asks for an FFT of {length} points, "
                              f"more than the limit of {MAX_TRANSFORM_LENGTH}", manifest.path)
        sweeps = cube.data.size // nf
        if length * sweeps > max_samples:
            return InputError(f"target {name}: {sweeps} sweeps x an FFT of {length} points (pad_factor {pad}) "
                              f"= {length * sweeps} samples, more than the limit of {max_samples}: lower "
                              f"pad_factor or split the campaign", manifest.path, cube.spec.line)
    return None


def inspect_campaign(path, workers=None, root=None) -> tuple[Campaign | None, list[InputError], list[str]]:
    """Every problem and warning of a campaign; the campaign itself when it could be loaded.

    Parameters
    ----------
    path : str or os.PathLike
        The campaign manifest (TOML).
    workers : int, optional
        Reader processes (default: one per core for many files; 1 reads serially).
    root : str or os.PathLike, optional
        Keep every data file inside this folder (uploaded campaigns).

    Returns
    -------
    campaign : Campaign or None
        The targets that could be loaded (None when the manifest itself is unusable).
    problems : list of InputError
        Every problem found, one line each (``cloakrcs inspect`` prints them).
    warnings : list of str
        One line each: far field, bistatic angle, the reader's tolerances, ...
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
    work = work_problem(manifest, cubes)
    if work is not None:
        problems.append(work)
    for cube in cubes.values():
        warnings.extend(cube.warnings)
    check_campaign(manifest, cubes, problems.append, warnings.append)
    freq = next(iter(cubes.values())).data.frequency.values if cubes else np.array([])
    campaign = Campaign(manifest=manifest, cubes=cubes, frequency_hz=freq, warnings=warnings)
    if cubes:
        from .process import settings_problems  # the gate and band checks `process` makes before its work

        known = {str(p) for p in problems}
        problems.extend(p for p in settings_problems(campaign) if str(p) not in known)
    if manifest.arm_targets:
        from . import bistatic

        campaign.arm = bistatic.inspect_arm(manifest, freq, workers, root, problems.append, warnings.append)
    return campaign, problems, warnings


def load_campaign(path, workers=None, root=None, max_samples: int = MAX_TRANSFORM_SAMPLES,
                  store_url: str | None = None) -> Campaign:
    """Load and validate a campaign; raises the first problem as InputError.

    Parameters
    ----------
    path : str or os.PathLike
        The campaign manifest (TOML); file patterns are relative to its folder.
    workers : int, optional
        Every target's files are read in one batch on a process pool (default: one worker
        per core for many files); ``workers=1`` reads serially.
    root : str or os.PathLike, optional
        Keep every data file inside this folder (uploaded campaigns).
    store_url : str, optional
        A results store holding earlier runs: every file whose SHA-256 matches a sweep stored there
        (read with the same S-parameter) is taken from the store instead of being parsed again;
        the others are read. ``Campaign.reuse`` says how many came from where.

    Returns
    -------
    Campaign
        ``cubes`` {target name: TargetCube}, each ``data`` an xarray.DataArray of complex VNA
        ratios (polarization, angle in degrees as measured, repeat, frequency in Hz);
        ``frequency_hz``; ``warnings`` (list of one-line str); ``reuse`` (None without a store).

    Raises
    ------
    InputError
        The first problem, one line naming the file (and line).
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
    reuse = None
    if store_url is None:
        echoes = touchstone.read_echoes(paths, params, workers)
    else:
        from . import store

        echoes, reuse = store.stored_echoes(store_url, paths, params, manifest.path, workers)
        fresh = [i for i, e in enumerate(echoes) if e is None]
        for i, echo in zip(fresh, touchstone.read_echoes([paths[i] for i in fresh], [params[i] for i in fresh],
                                                         workers)):
            echoes[i] = echo
    owner = np.asarray(owner)
    cubes = {spec.name: load_target(manifest, spec, workers, root, plan,
                                    [echoes[i] for i in np.flatnonzero(owner == k)])
             for k, (spec, plan) in enumerate(zip(manifest.targets, plans))}

    def fail(err: InputError):
        raise err

    work = work_problem(manifest, cubes, max_samples)
    if work is not None:
        raise work
    warnings = [w for cube in cubes.values() for w in cube.warnings]
    check_campaign(manifest, cubes, fail, warnings.append)
    freq = next(iter(cubes.values())).data.frequency.values
    campaign = Campaign(manifest=manifest, cubes=cubes, frequency_hz=freq, warnings=warnings, reuse=reuse)
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
