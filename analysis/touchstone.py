"""Touchstone reader and writer (versions 1.0, 2.0 and 2.1 of the open IBIS Touchstone specification).

Conventions
-----------
* Frequencies are returned in Hz (``frequency_hz``), whatever unit the file uses.
* ``s[:, i-1, j-1]`` is Sij: the wave into port i from port j (row i, column j).
* ``z0`` holds one real reference resistance per port, in ohm.
* Version 1.0 two-port rows are ``f S11 S21 S12 S22``; version 2 two-port rows follow
  ``[Two-Port Data Order]`` (``12_21`` or ``21_12``; ``21_12`` when the keyword is absent,
  as in version 1). Three- and four-port rows are row-major and may be wrapped over several
  lines; a frequency row always starts on a new line.
* Y and Z files are converted to S with scikit-rf's ``y2s`` / ``z2s`` (power-wave definition):
  ``S = Z0^(-1/2) (Z - Z0) (Z + Z0)^-1 Z0^(1/2)`` with ``Z0 = diag(z0)``, which is
  ``(Z - Z0)(Z + Z0)^-1`` when all ports share one reference. In version 1.0 files Y and Z
  values are normalised to the option line's R (Touchstone specification): ``Z = z R`` and
  ``Y = y / R``; version 2 files hold them in ohm and siemens.
* H and G (hybrid two-port) files are refused with an ``InputError``: convert them to S first.
* Noise parameters (the version 1 two-port noise block, which starts where the frequency
  falls, and version 2 ``[Noise Data]``) and ``[Begin Information]`` blocks are skipped.
* Mixed-mode files (``[Mixed-Mode Order]``) are refused.

Every problem with a file raises ``cloakrcs.errors.InputError`` naming the file and, where
there is one, the line.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import re
import tempfile
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
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
]

_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_UNIT_NAMES = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}
_PARAMETERS = ("s", "y", "z", "h", "g")
_FORMATS = ("ri", "ma", "db")
_MATRIX_FORMATS = ("full", "lower", "upper")
_EXTENSION = re.compile(r"\.[syzhg](\d+)p$", re.IGNORECASE)
_PARAMETER_NAME = re.compile(r"^\s*S\s*(\d)\s*(\d)\s*$", re.IGNORECASE)
_MAX_PORTS = 4
_NUMERIC_BYTES = b"0123456789+-.eE \n"
# below this many files a process pool costs more than it saves (common practice)
_POOL_MIN_FILES = 16


@dataclass(frozen=True, eq=False)
class Touchstone:
    """One Touchstone file as arrays: frequency in Hz, S matrix per frequency, z0 in ohm per port."""

    frequency_hz: np.ndarray  # float64 (nf,)
    s: np.ndarray  # complex128 (nf, n_ports, n_ports); s[:, i-1, j-1] is Sij
    z0: np.ndarray  # float64 (n_ports,), ohm
    version: str  # "1.0", "2.0" or "2.1"
    source_parameter: str  # "S", "Y" or "Z" as in the file (data converted to S)
    comments: tuple[str, ...]

    @property
    def n_ports(self) -> int:
        return int(self.s.shape[1])


def parameter_index(name: str) -> tuple[int, int]:
    """Zero-based (row, column) of an S-parameter name: ``"S21"`` -> ``(1, 0)``."""
    m = _PARAMETER_NAME.match(str(name))
    if not m or m.group(1) == "0" or m.group(2) == "0":
        raise InputError(f"bad S-parameter name {name!r}: expected Sij with ports 1..9, e.g. S21")
    return int(m.group(1)) - 1, int(m.group(2)) - 1


# --------------------------------------------------------------------------- reading


def _read_text(path: str) -> str:
    """The file's text (UTF-8, byte-order mark dropped); binary or unreadable files refused."""
    if os.path.isdir(path):
        raise InputError("is a directory, not a Touchstone file", path=path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise InputError("file does not exist", path=path) from None
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None
    nul = raw.find(b"\x00")
    if nul >= 0:
        raise InputError("binary content (NUL byte): not a Touchstone text file",
                         path=path, line=raw.count(b"\n", 0, nul) + 1)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"binary or non-UTF-8 content (byte 0x{raw[exc.start]:02x}): "
                         "not a Touchstone text file",
                         path=path, line=raw.count(b"\n", 0, exc.start) + 1) from None
    if "\r" in text:  # CRLF, old Mac CR-only and mixed line endings all become LF
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    return text


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


def _parse_option_line(text: str, path: str, line: int) -> dict:
    """``# <unit> <parameter> <format> R <n> [<n> ...]`` in any order, case-insensitive."""
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
                raise InputError("option line: R must be followed by the reference resistance in ohm",
                                 path=path, line=line)
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
    opts.setdefault("r", [50.0])
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


def _ports_from_extension(path: str) -> int | None:
    m = _EXTENSION.search(path)
    return int(m.group(1)) if m else None


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


def _checked_table(data, data_lineno, width, pairs, v1_two_port, path):
    """Frequency rows from data lines, checking every count and token; rows may wrap over lines.

    Returns (rows (nf, width), index of the data line where each row starts). A version 1
    two-port noise block (a 5-value line whose frequency falls) ends the network data.
    """
    parts = [d.split() for d in data]
    counts = np.fromiter(map(len, parts), dtype=np.int64, count=len(parts))
    if v1_two_port:
        for k in np.flatnonzero(counts == 5):
            if k > 0 and _number(parts[k][0], "frequency", path, data_lineno[k]) < \
                    _number(parts[k - 1][0], "frequency", path, data_lineno[k - 1]):
                parts, counts = parts[:k], counts[:k]
                break
    if width > 3 and counts.size > 1 and np.all(counts == 3):
        raise InputError(f"every data row holds 3 values, as a one-port file does (the frequency and one complex "
                         f"pair), but the file declares more ports ({width} numbers per frequency): a one-port sweep "
                         f"must be named .s1p",
                         path=path, line=data_lineno[0])
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


def read_touchstone(path, n_ports: int | None = None) -> Touchstone:
    """Read a Touchstone file (v1.0, v2.0, v2.1; 1 to 4 ports) into S parameters and Hz.

    Version 1 takes the port count from the ``.sNp`` extension (or ``n_ports`` when the name
    has none); version 2 from ``[Number of Ports]``. A given ``n_ports`` must agree with both.
    """
    path = os.fspath(path)
    text = _read_text(path)
    lines = text.split("\n")

    version = "1.0"
    opts: dict | None = None
    option_lineno = None
    comments: list[str] = []
    data: list[str] = []
    data_lineno: list[int] = []
    kw_ports = kw_nfreq = None
    kw_ports_line = kw_nfreq_line = None
    order = "21_12"
    matrix = "full"
    reference: list[float] | None = None
    ref_pending = 0
    ref_line = None
    section = "header"  # v2: header -> network -> noise; "info" inside [Begin Information]
    seen_content = False

    n_lines = len(lines)
    i = 0
    while i < n_lines:
        raw = lines[i]
        i += 1
        lineno = i
        if "!" in raw:
            raw, _, comment = raw.partition("!")
            comment = comment.strip()
            if comment:
                comments.append(comment)
        s = raw.strip()
        if not s:
            continue
        first = s[0]
        if first == "[":
            close = s.find("]")
            if close < 0:
                raise InputError(f"keyword without closing bracket: {s!r}", path=path, line=lineno)
            name = " ".join(s[1:close].split()).lower()
            arg = s[close + 1:].strip()
            if section == "info":
                if name == "end information":
                    section = "header"
                continue
            if name == "version":
                if seen_content:
                    raise InputError("[Version] must come before the option line and the data",
                                     path=path, line=lineno)
                if arg not in ("2.0", "2.1"):
                    raise InputError(f"unsupported [Version] {arg!r} (expected 2.0 or 2.1)",
                                     path=path, line=lineno)
                version = arg
                seen_content = True
                continue
            if version == "1.0":
                raise InputError(f"keyword [{s[1:close]}] in a version 1 file "
                                 "(a version 2 file starts with [Version])", path=path, line=lineno)
            if ref_pending:
                raise InputError(f"[Reference] holds fewer than {len(reference) + ref_pending} values",
                                 path=path, line=ref_line)
            if name == "number of ports":
                kw_ports = _int_keyword(arg, "Number of Ports", path, lineno, 1)
                kw_ports_line = lineno
            elif name == "two-port data order":
                order = arg.split()[0] if arg else ""
                if order not in ("12_21", "21_12"):
                    raise InputError(f"[Two-Port Data Order] must be 12_21 or 21_12, got {arg!r}",
                                     path=path, line=lineno)
            elif name == "number of frequencies":
                kw_nfreq = _int_keyword(arg, "Number of Frequencies", path, lineno, 1)
                kw_nfreq_line = lineno
            elif name == "number of noise frequencies":
                _int_keyword(arg, "Number of Noise Frequencies", path, lineno, 0)
            elif name == "reference":
                if kw_ports is None:
                    raise InputError("[Reference] before [Number of Ports]", path=path, line=lineno)
                reference, ref_pending, ref_line = [], kw_ports, lineno
                for tok in arg.split():
                    if not ref_pending:
                        raise InputError(f"[Reference] holds more than {kw_ports} values",
                                         path=path, line=lineno)
                    reference.append(_number(tok, "[Reference]", path, lineno))
                    ref_pending -= 1
            elif name == "matrix format":
                matrix = arg.split()[0].lower() if arg else ""
                if matrix not in _MATRIX_FORMATS:
                    raise InputError(f"[Matrix Format] must be Full, Lower or Upper, got {arg!r}",
                                     path=path, line=lineno)
            elif name == "network data":
                section = "network"
            elif name == "noise data":
                section = "noise"
            elif name == "begin information":
                section = "info"
            elif name == "end":
                break
            elif name == "mixed-mode order":
                raise InputError("mixed-mode files ([Mixed-Mode Order]) are not supported",
                                 path=path, line=lineno)
            elif name == "end information":
                raise InputError("[End Information] without [Begin Information]", path=path, line=lineno)
            else:
                raise InputError(f"unknown keyword [{s[1:close]}]", path=path, line=lineno)
            continue
        if section == "info":
            continue
        if first == "#":
            if opts is not None:
                raise InputError(f"second option line (the first is on line {option_lineno})",
                                 path=path, line=lineno)
            if data:
                raise InputError("option line after the data", path=path, line=lineno)
            opts = _parse_option_line(s, path, lineno)
            option_lineno = lineno
            seen_content = True
            continue
        if ref_pending:  # [Reference] continued on the following lines
            for tok in s.split():
                if not ref_pending:
                    raise InputError(f"[Reference] holds more than {kw_ports} values", path=path, line=lineno)
                reference.append(_number(tok, "[Reference]", path, lineno))
                ref_pending -= 1
            continue
        if section == "noise":
            continue
        if version != "1.0" and section != "network":
            raise InputError("data before [Network Data]", path=path, line=lineno)
        seen_content = True
        data.append(s)
        data_lineno.append(lineno)
        while i < n_lines:  # plain data lines, the bulk of a file: the quick way
            raw = lines[i]
            if "!" in raw or "#" in raw or "[" in raw:
                break
            i += 1
            raw = raw.strip()
            if raw:
                data.append(raw)
                data_lineno.append(i)

    if ref_pending:
        raise InputError(f"[Reference] holds fewer than {len(reference) + ref_pending} values",
                         path=path, line=ref_line)
    if opts is None:
        opts = _parse_option_line("#", path, None)

    # ---- port count
    ext_ports = _ports_from_extension(path)
    if version == "1.0":
        ports = ext_ports if ext_ports is not None else n_ports
        if ports is None:
            raise InputError("the extension does not give the port count of this version 1 file "
                             "(expected .s1p .. .s4p)", path=path)
        if n_ports is not None and n_ports != ports:
            raise InputError(f"the extension says {ports} ports but {n_ports} were asked for", path=path)
    else:
        if kw_ports is None:
            raise InputError("[Number of Ports] is missing", path=path)
        ports = kw_ports
        for expected, what in ((ext_ports, "the extension"), (n_ports, "the caller")):
            if expected is not None and expected != ports:
                raise InputError(f"[Number of Ports] is {ports} but {what} says {expected}",
                                 path=path, line=kw_ports_line)
    if not 1 <= ports <= _MAX_PORTS:
        raise InputError(f"{ports} ports: only 1 to {_MAX_PORTS} ports are supported", path=path)
    if matrix != "full" and ports == 1:
        matrix = "full"

    # ---- z0
    if reference is not None:
        z0 = np.array(reference, dtype=float)
        if np.any(z0 <= 0):
            raise InputError("[Reference] resistances must be positive", path=path, line=ref_line)
    else:
        r = opts["r"]
        if len(r) not in (1, ports):
            raise InputError(f"option line gives {len(r)} reference resistances for {ports} ports",
                             path=path, line=option_lineno)
        z0 = np.broadcast_to(np.array(r, dtype=float), (ports,)).copy()

    if not data:
        raise InputError("no network data in the file", path=path)

    # ---- numbers
    pairs = ports * ports if matrix == "full" else ports * (ports + 1) // 2
    width = 1 + 2 * pairs
    rows = _fast_table(data, width)
    if rows is not None:
        row_starts = np.arange(len(data))
    else:
        rows, row_starts = _checked_table(data, data_lineno, width, pairs, version == "1.0" and ports == 2, path)
    row_lines = np.asarray(data_lineno)[row_starts]
    freq = frequency_hz_from_file(rows[:, 0], opts["unit"])
    if not np.all(np.isfinite(freq)):
        k = int(np.argmax(~np.isfinite(freq)))
        raise InputError(f"frequency {rows[k, 0]:g} {opts['unit']} is too large", path=path, line=int(row_lines[k]))
    if freq[0] < 0:
        raise InputError(f"negative frequency {rows[0, 0]:g}", path=path, line=int(row_lines[0]))
    step = np.diff(freq)
    if np.any(step <= 0):
        k = int(np.argmax(step <= 0)) + 1
        kind = "duplicated" if step[k - 1] == 0 else "decreasing"
        raise InputError(f"frequencies must increase: {rows[k, 0]:g} is {kind} after {rows[k - 1, 0]:g}",
                         path=path, line=int(row_lines[k]))
    if kw_nfreq is not None and kw_nfreq != len(freq):
        raise InputError(f"[Number of Frequencies] is {kw_nfreq} but the file holds {len(freq)}",
                         path=path, line=kw_nfreq_line)

    a, b = rows[:, 1::2], rows[:, 2::2]
    fmt = opts["format"]
    if fmt == "ri":
        flat = a + 1j * b
    else:
        mag = a if fmt == "ma" else 10.0 ** (a / 20.0)
        flat = mag * np.exp(1j * np.deg2rad(b))
    nf = len(freq)
    if matrix == "full":
        mat = flat.reshape(nf, ports, ports)
        if ports == 2 and order == "21_12":
            mat = mat.transpose(0, 2, 1)
        mat = np.ascontiguousarray(mat)
    else:
        mat = np.zeros((nf, ports, ports), dtype=complex)
        rr, cc = np.tril_indices(ports) if matrix == "lower" else np.triu_indices(ports)
        mat[:, rr, cc] = flat
        mat[:, cc, rr] = flat

    param = opts["parameter"]
    if param != "s":
        if version == "1.0":  # normalised to R (Touchstone specification, version 1.0)
            mat = mat * z0[:, None] if param == "z" else mat / z0[:, None]
        from skrf.network import y2s, z2s

        mat = (z2s if param == "z" else y2s)(mat, np.broadcast_to(z0, (nf, ports)))
    return Touchstone(frequency_hz=freq, s=mat, z0=z0, version=version,
                      source_parameter=param.upper(), comments=tuple(comments))


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
    """Read many files, in the order given; a process pool is used for many files on several cores.

    ``workers=1`` forces a serial read. The first failing file (in order) raises its InputError.
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


def read_echo(path, parameter: str | None = None) -> Echo:
    """Read a file and keep only ``parameter`` (default S11 for 1-port, S21 for 2-port files)."""
    ts = read_touchstone(path)
    name = parameter or {1: "S11", 2: "S21"}.get(ts.n_ports)
    values = None
    if name:
        i, j = parameter_index(name)
        if i < ts.n_ports and j < ts.n_ports:
            values = np.ascontiguousarray(ts.s[:, i, j])
    return Echo(ts.frequency_hz, values, ts.n_ports, name, file_sha256(path))


def read_echoes(paths, parameters, workers: int | None = None) -> list[Echo]:
    """read_echo over many files (one parameter per file, or None), in order, on a process pool.

    Workers send back one complex vector per file instead of the whole matrix, and hash the
    file they have just read.
    """
    return _map_files(read_echo, [(os.fspath(p), q) for p, q in zip(paths, parameters)], workers)


def file_sha256(path) -> str:
    """Hex SHA-256 digest of the file's raw bytes."""
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
    """Write S parameters (``s`` (nf, n, n), or (nf,) for one port; frequency in Hz) as Touchstone.

    ``version`` "1.0" (the two-port order is then always S11 S21 S12 S22, the matrix Full, and
    per-port z0 goes on the option line as in the 2.1 specification's version 1.1), "2.0" or
    "2.1" (``two_port_order`` and ``matrix_format`` apply, per-port z0 goes in ``[Reference]``).
    Values carry ``digits`` significant digits (frequencies at least 15). The file is written under a temporary name in
    the same folder, then renamed over ``path``.
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
    if not 1 <= ports <= _MAX_PORTS:
        raise InputError(f"{ports} ports: only 1 to {_MAX_PORTS} are supported", path=path)
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
    else:  # a frequency row wraps after each matrix row
        lines, k = [], 0
        for r in range(ports):
            n_in_row = int(np.count_nonzero(rr == r))
            cells = [num] * (2 * n_in_row)
            lines.append(" ".join(([fnum] if r == 0 else []) + cells))
            k += n_in_row
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
