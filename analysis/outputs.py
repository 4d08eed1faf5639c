"""Writers for a processing run's folder: rcs.csv, reduction.csv, summary.json (and report.html).

Every file is written to a temporary name in the same folder and renamed into place, so an
interrupted run never leaves a half-written file that looks complete. CSV numbers use a
fixed format, so the same inputs give byte-identical files.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .process import ProcessingResult

# decimals kept per CSV column (well below any measurement's resolution); others as they are
CSV_DECIMALS = {"rcs_dbsm": 4, "phase_deg": 3, "floor_dbsm": 3, "reduction_db": 4, "angle_deg": 6}


def write_csv(path: Path, table) -> None:
    """A pandas DataFrame as CSV with Arrow's C++ writer (an order of magnitude faster than
    DataFrame.to_csv here), floats rounded per CSV_DECIMALS and written in their shortest form,
    booleans as true/false, strings quoted only when one of them holds a comma, quote or line
    break. Deterministic, atomic."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    columns = {}
    plain = True  # no string needs quoting: write none (names with , " or newlines get quoted)
    for name in table.columns:
        column = table[name]
        if isinstance(column.dtype, pd.CategoricalDtype):  # codes and categories: no string per row
            categories = [str(c) for c in column.cat.categories]
            plain &= not any(ch in v for v in categories for ch in ',"\n\r')
            columns[name] = pa.DictionaryArray.from_arrays(pa.array(column.cat.codes.to_numpy()), pa.array(categories))
            continue
        values = column.to_numpy()
        if name in CSV_DECIMALS and values.dtype.kind == "f":
            values = np.round(values, CSV_DECIMALS[name]) + 0.0  # + 0.0 turns -0.0 into 0.0
        if values.dtype.kind == "O":
            text = pa.array(values.astype(str)).dictionary_encode()
            plain &= not any(ch in v for v in text.dictionary.to_pylist() for ch in ',"\n\r')
            columns[name] = text
        else:
            columns[name] = pa.array(values)
    arrow = pa.table(columns)
    options = pacsv.WriteOptions(quoting_style="none" if plain else "needed", include_header=False)

    def write(fh):
        fh.write((",".join(table.columns) + "\n").encode())
        pacsv.write_csv(arrow, fh, write_options=options)

    atomic_write(path, write, binary=True)


def atomic_write(path: Path, write, binary: bool = False) -> None:
    """Call write(file_object) on a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_umask())
        with (os.fdopen(fd, "wb") if binary else os.fdopen(fd, "w", encoding="utf-8", newline="")) as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def json_ready(obj):
    """Convert numpy scalars/arrays and non-finite floats (-> None) for strict JSON."""
    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [json_ready(v) for v in obj.tolist()]
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def write_text(path: Path, text: str) -> None:
    """Write a text file atomically; a full disk or a read-only folder becomes an InputError."""
    try:
        atomic_write(path, lambda fh: fh.write(text))
    except OSError as exc:
        raise InputError(f"cannot write {Path(path).name}: {exc.strerror or exc}", Path(path).parent) from None


def prepare_out_dir(out_dir) -> Path:
    """Create the output folder (clear one-line error when it cannot be written)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = tempfile.NamedTemporaryFile(dir=out, prefix=".probe.", delete=True)
        probe.close()
    except OSError as exc:
        raise InputError(f"cannot write to the output folder: {exc.strerror or exc}", out) from None
    return out


def write_outputs(result: ProcessingResult, out_dir, extra_summary: dict | None = None) -> dict[str, Path]:
    """Write rcs.csv, reduction.csv and summary.json into out_dir; returns their paths."""
    out = prepare_out_dir(out_dir)
    paths = {"rcs": out / "rcs.csv", "reduction": out / "reduction.csv", "summary": out / "summary.json"}
    try:
        write_csv(paths["rcs"], result.rcs_table())
        write_csv(paths["reduction"], result.reduction_table())
        summary = result.summary()
        if extra_summary:
            summary.update(extra_summary)
        text = json.dumps(json_ready(summary), indent=2, allow_nan=False)
        atomic_write(paths["summary"], lambda fh: fh.write(text + "\n"))
    except OSError as exc:
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", getattr(exc, "filename", None) or out) from None
    return paths
