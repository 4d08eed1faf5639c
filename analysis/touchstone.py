"""Touchstone reader and writer (versions 1.0, 2.0 and 2.1 of the open IBIS Touchstone specification).

Conventions
-----------
* Frequencies are returned in Hz (``frequency_hz``), whatever unit the file uses.
* ``s[:, i-1, j-1]`` is Sij: the wave into port i from port j (row i, column j).
* ``z0`` holds one real reference resistance per port, in ohm.
* Version 1.0 two-port rows are ``f S11 S21 S12 S22``; version 2 two-port rows follow
  ``[Two-Port Data Order]`` (``12_21`` or ``21_12``; ``21_12`` when the keyword is absent,
  as in version 1). Files of three or more ports are row-major and may be wrapped over several
  lines; a frequency row always starts on a new line. 1 to ``MAX_PORTS`` (99) ports are read.
* Y and Z files are converted to S with scikit-rf's ``y2s`` / ``z2s`` (power-wave definition):
  ``S = Z0^(-1/2) (Z - Z0) (Z + Z0)^-1 Z0^(1/2)`` with ``Z0 = diag(z0)``, which is
  ``(Z - Z0)(Z + Z0)^-1`` when all ports share one reference. In version 1.0 files Y and Z
  values are normalised to the option line's R (Touchstone specification): ``Z = z R`` and
  ``Y = y / R``; version 2 files hold them in ohm and siemens.
* H and G (hybrid two-port) files are refused with an ``InputError``: convert them to S first.
* Noise parameters (the version 1 two-port noise block, which starts where a frequency row's
  frequency is not above the previous row's, and version 2 ``[Noise Data]``) and
  ``[Begin Information]`` blocks are skipped.
* Mixed-mode files (``[Mixed-Mode Order]``) are refused.

Real-world tolerances (each but the first gives a warning in ``Touchstone.warnings``): comments
that are not UTF-8 are decoded as Latin-1 (non-text anywhere else is still refused); an option
line whose ``R`` has no value takes 50 ohm; version 2 data that follow ``[Number of
Frequencies]`` without a ``[Network Data]`` keyword are read as network data.

Every problem with a file raises ``cloakrcs.errors.InputError`` naming the file and, where
there is one, the line. A file larger than a Touchstone file of its port count can be
(:func:`max_file_bytes`) is refused before it is read, and so is anything but a regular file.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import re
import stat
import tempfile
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from itertools import chain, repeat

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = [
    "Touchstone",
    "read_touchstone",
    "parameter_index",
    "write_touchstone",
    "file_sha256",
    "read_many",
    "max_file_bytes",
    "MAX_PORTS",
    "MAX_FREQUENCIES",
]

_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_UNIT_NAMES = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}
_PARAMETERS = ("s", "y", "z", "h", "g")
_FORMATS = ("ri", "ma", "db")
_MATRIX_FORMATS = ("full", "lower", "upper")
_EXTENSION = re.compile(r"\.[syzhg](\d+)p$", re.IGNORECASE)
# S21 (one digit per port), or S10,11 / S10_11 when a port number has two digits
_PARAMETER_NAME = re.compile(r"^\s*S\s*(?:(\d)\s*(\d)|(\d{1,2})\s*[,_]\s*(\d{1,2}))\s*$", re.IGNORECASE)
# The specification sets no largest port count (from memory: checked against no printed limit);
# 99 keeps every port number to two digits, so that every Sij can be named (S10,11).
MAX_PORTS = 99
# Plausible largest sweep: VNAs sweep up to about 10^5 points (from memory); simulators write
# more. 10^6 frequencies leave room for both; a file is sized for it before it is read.
MAX_FREQUENCIES = 1_000_000
_BYTES_PER_VALUE = 32  # "-1.2345678901234567e-05" and its separator, with room for alignment
_HEADER_BYTES = 16 << 20  # comments, [Begin Information] and noise data
_PROBE_BYTES = 1 << 20  # where a version 2 file's [Number of Ports] is looked for before reading
_PORTS_KEYWORD = re.compile(rb"\[\s*number\s+of\s+ports\s*\]\s*(\d+)", re.IGNORECASE)
_DEFAULT_R_OHM = 50.0
_NUMERIC_BYTES = b"0123456789+-.eE \n"
# below this many files a process pool costs more than it saves (common practice)
_POOL_MIN_FILES = 16


@dataclass(frozen=True, eq=False)
class Touchstone:
    """One Touchstone file as arrays.

    Attributes
    ----------
    frequency_hz : numpy.ndarray
        float64 (nf,), Hz, strictly increasing.
    s : numpy.ndarray
        complex128 (nf, n_ports, n_ports); ``s[:, i-1, j-1]`` is Sij (into port i from port j).
    z0 : numpy.ndarray
        float64 (n_ports,), reference resistance per port in ohm.
    version : str
        "1.0", "2.0" or "2.1".
    source_parameter : str
        "S", "Y" or "Z" as in the file (the data are converted to S).
    comments : tuple of str
        The file's comments, without their ``!``.
    warnings : tuple of str
        One line each, ``path:line: what was tolerated`` (see the module's real-world tolerances).
    """

    frequency_hz: np.ndarray
    s: np.ndarray
    z0: np.ndarray
    version: str
    source_parameter: str
    comments: tuple[str, ...]
    warnings: tuple[str, ...] = ()

    @property
    def n_ports(self) -> int:
        return int(self.s.shape[1])


def parameter_index(name: str) -> tuple[int, int]:
    """Zero-based (row, column) of an S-parameter name.

    Parameters
    ----------
    name : str
        ``"Sij"`` with one-digit ports (``"S21"``), or ``"Si,j"`` / ``"Si_j"`` when a port number
        has two digits (``"S10,11"``). Sij is the wave into port i from port j.

    Returns
    -------
    tuple of int
        ``(i - 1, j - 1)``: ``"S21"`` -> ``(1, 0)``.
    """
    m = _PARAMETER_NAME.match(str(name))
    if m:
        i, j = (int(g) for g in (m.groups()[:2] if m.group(1) else m.groups()[2:]))
        if 1 <= i <= MAX_PORTS and 1 <= j <= MAX_PORTS:
            return i - 1, j - 1
    raise InputError(f"bad S-parameter name {name!r}: expected Sij with ports 1..9, e.g. S21, "
                     f"or Si,j for ports up to {MAX_PORTS}, e.g. S10,11")


def max_file_bytes(n_ports: int) -> int:
    """Largest file, in bytes, a Touchstone file of ``n_ports`` ports is read from.

    ``MAX_FREQUENCIES`` rows of 1 + 2 n^2 numbers at 32 bytes a number, plus 16 MiB for
    comments, information and noise blocks.
    """
    return _HEADER_BYTES + MAX_FREQUENCIES * (1 + 2 * n_ports * n_ports) * _BYTES_PER_VALUE


# --------------------------------------------------------------------------- reading: bytes to text


def _ports_from_extension(path: str) -> int | None:
    m = _EXTENSION.search(path)
    return int(m.group(1)) if m else None


def _size_limit(path: str, fh, n_ports: int | None) -> tuple[int, str]:
    """(byte limit, what it is for): from the extension, the caller, or a version 2 header."""
    ports = _ports_from_extension(path) or n_ports
    if ports is None:
        m = _PORTS_KEYWORD.search(fh.read(_PROBE_BYTES))
        fh.seek(0)
        ports = int(m.group(1)) if m else 1
    ports = min(max(ports, 1), MAX_PORTS)
    return max_file_bytes(ports), f"{ports}-port"


def _read_bytes(path: str, n_ports: int | None) -> bytes:
    """The raw bytes of a regular file no larger than a Touchstone file of its port count can be."""
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise InputError("file does not exist", path=path) from None
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError("is a directory, not a Touchstone file", path=path)
    if not stat.S_ISREG(info.st_mode):  # a FIFO would block, /dev/zero never ends
        raise InputError("is not a regular file (a FIFO, device or socket): not a Touchstone file", path=path)
    try:
        with open(path, "rb") as fh:
            limit, what = _size_limit(path, fh, n_ports)
            too_big = (f"larger than the {limit / 1e6:.0f} MB limit for a {what} Touchstone file (up to "
                       f"{MAX_FREQUENCIES:,} frequencies at {_BYTES_PER_VALUE} bytes a number): not read")
            if info.st_size > limit:
                raise InputError(f"{info.st_size / 1e6:.0f} MB is {too_big}", path=path)
            chunks, total = [], 0
            while total <= limit:  # in blocks: the file may grow while it is read
                block = fh.read(min(1 << 24, limit + 1 - total))
                if not block:
                    break
                chunks.append(block)
                total += len(block)
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None
    if total > limit:
        raise InputError(f"the file is {too_big}", path=path)
    return b"".join(chunks)


def _decode_lenient(raw: bytes, path: str) -> str:
    """Text of a file that is not UTF-8 throughout: comments UTF-8 else Latin-1, the rest strict."""
    out = []
    for k, line in enumerate(raw.split(b"\n")):
        try:
            out.append(line.decode("utf-8"))
            continue
        except UnicodeDecodeError:
            pass
        head, bang, comment = line.partition(b"!")
        try:
            head_text = head.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(f"binary or non-UTF-8 content (byte 0x{head[exc.start]:02x}) outside a comment: "
                             "not a Touchstone text file", path=path, line=k + 1) from None
        try:
            comment_text = comment.decode("utf-8")
        except UnicodeDecodeError:
            comment_text = comment.decode("latin-1")  # free text, as some instruments write it
        out.append(head_text + bang.decode() + comment_text)
    return "\n".join(out)


def _read_text(path: str, n_ports: int | None = None) -> str:
    """The file's text, LF line endings, byte-order mark dropped; binary or oversized files refused."""
    raw = _read_bytes(path, n_ports)
    nul = raw.find(b"\x00")
    if nul >= 0:
        raise InputError("binary content (NUL byte): not a Touchstone text file",
                         path=path, line=raw.count(b"\n", 0, nul) + 1)
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        text = _decode_lenient(raw, path)
    if "\r" in text:  # CRLF, old Mac CR-only and mixed line endings all become LF
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    return text


# --------------------------------------------------------------------------- reading: header


def _number(token: str, what: str, path: str, line: int) -> float:
    try:
        value = float(token)
    except ValueError:
        raise InputError(f"{what}: {token!r} is not a number", path=path, line=line) from None
    if not np.isfinite(value) or "_" in token:
        raise InputError(f"{what}: {token!r} is not a finite number", path=path, line=line)
    return value


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def _parse_option_line(text: str, path: str, line: int | None, warn=None) -> dict:
    """``# <unit> <parameter> <format> R <n> [<n> ...]`` in any order, case-insensitive.

    ``R`` with no value takes 50 ohm and calls ``warn(message, line)``.
    """
    opts: dict = {}
    toks = text[1:].split()
    k = 0
    while k < len(toks):
        tok = toks[k].lower()
        kind = ("unit" if tok in _UNITS else "parameter" if tok in _PARAMETERS
                else "format" if tok in _FORMATS else "r" if tok == "r" else None)
        if kind is None:
            raise InputError(f"option line: unknown token {toks[k]!r} (expected a unit Hz/kHz/MHz/GHz, "
                             "a parameter S/Y/Z, a format RI/MA/DB or R <ohm>)", path=path, line=line)
        if kind in opts:
            raise InputError(f"option line: {kind if kind != 'r' else 'R'} given twice ({toks[k]!r})",
                             path=path, line=line)
        if kind == "r":
            values = []
            while k + 1 < len(toks) and _is_number(toks[k + 1]):  # one value, or one per port (v2.1)
                k += 1
                values.append(_number(toks[k], "option line R", path, line))
            if not values:
                if warn is not None:
                    warn(f"option line: R has no value: taken as the default {_DEFAULT_R_OHM:g} ohm", line)
                values = [_DEFAULT_R_OHM]
            if min(values) <= 0:
                raise InputError("option line: the reference resistance R must be positive",
                                 path=path, line=line)
            opts["r"] = values
        else:
            opts[kind] = tok
        k += 1
    opts.setdefault("unit", "ghz")
    opts.setdefault("parameter", "s")
    opts.setdefault("format", "ma")
    opts.setdefault("r", [_DEFAULT_R_OHM])
    if opts["parameter"] in ("h", "g"):
        raise InputError(f"{opts['parameter'].upper()} (hybrid) parameters are not supported: "
                         "convert the file to S, Y or Z", path=path, line=line)
    return opts


def _int_keyword(arg: str, name: str, path: str, line: int, minimum: int) -> int:
    try:
        value = int(arg.split()[0])
    except (ValueError, IndexError):
        raise InputError(f"[{name}] needs a whole number, got {arg!r}", path=path, line=line) from None
    if value < minimum:
        raise InputError(f"[{name}] must be at least {minimum}, got {value}", path=path, line=line)
    return value


_UNIT_EXPONENT = {"hz": 0, "khz": 3, "mhz": 6, "ghz": 9}
_MAX_EXACT = 1e12  # up to 12 significant digits: integers this large are exact, a few ulp stay below 1e-3


def frequency_hz_from_file(values, unit: str) -> np.ndarray:
    """Frequencies in Hz from the numbers a file holds in ``unit`` (hz, khz, mhz, ghz), on the
    decimal grid those numbers state.

    A plain product is off in the last binary digit (8.544 GHz * 1e9 = 8544000000.000001 Hz).
    Instead the fewest decimals d (0 to 15) that hold every value (to a few units in the last
    binary place) are found, each value becomes the integer n = round(v 10^d), and
    n 10^(e - d) (e the unit's power of ten) is one correctly rounded multiplication or
    division of exact numbers: the double nearest to the decimal the file states. Values
    with more than 12 significant digits are scaled plainly.
    """
    v = np.asarray(values, dtype=float)
    e = _UNIT_EXPONENT[str(unit).lower()]
    with np.errstate(over="ignore"):  # a value too large for Hz becomes inf; the reader refuses it
        return _on_decimal_grid(v, e)


def _on_decimal_grid(v: np.ndarray, e: int) -> np.ndarray:
    if v.size == 0 or not np.all(np.isfinite(v)):
        return v * 10.0 ** e
    for d in range(16):
        x = v * 10.0 ** d
        if np.max(np.abs(x)) >= _MAX_EXACT:
            break
        n = np.rint(x)
        if np.all(np.abs(x - n) <= 1e-15 * np.abs(x)):  # within the double's own rounding (a few ulp)
            return n * 10.0 ** (e - d) if e >= d else n / 10.0 ** (d - e)
    return v * 10.0 ** e



@dataclass
class _Scan:
    """What a pass over a file's lines found: header values, data lines, comments, warnings."""

    path: str
    version: str = "1.0"
    opts: dict | None = None
    option_line: int | None = None
    ports: int | None = None  # [Number of Ports]
    ports_line: int | None = None
    nfreq: int | None = None  # [Number of Frequencies]
    nfreq_line: int | None = None
    order: str = "21_12"
    matrix: str = "full"
    reference: list[float] | None = None
    ref_pending: int = 0
    ref_line: int | None = None
    section: str = "header"  # v2: header -> network -> noise; "info" inside [Begin Information]
    seen_content: bool = False
    done: bool = False  # [End]
    comments: list[str] = field(default_factory=list)
    data: list[str] = field(default_factory=list)
    data_lines: list[int] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    def fail(self, message: str, line: int | None = None):
        raise InputError(message, path=self.path, line=line)

    def warn(self, message: str, line: int | None = None) -> None:
        self.warnings.append(str(InputError(message, path=self.path, line=line)))

    # ---- one line of each kind

    def keyword(self, s: str, lineno: int) -> None:
        close = s.find("]")
        if close < 0:
            self.fail(f"keyword without closing bracket: {s!r}", lineno)
        name = " ".join(s[1:close].split()).lower()
        arg = s[close + 1:].strip()
        if self.section == "info":
            if name == "end information":
                self.section = "header"
            return
        if name == "version":
            if self.seen_content:
                self.fail("[Version] must come before the option line and the data", lineno)
            if arg not in ("2.0", "2.1"):
                self.fail(f"unsupported [Version] {arg!r} (expected 2.0 or 2.1)", lineno)
            self.version, self.seen_content = arg, True
            return
        if self.version == "1.0":
            self.fail(f"keyword [{s[1:close]}] in a version 1 file (a version 2 file starts with [Version])", lineno)
        self.reference_complete()
        if name == "number of ports":
            self.ports, self.ports_line = _int_keyword(arg, "Number of Ports", self.path, lineno, 1), lineno
        elif name == "two-port data order":
            self.order = arg.split()[0] if arg else ""
            if self.order not in ("12_21", "21_12"):
                self.fail(f"[Two-Port Data Order] must be 12_21 or 21_12, got {arg!r}", lineno)
        elif name == "number of frequencies":
            self.nfreq = _int_keyword(arg, "Number of Frequencies", self.path, lineno, 1)
            self.nfreq_line = lineno
        elif name == "number of noise frequencies":
            _int_keyword(arg, "Number of Noise Frequencies", self.path, lineno, 0)
        elif name == "reference":
            if self.ports is None:
                self.fail("[Reference] before [Number of Ports]", lineno)
            self.reference, self.ref_pending, self.ref_line = [], self.ports, lineno
            self.reference_values(arg, lineno)
        elif name == "matrix format":
            self.matrix = arg.split()[0].lower() if arg else ""
            if self.matrix not in _MATRIX_FORMATS:
                self.fail(f"[Matrix Format] must be Full, Lower or Upper, got {arg!r}", lineno)
        elif name in ("network data", "noise data", "begin information"):
            self.section = {"network data": "network", "noise data": "noise", "begin information": "info"}[name]
        elif name == "end":
            self.done = True
        elif name == "mixed-mode order":
            self.fail("mixed-mode files ([Mixed-Mode Order]) are not supported", lineno)
        elif name == "end information":
            self.fail("[End Information] without [Begin Information]", lineno)
        else:
            self.fail(f"unknown keyword [{s[1:close]}]", lineno)

    def option(self, s: str, lineno: int) -> None:
        if self.opts is not None:
            self.fail(f"second option line (the first is on line {self.option_line})", lineno)
        if self.data:
            self.fail("option line after the data", lineno)
        self.opts = _parse_option_line(s, self.path, lineno, self.warn)
        self.option_line, self.seen_content = lineno, True

    def reference_values(self, text: str, lineno: int) -> None:
        """[Reference] values, on its line or continued on the following ones."""
        for tok in text.split():
            if not self.ref_pending:
                self.fail(f"[Reference] holds more than {self.ports} values", lineno)
            self.reference.append(_number(tok, "[Reference]", self.path, lineno))
            self.ref_pending -= 1

    def reference_complete(self) -> None:
        if self.ref_pending:
            self.fail(f"[Reference] holds fewer than {len(self.reference) + self.ref_pending} values", self.ref_line)

    def data_allowed(self, lineno: int) -> None:
        """Refuse version 2 data outside [Network Data]; after [Number of Frequencies], warn and read."""
        if self.version == "1.0" or self.section == "network":
            return
        if self.nfreq is None:
            self.fail("data before [Network Data]", lineno)
        self.warn("network data follow [Number of Frequencies] without a [Network Data] keyword: "
                  "read as network data", lineno)
        self.section = "network"

    # ---- the whole file

    def scan(self, lines: list[str]) -> "_Scan":
        n_lines = len(lines)
        i = 0
        while i < n_lines and not self.done:
            raw = lines[i]
            i += 1
            lineno = i
            if "!" in raw:
                raw, _, comment = raw.partition("!")
                comment = comment.strip()
                if comment:
                    self.comments.append(comment)
            s = raw.strip()
            if not s:
                continue
            if s[0] == "[":
                self.keyword(s, lineno)
                continue
            if self.section == "info":
                continue
            if s[0] == "#":
                self.option(s, lineno)
                continue
            if self.ref_pending:
                self.reference_values(s, lineno)
                continue
            if self.section == "noise":
                continue
            self.data_allowed(lineno)
            self.seen_content = True
            self.data.append(s)
            self.data_lines.append(lineno)
            while i < n_lines:  # plain data lines, the bulk of a file: the quick way
                raw = lines[i]
                if "!" in raw or "#" in raw or "[" in raw:
                    break
                i += 1
                raw = raw.strip()
                if raw:
                    self.data.append(raw)
                    self.data_lines.append(i)
        self.reference_complete()
        if self.opts is None:
            if self.version != "1.0":  # RI data read with the MA default would be silently wrong
                self.fail(f"no option line (# <unit> <parameter> <format> R <ohm>): version {self.version} "
                          "files must have one (Touchstone specification); add it before the data")
            self.opts = _parse_option_line("#", self.path, None)
        return self


# --------------------------------------------------------------------------- reading: checks and numbers


def _port_count(scan: _Scan, n_ports: int | None) -> int:
    """Ports from the extension (version 1) or [Number of Ports] (version 2), checked against both."""
    path = scan.path
    ext_ports = _ports_from_extension(path)
    if scan.version == "1.0":
        ports = ext_ports if ext_ports is not None else n_ports
        if ports is None:
            scan.fail("the extension does not give the port count of this version 1 file (expected .s1p, .s2p, ... .s99p)")
        if n_ports is not None and n_ports != ports:
            scan.fail(f"the extension says {ports} ports but {n_ports} were asked for")
    else:
        if scan.ports is None:
            scan.fail("[Number of Ports] is missing")
        ports = scan.ports
        for expected, what in ((ext_ports, "the extension"), (n_ports, "the caller")):
            if expected is not None and expected != ports:
                scan.fail(f"[Number of Ports] is {ports} but {what} says {expected}", scan.ports_line)
    if not 1 <= ports <= MAX_PORTS:
        scan.fail(f"{ports} ports: only 1 to {MAX_PORTS} ports are supported", scan.ports_line)
    return ports


def _reference_resistances(scan: _Scan, ports: int) -> np.ndarray:
    """z0 per port (ohm) from [Reference], else the option line's R (one, or one per port)."""
    if scan.reference is not None:
        z0 = np.array(scan.reference, dtype=float)
        if np.any(z0 <= 0):
            scan.fail("[Reference] resistances must be positive", scan.ref_line)
        return z0
    r = scan.opts["r"]
    if len(r) not in (1, ports):
        scan.fail(f"option line gives {len(r)} reference resistances for {ports} ports", scan.option_line)
    return np.broadcast_to(np.array(r, dtype=float), (ports,)).copy()


def _fast_table(data: list[str], width: int) -> np.ndarray | None:
    """Rows of plain numbers, one frequency per line, through pandas' C parser; None when
    the text is anything else (wrapped rows, noise block, bad tokens): then _checked_table."""
    joined = "\n".join(data).replace("\t", " ")
    if "  " in joined:
        return None
    try:
        raw = joined.encode("ascii")
        if raw.translate(None, _NUMERIC_BYTES):
            return None  # letters (nan, inf, True ...), quotes and the like
        table = pd.read_csv(io.BytesIO(raw), sep=" ", header=None, names=range(width), index_col=False,
                            dtype=np.float64, engine="c", quoting=csv.QUOTE_NONE, na_filter=False).to_numpy()
    except (ValueError, UnicodeEncodeError, pd.errors.ParserError):
        return None
    if table.shape != (len(data), width) or not np.isfinite(table).all():
        return None
    return table


def _noise_block_start(parts, counts, width, data_lineno, path) -> int | None:
    """Index of the data line where a version 1 two-port noise block starts, or None.

    A noise row has 5 values and starts where a frequency row would; it is the noise block when
    its frequency is not above the previous frequency row's (Touchstone specification, version 1
    noise parameters). Wrapped network rows (5 + 4 values) are rows, not noise.
    """
    offsets = (np.cumsum(counts) - counts) % width  # valid up to the first noise line
    prev_freq = None
    for k in np.flatnonzero(offsets == 0):
        freq = _number(parts[k][0], "frequency", path, data_lineno[k])
        if counts[k] == 5 and prev_freq is not None and freq <= prev_freq:
            return int(k)
        prev_freq = freq
    return None


def _checked_table(data, data_lineno, width, pairs, v1_two_port, path):
    """Frequency rows from data lines, checking every count and token; rows may wrap over lines.

    Returns (rows (nf, width), index of the data line where each row starts). A version 1
    two-port noise block (see :func:`_noise_block_start`) ends the network data.
    """
    parts = [d.split() for d in data]
    counts = np.fromiter(map(len, parts), dtype=np.int64, count=len(parts))
    if width > 3 and counts.size > 1 and np.all(counts == 3):
        raise InputError(f"every data row holds 3 values, as a one-port file does (the frequency and one complex "
                         f"pair), but the file declares more ports ({width} numbers per frequency): a one-port sweep "
                         f"must be named .s1p",
                         path=path, line=data_lineno[0])
    if v1_two_port and np.any(counts == 5):
        k = _noise_block_start(parts, counts, width, data_lineno, path)
        if k is not None:
            parts, counts = parts[:k], counts[:k]
    ends = np.cumsum(counts)
    offsets = (ends - counts) % width
    bad = np.flatnonzero(offsets + counts > width)
    row_starts = np.flatnonzero(offsets == 0)
    what = f"{width} numbers per frequency (the frequency and {pairs} complex pairs)"
    if bad.size:
        k = int(bad[0])
        if offsets[k] == 0:
            raise InputError(f"wrong count of values: this row has {counts[k]}, expected {what}",
                             path=path, line=data_lineno[k])
        start = int(row_starts[np.searchsorted(row_starts, k, side="right") - 1])
        raise InputError(f"wrong count of values: the frequency row starting on this line has "
                         f"{offsets[k]} values before line {data_lineno[k]} brings {counts[k]} more, "
                         f"expected {what}", path=path, line=data_lineno[start])
    if ends[-1] % width:
        raise InputError(f"truncated final row: {ends[-1] % width} values where {what}",
                         path=path, line=data_lineno[int(row_starts[-1])])
    tokens = list(chain.from_iterable(parts))
    try:
        values = np.array(tokens, dtype=float)
    except ValueError:
        values = None
    if values is None or any("_" in d for d in data):
        for toks, ln in zip(parts, data_lineno):
            for tok in toks:
                if "_" in tok:
                    raise InputError(f"network data: {tok!r} is not a number", path=path, line=ln)
                _number(tok, "network data", path, ln)
    finite = np.isfinite(values)
    if not finite.all():
        k = int(np.argmin(finite))
        ln = data_lineno[int(np.searchsorted(ends, k, side="right"))]
        raise InputError(f"network data: {tokens[k]!r} is not a finite number (NaN or Inf)",
                         path=path, line=ln)
    return values.reshape(-1, width), row_starts


def _network_rows(scan: _Scan, ports: int, pairs: int) -> tuple[np.ndarray, np.ndarray]:
    """(rows (nf, 1 + 2 pairs) of numbers as written, the line each row starts on)."""
    if not scan.data:
        scan.fail("no network data in the file")
    width = 1 + 2 * pairs
    rows = _fast_table(scan.data, width)
    if rows is not None:
        row_starts = np.arange(len(scan.data))
    else:
        rows, row_starts = _checked_table(scan.data, scan.data_lines, width, pairs,
                                          scan.version == "1.0" and ports == 2, scan.path)
    return rows, np.asarray(scan.data_lines)[row_starts]


def _frequencies_hz(scan: _Scan, rows: np.ndarray, row_lines: np.ndarray) -> np.ndarray:
    """The first column in Hz: finite, non-negative, strictly increasing, as many as announced."""
    unit = scan.opts["unit"]
    freq = frequency_hz_from_file(rows[:, 0], unit)  # on the decimal grid the file states
    if not np.all(np.isfinite(freq)):
        k = int(np.argmax(~np.isfinite(freq)))
        scan.fail(f"frequency {rows[k, 0]:g} {unit} is too large", int(row_lines[k]))
    if freq[0] < 0:
        scan.fail(f"negative frequency {rows[0, 0]:g}", int(row_lines[0]))
    step = np.diff(freq)
    if np.any(step <= 0):
        k = int(np.argmax(step <= 0)) + 1
        kind = "duplicated" if step[k - 1] == 0 else "decreasing"
        scan.fail(f"frequencies must increase: {rows[k, 0]:g} is {kind} after {rows[k - 1, 0]:g}",
                  int(row_lines[k]))
    if scan.nfreq is not None and scan.nfreq != len(freq):
        scan.fail(f"[Number of Frequencies] is {scan.nfreq} but the file holds {len(freq)}", scan.nfreq_line)
    return freq


def _complex_values(scan: _Scan, rows: np.ndarray, row_lines: np.ndarray) -> np.ndarray:
    """The pairs as complex numbers (nf, pairs) from RI, MA or DB (dB = 20 log10 |S|, angle in degrees)."""
    a, b = rows[:, 1::2], rows[:, 2::2]
    fmt = scan.opts["format"]
    if fmt == "ri":
        return a + 1j * b
    if fmt == "ma":
        return a * np.exp(1j * np.deg2rad(b))
    with np.errstate(over="ignore"):
        mag = 10.0 ** (a / 20.0)
    if not np.all(np.isfinite(mag)):
        r, c = np.argwhere(~np.isfinite(mag))[0]
        scan.fail(f"DB value {a[r, c]:g} overflows: |S| = 10^(dB/20) must stay below the largest "
                  f"floating-point number, so dB below {20 * np.log10(np.finfo(float).max):.0f}",
                  int(row_lines[r]))
    return mag * np.exp(1j * np.deg2rad(b))


def _matrices(scan: _Scan, flat: np.ndarray, ports: int) -> np.ndarray:
    """(nf, ports, ports) from the pairs in file order: Full (row-major; version 1 two-port
    21_12), or the Lower / Upper triangle of a reciprocal network."""
    nf = flat.shape[0]
    matrix = "full" if ports == 1 else scan.matrix
    if matrix == "full":
        mat = flat.reshape(nf, ports, ports)
        if ports == 2 and scan.order == "21_12":
            mat = mat.transpose(0, 2, 1)
        return np.ascontiguousarray(mat)
    mat = np.zeros((nf, ports, ports), dtype=complex)
    rr, cc = np.tril_indices(ports) if matrix == "lower" else np.triu_indices(ports)
    mat[:, rr, cc] = flat
    mat[:, cc, rr] = flat
    return mat


def _as_s(mat: np.ndarray, parameter: str, version: str, z0: np.ndarray) -> np.ndarray:
    """S from S, Y or Z (version 1 Y and Z are normalised to R); scikit-rf's z2s / y2s."""
    if parameter == "s":
        return mat
    if version == "1.0":  # normalised to R (Touchstone specification, version 1.0)
        mat = mat * z0[:, None] if parameter == "z" else mat / z0[:, None]
    from skrf.network import y2s, z2s

    nf, ports = mat.shape[:2]
    return (z2s if parameter == "z" else y2s)(mat, np.broadcast_to(z0, (nf, ports)))


def read_touchstone(path, n_ports: int | None = None) -> Touchstone:
    """Read a Touchstone file (v1.0, v2.0, v2.1; 1 to 99 ports) into S parameters and Hz.

    Parameters
    ----------
    path : str or os.PathLike
        The file. Version 1 takes the port count from the ``.sNp`` extension (or ``n_ports``
        when the name has none); version 2 from ``[Number of Ports]``.
    n_ports : int, optional
        Expected port count; must agree with the extension and ``[Number of Ports]``.

    Returns
    -------
    Touchstone
        Frequencies in Hz, S (converted from Y or Z when needed), z0 in ohm, comments and the
        warnings of anything tolerated.

    Raises
    ------
    InputError
        One line naming the file (and line) for every problem.
    """
    path = os.fspath(path)
    scan = _Scan(path).scan(_read_text(path, n_ports).split("\n"))
    ports = _port_count(scan, n_ports)
    z0 = _reference_resistances(scan, ports)
    pairs = ports * ports if scan.matrix == "full" or ports == 1 else ports * (ports + 1) // 2
    rows, row_lines = _network_rows(scan, ports, pairs)
    freq = _frequencies_hz(scan, rows, row_lines)
    mat = _matrices(scan, _complex_values(scan, rows, row_lines), ports)
    parameter = scan.opts["parameter"]
    return Touchstone(frequency_hz=freq, s=_as_s(mat, parameter, scan.version, z0), z0=z0,
                      version=scan.version, source_parameter=parameter.upper(),
                      comments=tuple(scan.comments), warnings=tuple(scan.warnings))


def _guarded(func, *args):
    """Pool worker wrapper: an InputError comes back as data so its path and line survive."""
    try:
        return func(*args)
    except InputError as err:
        return ("InputError", err.message, err.path, err.line)


def _map_files(func, arg_lists, workers: int | None):
    """func(*args) for each args tuple, in order; a process pool for many files on several cores."""
    cores = os.cpu_count() or 1
    workers = cores if workers is None else int(workers)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}")
    if workers == 1 or cores == 1 or len(arg_lists) < _POOL_MIN_FILES:
        return [func(*args) for args in arg_lists]
    workers = min(workers, len(arg_lists))
    chunk = max(1, len(arg_lists) // (workers * 4))
    with ProcessPoolExecutor(max_workers=workers) as pool:
        results = list(pool.map(_guarded, repeat(func), *zip(*arg_lists), chunksize=chunk))
    for res in results:
        if isinstance(res, tuple) and res and res[0] == "InputError":
            raise InputError(res[1], path=res[2], line=res[3])
    return results


def read_many(paths, n_ports: int | None = None, workers: int | None = None) -> list[Touchstone]:
    """Read many Touchstone files, in the order given.

    Parameters
    ----------
    paths : iterable of str or os.PathLike
    n_ports : int, optional
        As in :func:`read_touchstone`.
    workers : int, optional
        A process pool is used for many files on several cores; ``workers=1`` reads serially.

    Returns
    -------
    list of Touchstone

    Raises
    ------
    InputError
        Of the first failing file, in order.
    """
    return _map_files(read_touchstone, [(os.fspath(p), n_ports) for p in paths], workers)


@dataclass(frozen=True, eq=False)
class Echo:
    """The one S-parameter of a file that carries a target's echo, with the file's SHA-256."""

    frequency_hz: np.ndarray
    values: np.ndarray | None  # complex (nf,); None when the file has no such parameter
    n_ports: int
    parameter: str | None
    sha256: str
    warnings: tuple[str, ...] = ()  # the reader's, one line each


def read_echo(path, parameter: str | None = None) -> Echo:
    """Read a file and keep only the S-parameter that carries a target's echo.

    Parameters
    ----------
    path : str or os.PathLike
    parameter : str, optional
        ``"Sij"`` (see :func:`parameter_index`); default S11 for 1-port, S21 for 2-port files,
        none for more ports (``values`` is then None).

    Returns
    -------
    Echo
        ``frequency_hz`` (Hz), ``values`` (complex, or None when the file has no such
        parameter), ``n_ports``, ``parameter``, ``sha256`` of the file, reader ``warnings``.
    """
    ts = read_touchstone(path)
    name = parameter or {1: "S11", 2: "S21"}.get(ts.n_ports)
    values = None
    if name:
        i, j = parameter_index(name)
        if i < ts.n_ports and j < ts.n_ports:
            values = np.ascontiguousarray(ts.s[:, i, j])
    return Echo(ts.frequency_hz, values, ts.n_ports, name, file_sha256(path), ts.warnings)


def read_echoes(paths, parameters, workers: int | None = None) -> list[Echo]:
    """read_echo over many files (one parameter per file, or None), in order, on a process pool.

    Workers send back one complex vector per file instead of the whole matrix, and hash the
    file they have just read.
    """
    return _map_files(read_echo, [(os.fspath(p), q) for p, q in zip(paths, parameters)], workers)


def file_sha256(path) -> str:
    """Hex SHA-256 digest of a file's raw bytes (FIPS 180-4), read in 1 MiB blocks.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    str
        64 lowercase hex digits.
    """
    path = os.fspath(path)
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except FileNotFoundError:
        raise InputError("file does not exist", path=path) from None
    except IsADirectoryError:
        raise InputError("is a directory, not a file", path=path) from None
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None
    return digest.hexdigest()


# --------------------------------------------------------------------------- writing


def write_touchstone(path, frequency_hz, s, *, version="1.0", fmt="RI", unit="GHz", z0=50.0,
                     comments=(), two_port_order="12_21", matrix_format="Full", digits=12) -> None:
    """Write S parameters as a Touchstone file, atomically (temporary name, then rename).

    Parameters
    ----------
    path : str or os.PathLike
        ``.sNp`` for version 1 (N must match), ``.ts`` or ``.sNp`` for version 2.
    frequency_hz : array_like
        (nf,) Hz, non-negative, strictly increasing.
    s : array_like
        Complex (nf, n, n) with ``s[:, i-1, j-1]`` = Sij, or (nf,) for one port.
    version : {"1.0", "2.0", "2.1"}
        Version 1.0: two-port order always S11 S21 S12 S22, matrix Full, per-port z0 on the
        option line (as the 2.1 specification's version 1.1). Version 2: ``two_port_order``
        and ``matrix_format`` apply, per-port z0 goes in ``[Reference]``.
    fmt : {"RI", "MA", "DB"}
        Pair format (DB: 20 log10 |S| and the angle in degrees).
    unit : {"Hz", "kHz", "MHz", "GHz"}
    z0 : float or array_like
        Reference resistance(s), ohm: one, or one per port.
    comments : iterable of str
        Plain ASCII lines written as ``!`` comments.
    digits : int
        Significant digits of the values (frequencies keep at least 15). Rows wrap after each
        matrix row and after every 4 pairs (Touchstone specification).
    """
    path = os.fspath(path)
    version = str(version)
    if version not in ("1.0", "2.0", "2.1"):
        raise InputError(f"version must be 1.0, 2.0 or 2.1, got {version!r}", path=path)
    fmt_l = str(fmt).lower()
    if fmt_l not in _FORMATS:
        raise InputError(f"fmt must be RI, MA or DB, got {fmt!r}", path=path)
    unit_l = str(unit).lower()
    if unit_l not in _UNITS:
        raise InputError(f"unit must be Hz, kHz, MHz or GHz, got {unit!r}", path=path)
    matrix = str(matrix_format).lower()
    if matrix not in _MATRIX_FORMATS:
        raise InputError(f"matrix_format must be Full, Lower or Upper, got {matrix_format!r}", path=path)
    if two_port_order not in ("12_21", "21_12"):
        raise InputError(f"two_port_order must be 12_21 or 21_12, got {two_port_order!r}", path=path)
    digits = int(digits)
    if not 1 <= digits <= 17:
        raise InputError(f"digits must be 1 to 17, got {digits}", path=path)

    f = np.asarray(frequency_hz, dtype=float)
    s = np.asarray(s, dtype=complex)
    if s.ndim == 1:
        s = s[:, None, None]
    if f.ndim != 1 or f.size == 0 or s.ndim != 3 or s.shape[0] != f.size or s.shape[1] != s.shape[2]:
        raise InputError(f"shapes do not fit: frequency {f.shape}, s {s.shape} "
                         "(expected (nf,) and (nf, n, n) or (nf,))", path=path)
    ports = s.shape[1]
    if not 1 <= ports <= MAX_PORTS:
        raise InputError(f"{ports} ports: only 1 to {MAX_PORTS} are supported", path=path)
    if not (np.all(np.isfinite(f)) and np.all(np.isfinite(s))):
        raise InputError("frequency and s must be finite (no NaN or Inf)", path=path)
    if f[0] < 0 or np.any(np.diff(f) <= 0):
        raise InputError("frequencies must be non-negative and strictly increasing", path=path)
    z = np.asarray(z0)
    if np.iscomplexobj(z):
        if np.any(z.imag != 0):
            raise InputError("z0 must be real (Touchstone references are resistances)", path=path)
        z = z.real
    z = np.broadcast_to(z.astype(float), (ports,)) if z.ndim <= 1 and z.size in (1, ports) else None
    if z is None or np.any(z <= 0):
        raise InputError(f"z0 must be one positive resistance or one per port ({ports})", path=path)
    if version == "1.0":
        ext = _ports_from_extension(path)
        if ext is not None and ext != ports:
            raise InputError(f"the extension says {ext} ports but s has {ports}", path=path)
        if matrix != "full":
            raise InputError("version 1.0 files hold the full matrix only", path=path)
    if matrix != "full" and ports > 1 and not np.allclose(s, s.transpose(0, 2, 1), rtol=1e-9, atol=0):
        raise InputError(f"matrix_format {matrix_format} needs a symmetric (reciprocal) s: "
                         "use Full", path=path)
    if fmt_l == "db" and np.any(s == 0):
        raise InputError("a zero magnitude cannot be written in DB format", path=path)

    # ---- values in file order, one matrix row per text line (at most 4 pairs a line)
    if version == "1.0":
        order = "21_12"
    else:
        order = two_port_order
    mat = s.transpose(0, 2, 1) if ports == 2 and order == "21_12" else s
    if matrix == "full" or ports == 1:
        matrix = "full" if ports == 1 else matrix
        rr, cc = np.indices((ports, ports)).reshape(2, -1)
    else:
        rr, cc = np.tril_indices(ports) if matrix == "lower" else np.triu_indices(ports)
    flat = mat[:, rr, cc]
    if fmt_l == "ri":
        a, b = flat.real, flat.imag
    else:
        mag = np.abs(flat)
        a = mag if fmt_l == "ma" else 20.0 * np.log10(mag)
        b = np.angle(flat, deg=True)
    pairs = np.empty((f.size, 2 * flat.shape[1]))
    pairs[:, 0::2], pairs[:, 1::2] = a, b
    table = np.column_stack([f / _UNITS[unit_l], pairs])
    num = f"%.{digits}g"
    fnum = f"%.{max(digits, 15)}g"  # frequencies keep full precision: the grid must stay uniform
    if ports <= 2:
        row_fmt = " ".join([fnum] + [num] * (table.shape[1] - 1))
    else:  # a frequency row wraps after each matrix row, and after every 4 pairs within it
        lines = []
        for r in range(ports):
            n_in_row = int(np.count_nonzero(rr == r))
            for start in range(0, n_in_row, 4):
                cells = [num] * (2 * min(4, n_in_row - start))
                lines.append(" ".join(([fnum] if not lines else []) + cells))
        row_fmt = "\n".join(lines)
    body = "\n".join(row_fmt % tuple(row) for row in table.tolist())

    # ---- header
    head = []
    for c in comments:
        for part in str(c).splitlines() or [""]:
            head.append(("! " + part).rstrip())
    r_text = " ".join(num % v for v in (z[:1] if np.all(z == z[0]) or version != "1.0" else z))
    if version != "1.0":
        head.append(f"[Version] {version}")
    head.append(f"# {_UNIT_NAMES[unit_l]} S {fmt_l.upper()} R {r_text}")
    if version != "1.0":
        head.append(f"[Number of Ports] {ports}")
        if ports == 2:
            head.append(f"[Two-Port Data Order] {order}")
        head.append(f"[Number of Frequencies] {f.size}")
        if not np.all(z == z[0]):
            head.append("[Reference] " + " ".join(num % v for v in z))
        head.append(f"[Matrix Format] {matrix.capitalize()}")
        head.append("[Network Data]")
    text = "\n".join(head) + "\n" + body + "\n" + ("[End]\n" if version != "1.0" else "")
    if any(ord(ch) > 126 for ch in text):
        raise InputError("comments must be plain ASCII (Touchstone specification)", path=path)

    folder = os.path.dirname(os.path.abspath(path))
    try:
        fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise InputError(f"cannot write in {folder}: {exc.strerror or exc}", path=path) from None
    try:
        with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise InputError(f"cannot write the file: {exc.strerror or exc}", path=path) from None
        raise
