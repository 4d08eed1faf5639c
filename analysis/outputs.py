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

from .errors import InputError
from .process import ProcessingResult

FLOAT_FORMAT = "%.10g"


def atomic_write(path: Path, write) -> None:
    """Call write(file_object) on a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_umask())
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
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
        rcs = result.rcs_table()
        atomic_write(paths["rcs"], lambda fh: rcs.to_csv(fh, index=False, float_format=FLOAT_FORMAT, lineterminator="\n"))
        red = result.reduction_table()
        atomic_write(paths["reduction"], lambda fh: red.to_csv(fh, index=False, float_format=FLOAT_FORMAT,
                                                              lineterminator="\n"))
        summary = result.summary()
        if extra_summary:
            summary.update(extra_summary)
        text = json.dumps(json_ready(summary), indent=2, allow_nan=False)
        atomic_write(paths["summary"], lambda fh: fh.write(text + "\n"))
    except OSError as exc:
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", getattr(exc, "filename", None) or out) from None
    return paths
