"""Campaign manifest (TOML): parse and check every key before any data is read.

The manifest sits beside the data; file patterns are relative to its folder and may
climb out of it (``../shared/empty_{pol}.s1p``), as labs share background sweeps.
Every problem is an :class:`~cloakrcs.errors.InputError` naming the manifest and,
where it can be found, the line.
"""

from __future__ import annotations

import datetime as _dt
import re
import stat
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import InputError

ROLES = ("background", "reference", "subject")
POLARIZATIONS = ("HH", "VV", "HV", "VH")
CO_POL = ("HH", "VV")
CROSS_POL = ("HV", "VH")
WINDOWS = ("kaiser", "hann", "rect")
SHAPES = ("sphere", "plate", "disk", "cylinder", "dihedral", "trihedral", "table")
SHAPE_KEYS = {
    "sphere": ("radius_m",),
    "plate": ("width_m", "height_m"),
    "disk": ("radius_m",),
    "cylinder": ("radius_m", "length_m", "orientation"),
    "dihedral": ("fold_m", "face_m", "roll_deg"),
    "trihedral": ("edge_m", "kind"),
    "table": ("file",),
}
SHAPE_OPTIONAL_DEFAULTS = {"orientation": "upright", "roll_deg": 0.0, "kind": "triangular"}

DEFAULT_SPAN_M = 0.6  # gate span when neither the manifest nor a size gives one
MAX_MANIFEST_BYTES = 1024 ** 2  # a manifest is a page of keys; anything larger is not one
MAX_NAME_CHARS = 200  # campaign, prototype, target and revision names, patterns' own names
MAX_PATTERN_CHARS = 4096  # a files pattern (a path)
MAX_TEXT_CHARS = 20_000  # free text: notes
MAX_PAD_FACTOR = 64
# physical range of every numeric key: key -> (lowest, highest, unit); both ends allowed
RANGES = {
    "range_m": (1e-3, 1e5, "m"), "offset_m": (-1e4, 1e4, "m"), "bistatic_deg": (-180.0, 180.0, "deg"),
    "span_m": (1e-3, 1e5, "m"), "gate_span_m": (1e-3, 1e5, "m"), "center_m": (1e-3, 1e5, "m"),
    "kaiser_beta": (0.0, 50.0, ""), "pad_factor": (1, MAX_PAD_FACTOR, ""), "edge_fraction": (1e-6, 1.0, ""),
    "trim_ghz": (0.0, 1e4, "GHz"), "start_ghz": (1e-9, 1e4, "GHz"), "stop_ghz": (1e-9, 1e4, "GHz"),
    "size_m": (1e-6, 1e3, "m"), "angle_deg": (-360.0, 360.0, "deg"), "specular_deg": (-360.0, 360.0, "deg"),
    "roll_deg": (-360.0, 360.0, "deg"),
    **{k: (1e-6, 1e3, "m") for k in ("radius_m", "width_m", "height_m", "length_m", "fold_m", "face_m", "edge_m")},
}
DIMENSION_KEYS = ("radius_m", "width_m", "height_m", "length_m", "fold_m", "face_m", "edge_m")
# optional tolerance (half-width of a rectangular distribution, m) of each shape dimension: radius_tolerance_m...
TOLERANCE_KEYS = {k[:-2] + "_tolerance_m": k for k in DIMENSION_KEYS}
RANGES.update({k: (0.0, 1e3, "m") for k in (*TOLERANCE_KEYS, "range_tolerance_m")})
TEXT_KEYS = ("notes", "operator_notes")
SPAN_PER_SIZE = 2.0  # default gate span = 2 x the target's largest dimension

_SECTION_KEYS = {
    "campaign": {"name", "prototype", "date", "notes", "operator_notes"},
    "chamber": {"range_m", "offset_m", "bistatic_deg", "name", "notes", "range_tolerance_m"},
    "gate": {"span_m", "center_m", "window", "kaiser_beta", "pad_factor", "edge_fraction", "trim_ghz"},
    "band": {"start_ghz", "stop_ghz"},
}
_TARGET_KEYS = {
    "name", "role", "files", "parameter", "background", "baseline", "revision", "range_m",
    "size_m", "gate_span_m", "angle_deg", "polarization", "calibrates", "shape", "specular_deg",
    "notes", "date", "bistatic_deg", "range_tolerance_m",
} | {k for keys in SHAPE_KEYS.values() for k in keys} | set(TOLERANCE_KEYS)


@dataclass(frozen=True)
class Chamber:
    range_m: float
    offset_m: float = 0.0
    bistatic_deg: float = 0.0
    range_tolerance_m: float = 0.0  # half-width (m) of each target's range, where it differs from the reference's


@dataclass(frozen=True)
class GateSettings:
    """Campaign-wide gate settings; per-target span and centre are resolved in TargetSpec."""

    span_m: float | None = None
    center_m: float | None = None
    window: str = "kaiser"
    kaiser_beta: float = 6.0
    pad_factor: int = 4
    edge_fraction: float = 0.2
    trim_hz: float | None = None


@dataclass(frozen=True)
class TargetSpec:
    name: str
    role: str
    files: str
    line: int | None
    parameter: str | dict[str, str] | None = None
    background: str | None = None
    baseline: str | None = None
    revision: str | None = None
    range_m: float = 0.0
    size_m: float | None = None
    gate_span_m: float | None = None
    angle_deg: float = 0.0
    polarization: str = "VV"
    calibrates: tuple[str, ...] | None = None
    shape: dict[str, Any] | None = None
    specular_deg: float = 0.0
    bistatic_deg: float = 0.0
    arm: bool = False  # a receiver-arm target: its pattern has {bistatic} or it sets bistatic_deg
    tolerances: dict[str, float] = field(default_factory=dict)  # shape dimension key -> tolerance (m)
    range_tolerance_m: float = 0.0

    @property
    def is_check(self) -> bool:
        """A subject that gives a shape is a check target (known theory)."""
        return self.role == "subject" and self.shape is not None

    def parameter_for(self, polarization: str, n_ports: int) -> str:
        """S-parameter that carries this target's echo for one polarization."""
        if isinstance(self.parameter, dict):
            return self.parameter.get(polarization, "")
        if self.parameter:
            return self.parameter
        return "S11" if n_ports == 1 else "S21"


@dataclass(frozen=True)
class Manifest:
    path: Path
    name: str
    prototype: str
    date: _dt.date | None
    chamber: Chamber
    gate: GateSettings
    band_hz: tuple[float, float] | None
    targets: tuple[TargetSpec, ...]
    text: str = field(repr=False, default="")
    band_line: int | None = None  # line of the [band] table, for messages about it
    arm_targets: tuple[TargetSpec, ...] = ()  # receiver-arm (bistatic) targets, processed apart


    @property
    def folder(self) -> Path:
        return self.path.parent

    def target(self, name: str) -> TargetSpec:
        for t in self.targets:
            if t.name == name:
                return t
        raise KeyError(name)

    def by_role(self, role: str) -> list[TargetSpec]:
        return [t for t in self.targets if t.role == role]

    def background_of(self, spec: TargetSpec) -> TargetSpec | None:
        """The background a target is subtracted with (None when the manifest has none)."""
        if spec.background:
            return next((t for t in self.targets if t.name == spec.background), None)
        found = self.by_role("background")
        return found[0] if found else None

    def gate_center_m(self, spec: TargetSpec) -> float:
        """Gate centre: [gate].center_m if given, else target range + chamber offset."""
        if self.gate.center_m is not None:
            return self.gate.center_m
        return spec.range_m + self.chamber.offset_m

    def gate_span_m(self, spec: TargetSpec) -> float:
        """Gate span precedence: gate_span_m, [gate].span_m, 2 x size_m, DEFAULT_SPAN_M."""
        if spec.gate_span_m is not None:
            return spec.gate_span_m
        if self.gate.span_m is not None:
            return self.gate.span_m
        size = spec.size_m if spec.size_m is not None else shape_size_m(spec.shape)
        if size is not None:
            return SPAN_PER_SIZE * size
        return DEFAULT_SPAN_M


def shape_size_m(shape: dict[str, Any] | None) -> float | None:
    """Largest dimension of an analytic shape (m), or None when unknown."""
    if not shape:
        return None
    kind = shape.get("shape")
    try:
        if kind in ("sphere", "disk"):
            return 2.0 * float(shape["radius_m"])
        if kind == "plate":
            return float((shape["width_m"] ** 2 + shape["height_m"] ** 2) ** 0.5)
        if kind == "cylinder":
            return float(max(shape["length_m"], 2 * shape["radius_m"]))
        if kind == "dihedral":
            return float((shape["fold_m"] ** 2 + (2 * shape["face_m"]) ** 2) ** 0.5)
        if kind == "trihedral":
            return float(shape["edge_m"] * 2 ** 0.5)
    except (KeyError, TypeError):
        return None
    return None


def target_extent_m(spec: TargetSpec) -> float | None:
    """A target's largest dimension (m): the larger of ``size_m`` and its shape's own largest
    dimension (:func:`shape_size_m`), or None when neither is known."""
    sizes = [s for s in (spec.size_m, shape_size_m(spec.shape)) if s is not None]
    return max(sizes) if sizes else None


def _short(text: str, limit: int = 60) -> str:
    """A name cut to ``limit`` characters for a message (the full name may be far longer)."""
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _target_lines(text: str) -> list[int]:
    """1-based line numbers of each [[target]] header, in order."""
    return [i + 1 for i, line in enumerate(text.splitlines()) if re.match(r"\s*\[\[\s*target\s*\]\]", line)]


def _key_line(text: str, key: str, start: int | None) -> int | None:
    """Line of the first ``key =`` at or after line ``start`` (1-based), else ``start``."""
    lines = text.splitlines()
    begin = (start or 1) - 1
    for i in range(begin, len(lines)):
        if i > begin and re.match(r"\s*\[", lines[i]):
            break
        if re.match(rf"\s*{re.escape(key)}\s*=", lines[i]):
            return i + 1
    return start


def _section_line(text: str, section: str) -> int | None:
    for i, line in enumerate(text.splitlines()):
        if re.match(rf"\s*\[\s*{section}\s*\]", line):
            return i + 1
    return None


class _Checker:
    """Collects problems (or raises at the first) while the manifest is parsed."""

    def __init__(self, path: Path, text: str, collect: bool):
        self.path, self.text, self.collect = path, text, collect
        self.problems: list[InputError] = []

    def problem(self, message: str, line: int | None = None) -> None:
        err = InputError(message, self.path, line)
        if not self.collect:
            raise err
        self.problems.append(err)

    def number(self, table: dict, key: str, where: str, line: int | None, *, default=None,
               required=False, positive=False, nonnegative=False):
        if key not in table:
            if required:
                self.problem(f"{where}: missing required key '{key}'", line)
            return default
        value = table[key]
        kline = _key_line(self.text, key, line)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.problem(f"{where}: '{key}' must be a number, got {value!r}", kline)
            return default
        value = float(value)
        if value != value or value in (float("inf"), float("-inf")):
            self.problem(f"{where}: '{key}' must be finite", kline)
            return default
        if positive and value <= 0:
            self.problem(f"{where}: '{key}' must be positive, got {value:g}", kline)
            return default
        if nonnegative and value < 0:
            self.problem(f"{where}: '{key}' must not be negative, got {value:g}", kline)
            return default
        if key in RANGES:
            lo, hi, unit = RANGES[key]
            if not lo <= value <= hi:
                unit = f" {unit}" if unit else ""
                self.problem(f"{where}: '{key}' = {value:g}{unit} is outside its range [{lo:g}, {hi:g}]{unit}", kline)
                return default
        return value

    def free_text(self, table: dict, key: str, where: str, line: int | None, limit: int = MAX_TEXT_CHARS) -> None:
        """A free-text key: a string of at most ``limit`` characters."""
        if key not in table:
            return
        value = table[key]
        kline = _key_line(self.text, key, line)
        if not isinstance(value, str):
            self.problem(f"{where}: '{key}' must be a string, got {type(value).__name__}", kline)
        elif len(value) > limit:
            self.problem(f"{where}: '{key}' is {len(value)} characters long, more than the limit of {limit}", kline)

    def string(self, table: dict, key: str, where: str, line: int | None, *, default=None,
               required=False, choices=None, limit: int = MAX_NAME_CHARS):
        if key not in table:
            if required:
                self.problem(f"{where}: missing required key '{key}'", line)
            return default
        value = table[key]
        kline = _key_line(self.text, key, line)
        if not isinstance(value, str) or not value.strip():
            self.problem(f"{where}: '{key}' must be a non-empty string, got {value!r}", kline)
            return default
        if len(value) > limit:
            self.problem(f"{where}: '{key}' is {len(value)} characters long, more than the limit of {limit}", kline)
            return default
        if choices is not None and value not in choices:
            self.problem(f"{where}: '{key}' = {value!r} is not one of {', '.join(choices)}", kline)
            return default
        return value


def read_manifest_text(path: Path) -> str:
    """Manifest text, UTF-8 (a byte-order mark is accepted); InputError otherwise."""
    try:
        if path.is_dir():
            raise InputError("is a directory, expected a manifest file", path)
        info = path.stat()
        if not stat.S_ISREG(info.st_mode):
            raise InputError("is not a regular file (a device, FIFO or socket), expected a manifest file", path)
        if info.st_size > MAX_MANIFEST_BYTES:
            raise InputError(f"manifest is {info.st_size} bytes, more than the limit of {MAX_MANIFEST_BYTES} "
                             f"(1 MiB)", path)
        with open(path, "rb") as fh:
            raw = fh.read(MAX_MANIFEST_BYTES + 1)
        if len(raw) > MAX_MANIFEST_BYTES:
            raise InputError(f"manifest is larger than the limit of {MAX_MANIFEST_BYTES} bytes (1 MiB)", path)
    except InputError:
        raise
    except FileNotFoundError:
        raise InputError("manifest not found", path) from None
    except OSError as exc:
        raise InputError(f"cannot read manifest: {exc.strerror or exc}", path) from None
    if not raw.strip():
        raise InputError("manifest is empty", path)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise InputError("manifest is not UTF-8 text", path, line) from None


def load_toml(text: str) -> dict:
    """tomllib.loads, with arrays or tables nested too deeply for the parser turned into a TOMLDecodeError."""
    try:
        return tomllib.loads(text)
    except RecursionError:
        raise tomllib.TOMLDecodeError("arrays or tables nested too deeply") from None


def parse_manifest(path: str | Path, collect: bool = False) -> tuple[Manifest | None, list[InputError]]:
    """Parse and check a manifest.

    With ``collect=False`` the first problem raises :class:`InputError`; with
    ``collect=True`` all problems found are returned (the manifest is None when it
    cannot be built at all).
    """
    path = Path(path)
    text = read_manifest_text(path)
    check = _Checker(path, text, collect)
    try:
        doc = load_toml(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"at line (\d+)", msg)
        line = int(m.group(1)) if m else None
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", msg)
        check.problem(f"invalid TOML: {msg}", line)
        return None, check.problems

    for key in doc:
        if key not in _SECTION_KEYS and key != "target":
            check.problem(f"unknown section or key '{key}'", _section_line(text, key) or _key_line(text, key, 1))
    for section, allowed in _SECTION_KEYS.items():
        table = doc.get(section, {})
        if not isinstance(table, dict):
            check.problem(f"'{section}' must be a table", _key_line(text, section, 1))
            continue
        sline = _section_line(text, section)
        for key in table:
            if key not in allowed:
                check.problem(f"[{section}]: unknown key '{key}'", _key_line(text, key, sline))

    campaign = doc.get("campaign", {}) if isinstance(doc.get("campaign", {}), dict) else {}
    cline = _section_line(text, "campaign")
    if "campaign" not in doc:
        check.problem("missing required section [campaign]", None)
    name = check.string(campaign, "name", "[campaign]", cline, required="campaign" in doc, default="")
    prototype = check.string(campaign, "prototype", "[campaign]", cline, default=None) or name
    for key in TEXT_KEYS:
        check.free_text(campaign, key, "[campaign]", cline)
    date = campaign.get("date")
    if date is not None and not isinstance(date, _dt.date):
        check.problem(f"[campaign]: 'date' must be a TOML date such as 2026-11-20, got {date!r}",
                      _key_line(text, "date", cline))
        date = None
    if isinstance(date, _dt.datetime):
        date = date.date()

    chamber_t = doc.get("chamber", {}) if isinstance(doc.get("chamber", {}), dict) else {}
    hline = _section_line(text, "chamber")
    if "chamber" not in doc:
        check.problem("missing required section [chamber]", None)
    check.free_text(chamber_t, "notes", "[chamber]", hline)
    check.free_text(chamber_t, "name", "[chamber]", hline, limit=MAX_NAME_CHARS)
    chamber = Chamber(
        range_m=check.number(chamber_t, "range_m", "[chamber]", hline, required="chamber" in doc,
                             positive=True, default=1.0),
        offset_m=check.number(chamber_t, "offset_m", "[chamber]", hline, default=0.0),
        bistatic_deg=check.number(chamber_t, "bistatic_deg", "[chamber]", hline, default=0.0),
        range_tolerance_m=check.number(chamber_t, "range_tolerance_m", "[chamber]", hline, default=0.0,
                                       nonnegative=True),
    )

    gate_t = doc.get("gate", {}) if isinstance(doc.get("gate", {}), dict) else {}
    gline = _section_line(text, "gate")
    trim_ghz = check.number(gate_t, "trim_ghz", "[gate]", gline, nonnegative=True)
    pad = check.number(gate_t, "pad_factor", "[gate]", gline, default=4, positive=True)
    if pad != int(pad):
        check.problem(f"[gate]: 'pad_factor' must be a whole number, got {pad:g}", _key_line(text, "pad_factor", gline))
        pad = 4
    gate = GateSettings(
        span_m=check.number(gate_t, "span_m", "[gate]", gline, positive=True),
        center_m=check.number(gate_t, "center_m", "[gate]", gline, positive=True),
        window=check.string(gate_t, "window", "[gate]", gline, default="kaiser", choices=WINDOWS),
        kaiser_beta=check.number(gate_t, "kaiser_beta", "[gate]", gline, default=6.0, nonnegative=True),
        pad_factor=max(1, int(pad)),
        edge_fraction=check.number(gate_t, "edge_fraction", "[gate]", gline, default=0.2, positive=True),
        trim_hz=None if trim_ghz is None else trim_ghz * 1e9,
    )
    if not 0 < gate.edge_fraction <= 1:
        check.problem("[gate]: 'edge_fraction' must lie in (0, 1]", _key_line(text, "edge_fraction", gline))

    band_t = doc.get("band", {}) if isinstance(doc.get("band", {}), dict) else {}
    bline = _section_line(text, "band")
    band_hz = None
    if band_t:
        start = check.number(band_t, "start_ghz", "[band]", bline, required=True, positive=True)
        stop = check.number(band_t, "stop_ghz", "[band]", bline, required=True, positive=True)
        if start is not None and stop is not None:
            if stop <= start:
                check.problem(f"[band]: stop_ghz ({stop:g}) must exceed start_ghz ({start:g})", bline)
            else:
                band_hz = (start * 1e9, stop * 1e9)

    parsed = _parse_targets(doc, text, check, chamber)
    targets = [t for t in parsed if not t.arm]
    arm = tuple(t for t in parsed if t.arm)
    manifest = Manifest(path=path, name=name or "", prototype=prototype or "", date=date,
                        chamber=chamber, gate=gate, band_hz=band_hz, targets=tuple(targets), text=text,
                        band_line=bline if band_t else None, arm_targets=arm)
    _check_relations(manifest, check)
    if arm:
        from .bistatic import check_arm_relations

        check_arm_relations(manifest, check)
    return manifest, check.problems


def _parse_targets(doc: dict, text: str, check: _Checker, chamber: Chamber) -> list[TargetSpec]:
    raw_targets = doc.get("target", [])
    lines = _target_lines(text)
    if not isinstance(raw_targets, list) or not all(isinstance(t, dict) for t in raw_targets):
        check.problem("'target' must be an array of tables ([[target]])", lines[0] if lines else None)
        return []
    if not raw_targets:
        check.problem("no [[target]] defined", None)
    targets: list[TargetSpec] = []
    seen: dict[str, int | None] = {}
    for i, t in enumerate(raw_targets):
        line = lines[i] if i < len(lines) else None
        label = f"target {_short(str(t.get('name', '#' + str(i + 1))))}"
        for key in t:
            if key not in _TARGET_KEYS:
                check.problem(f"{label}: unknown key '{key}'", _key_line(text, key, line))
        name = check.string(t, "name", label, line, required=True)
        role = check.string(t, "role", label, line, required=True, choices=ROLES)
        files = check.string(t, "files", label, line, required=True, limit=MAX_PATTERN_CHARS)
        check.free_text(t, "notes", label, line)
        if name is None or role is None or files is None:
            continue
        if name in seen:
            check.problem(f"duplicate target name '{name}' (first defined at line {seen[name]})", line)
            continue
        seen[name] = line
        param = t.get("parameter")
        if param is not None:
            param = _check_parameter(param, label, check, _key_line(text, "parameter", line))
        pol = check.string(t, "polarization", label, line, default="VV")
        if pol is not None and pol.upper() not in POLARIZATIONS:
            check.problem(f"{label}: polarization {pol!r} is not one of HH, VV, HV, VH",
                          _key_line(text, "polarization", line))
            pol = "VV"
        calibrates = t.get("calibrates")
        if calibrates is not None:
            if not isinstance(calibrates, list) or not all(
                    isinstance(c, str) and c.upper() in POLARIZATIONS for c in calibrates):
                check.problem(f"{label}: 'calibrates' must be a list of HH, VV, HV, VH",
                              _key_line(text, "calibrates", line))
                calibrates = None
            else:
                calibrates = tuple(c.upper() for c in calibrates)
        shape = _parse_shape(t, label, check, text, line)
        if role == "reference" and shape is None and "shape" not in t:
            check.problem(f"{label}: a reference needs a 'shape' and its dimensions", line)
        for key in ("background", "baseline", "revision"):
            if key in t and not isinstance(t[key], str):
                check.problem(f"{label}: '{key}' must be a string", _key_line(text, key, line))
            elif key in t and len(t[key]) > MAX_NAME_CHARS:
                check.problem(f"{label}: '{key}' is {len(t[key])} characters long, more than the limit of "
                              f"{MAX_NAME_CHARS}", _key_line(text, key, line))
                t = {k: v for k, v in t.items() if k != key}
        targets.append(TargetSpec(
            name=name, role=role, files=files, line=line, parameter=param,
            background=t.get("background") if isinstance(t.get("background"), str) else None,
            baseline=t.get("baseline") if isinstance(t.get("baseline"), str) else None,
            revision=t.get("revision") if isinstance(t.get("revision"), str) else None,
            range_m=check.number(t, "range_m", label, line, default=chamber.range_m, positive=True),
            size_m=check.number(t, "size_m", label, line, positive=True),
            gate_span_m=check.number(t, "gate_span_m", label, line, positive=True),
            angle_deg=check.number(t, "angle_deg", label, line, default=0.0),
            polarization=(pol or "VV").upper(),
            calibrates=calibrates,
            shape=shape,
            specular_deg=check.number(t, "specular_deg", label, line, default=0.0),
            bistatic_deg=check.number(t, "bistatic_deg", label, line, default=chamber.bistatic_deg),
            arm="{bistatic}" in files or "bistatic_deg" in t,
            tolerances=_tolerances(t, shape, label, check, text, line),
            range_tolerance_m=check.number(t, "range_tolerance_m", label, line, default=chamber.range_tolerance_m,
                                           nonnegative=True),
        ))
    return targets


def _parameter_name(name) -> str | None:
    """The canonical spelling of an S-parameter name (S21, or S10,11 past port 9); None if it is none."""
    from .touchstone import parameter_index

    try:
        i, j = parameter_index(name)
    except InputError:
        return None
    return f"S{i + 1}{j + 1}" if i < 9 and j < 9 else f"S{i + 1},{j + 1}"


def _check_parameter(param, label, check: _Checker, line):
    if isinstance(param, str):
        name = _parameter_name(param)
        if name is None:
            check.problem(f"{label}: parameter {param!r} is not an S-parameter such as S11, S21 or S10,11", line)
            return None
        return name
    if isinstance(param, dict):
        out = {}
        for pol, p in param.items():
            if pol.upper() not in POLARIZATIONS or not isinstance(p, str) or _parameter_name(p) is None:
                check.problem(f"{label}: parameter table entry {pol} = {p!r} is not POL = \"Sij\"", line)
                return None
            out[pol.upper()] = _parameter_name(p)
        return out
    check.problem(f"{label}: parameter must be a string like \"S21\" or a table of polarizations", line)
    return None


def _tolerances(t: dict, shape, label: str, check: "_Checker", text: str, line: int | None) -> dict[str, float]:
    """{dimension key: tolerance m} from the optional ``<dimension>_tolerance_m`` keys of a shape."""
    out = {}
    for key, dim in TOLERANCE_KEYS.items():
        if key not in t:
            continue
        if shape is None or dim not in shape:
            check.problem(f"{label}: '{key}' given, but the target has no '{dim}'", _key_line(text, key, line))
            continue
        value = check.number(t, key, label, line, nonnegative=True)
        if value:
            out[dim] = value
    return out


def _parse_shape(t: dict, label: str, check: _Checker, text: str, line: int | None):
    if "shape" not in t:
        dims = [k for k in t if k in {"radius_m", "width_m", "height_m", "length_m", "fold_m", "face_m", "edge_m"}]
        if dims:
            check.problem(f"{label}: '{dims[0]}' given without a 'shape'", _key_line(text, dims[0], line))
        return None
    kind = t["shape"]
    sline = _key_line(text, "shape", line)
    if not isinstance(kind, str) or kind not in SHAPES:
        check.problem(f"{label}: unknown shape {kind!r} (known: {', '.join(SHAPES)})", sline)
        return None
    spec: dict[str, Any] = {"shape": kind}
    for key in SHAPE_KEYS[kind]:
        if key not in t and key in SHAPE_OPTIONAL_DEFAULTS:
            spec[key] = SHAPE_OPTIONAL_DEFAULTS[key]
            continue
        if key in ("orientation", "kind", "file"):
            choices = {"orientation": ("upright", "flat"), "kind": ("triangular", "square")}.get(key)
            value = check.string(t, key, label, line, required=True, choices=choices)
        else:
            value = check.number(t, key, label, line, required=True,
                                 positive=key != "roll_deg")
        if value is None:
            return None
        spec[key] = value
    if kind == "table":
        spec["file"] = str((check.path.parent / spec["file"]))
    return spec


def _check_relations(m: Manifest, check: _Checker) -> None:
    names = {t.name: t for t in m.targets}
    backgrounds = m.by_role("background")
    for t in m.targets:
        if t.role != "background":
            if t.background is not None:
                bg = names.get(t.background)
                if bg is None:
                    check.problem(f"target {t.name}: background '{t.background}' is not a target", t.line)
                elif bg.role != "background":
                    check.problem(f"target {t.name}: background '{t.background}' has role {bg.role}, not background", t.line)
            elif len(backgrounds) > 1:
                check.problem(f"target {t.name}: several backgrounds exist; name one with 'background'", t.line)
        elif t.background is not None:
            check.problem(f"target {t.name}: a background cannot have a 'background'", t.line)
        if t.baseline is not None:
            base = names.get(t.baseline)
            if t.role != "subject":
                check.problem(f"target {t.name}: only a subject can have a 'baseline'", t.line)
            elif base is None:
                check.problem(f"target {t.name}: baseline '{t.baseline}' is not a target", t.line)
            elif base.role != "subject":
                check.problem(f"target {t.name}: baseline '{t.baseline}' is a {base.role}, not a subject", t.line)
            elif base.name == t.name:
                check.problem(f"target {t.name}: a subject cannot be its own baseline", t.line)
        if t.role != "background" and m.gate.center_m is None and m.gate_center_m(t) <= 0:
            check.problem(f"target {t.name}: gate centre range_m + chamber.offset_m = {t.range_m:g} + "
                          f"{m.chamber.offset_m:g} = {m.gate_center_m(t):g} m is not a positive range (as "
                          f"[gate].center_m must be)", t.line)
        if t.calibrates is not None and t.role != "reference":
            check.problem(f"target {t.name}: only a reference has 'calibrates'", t.line)
