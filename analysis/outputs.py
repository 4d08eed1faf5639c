"""Writers for a processing run's folder: rcs.csv, reduction.csv, summary.json (and report.html).

A run's outputs are written into a staging folder inside the output folder
(``.cloakrcs-staging-*``, see :class:`OutputFolder`) and moved into place together, with the
output folder locked (``.cloakrcs.lock``) so two runs never write into one folder at once; the
outputs of an earlier run that this run does not write (report.html under ``--no-report``) are
removed at that moment. Every file is also written to a temporary name and renamed, so no
half-written file ever carries a final name. CSV numbers use a fixed format, so the same
inputs give byte-identical files.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import shutil
import signal
import tempfile
import threading
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .process import ProcessingResult

PRODUCTS = ("rcs.csv", "reduction.csv", "summary.json", "report.html", "bistatic.csv", "extinction.csv")  # the files a run owns in its folder
STAGING_PREFIX = ".cloakrcs-staging-"
LOCK_NAME = ".cloakrcs.lock"
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")  # cells a spreadsheet would evaluate (OWASP, CSV injection)

# decimals kept per CSV column (well below any measurement's resolution); others as they are
CSV_DECIMALS = {"rcs_dbsm": 4, "phase_deg": 3, "floor_dbsm": 3, "reduction_db": 4, "angle_deg": 6, "u_rcs_db": 4}


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
            categories = [csv_text(str(c)) for c in column.cat.categories]
            plain &= not any(ch in v for v in categories for ch in ',"\n\r')
            columns[name] = pa.DictionaryArray.from_arrays(pa.array(column.cat.codes.to_numpy()), pa.array(categories))
            continue
        values = column.to_numpy()
        if name in CSV_DECIMALS and values.dtype.kind == "f":
            values = np.round(values, CSV_DECIMALS[name]) + 0.0  # + 0.0 turns -0.0 into 0.0
        if values.dtype.kind == "O":
            text = pa.array([csv_text(v) for v in values.astype(str)]).dictionary_encode()
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


def csv_text(value: str) -> str:
    """A text cell that no spreadsheet evaluates: one beginning with = + - @ (or a tab or CR) gets a leading
    apostrophe, as the OWASP guidance on CSV injection recommends (common practice)."""
    return "'" + value if value.startswith(FORMULA_PREFIXES) else value


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
    except OSError as exc:
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", getattr(exc, "filename", None) or out) from None
    write_summary(result, out, extra_summary)
    return paths


def write_summary(result: ProcessingResult, out_dir, extra_summary: dict | None = None) -> Path:
    """summary.json into out_dir (``extra_summary`` keys added, such as run_id)."""
    summary = result.summary()
    if extra_summary:
        summary.update(extra_summary)
    text = json.dumps(json_ready(summary), indent=2, allow_nan=False)
    path = Path(out_dir) / "summary.json"
    try:
        atomic_write(path, lambda fh: fh.write(text + "\n"))
    except OSError as exc:
        raise InputError(f"cannot write outputs: {exc.strerror or exc}", Path(out_dir)) from None
    return path


@contextlib.contextmanager
def interrupts_deferred():
    """Hold Ctrl-C (SIGINT) back while a commit runs: the block completes or fails as a whole. Yields a list
    that is non-empty when an interrupt arrived; it is dropped when the block succeeded (the work is done).
    Only the main thread receives signals; elsewhere this does nothing."""
    got: list[int] = []
    if threading.current_thread() is not threading.main_thread():
        yield got
        return
    previous = signal.signal(signal.SIGINT, lambda signum, _frame: got.append(signum))
    try:
        yield got
    finally:
        signal.signal(signal.SIGINT, previous)


class FolderLock:
    """An exclusive lock on an output folder (``.cloakrcs.lock`` in it, an OS file lock released when the
    process ends however it ends). A second run on the same folder gets a one-line InputError."""

    def __init__(self, out_dir):
        self.out = Path(out_dir)
        self._fh = None

    def acquire(self) -> "FolderLock":
        prepare_out_dir(self.out)
        try:
            fh = open(self.out / LOCK_NAME, "a+b")
        except OSError as exc:
            raise InputError(f"cannot write to the output folder: {exc.strerror or exc}", self.out) from None
        try:
            _lock_file(fh)
        except OSError:
            fh.close()
            raise InputError("the output folder is in use by another cloakrcs run: wait for it to finish or "
                             "choose another folder", self.out) from None
        self._fh = fh
        return self

    def release(self) -> None:
        if self._fh is not None:
            self._fh.close()  # closing the file releases the lock
            self._fh = None

    def __enter__(self):
        return self.acquire()

    def __exit__(self, *_exc):
        self.release()


def _lock_file(fh) -> None:
    """Non-blocking exclusive lock of an open file; OSError when another process holds it."""
    try:
        import fcntl
    except ImportError:  # Windows
        import msvcrt

        msvcrt.locking(fh.fileno(), msvcrt.LK_NBLCK, 1)
        return
    fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)


class OutputFolder:
    """One run's outputs: written into ``staging`` (inside the output folder, same file system), then
    :meth:`publish` moves them into place together; :meth:`restore` undoes a publish (the earlier run's
    files come back). Products of an earlier run that this run did not write are removed by publish.

    ``lock``: hold the folder's lock from :meth:`open` to :meth:`close` (False when the caller holds it).
    ``staging``: adopt a staging folder written by another process (process-many workers).
    """

    def __init__(self, out_dir, lock: bool = True, staging: Path | None = None):
        self.out = Path(out_dir)
        self.staging = None if staging is None else Path(staging)
        self._lock = FolderLock(self.out) if lock else None
        self._moved_old: list[str] = []
        self._placed: list[str] = []

    def open(self) -> "OutputFolder":
        if self._lock is not None:
            self._lock.acquire()
        else:
            prepare_out_dir(self.out)
        try:
            if self._lock is not None:  # leftovers of killed runs (the lock says no run is using them)
                for old in self.out.glob(STAGING_PREFIX + "*"):
                    if old != self.staging:
                        shutil.rmtree(old, ignore_errors=True)
            if self.staging is None:
                self.staging = Path(tempfile.mkdtemp(prefix=STAGING_PREFIX, dir=self.out))
        except OSError as exc:
            self.close()
            raise InputError(f"cannot write to the output folder: {exc.strerror or exc}", self.out) from None
        return self

    def close(self, keep_staging: bool = False) -> None:
        """Remove the staging folder (unless kept for another process) and release the lock."""
        if self.staging is not None and not keep_staging:
            shutil.rmtree(self.staging, ignore_errors=True)
        if self._lock is not None:
            self._lock.release()

    def __enter__(self):
        return self.open()

    def __exit__(self, *_exc):
        self.close()

    def publish(self) -> dict[str, Path]:
        """Move the staged outputs into place (earlier products set aside first); all or none."""
        previous = self.staging / ".previous"
        staged = [n for n in PRODUCTS if (self.staging / n).exists()]
        try:
            previous.mkdir(exist_ok=True)
            for name in PRODUCTS:
                if (self.out / name).exists():
                    os.replace(self.out / name, previous / name)
                    self._moved_old.append(name)
            for name in staged:
                os.replace(self.staging / name, self.out / name)
                self._placed.append(name)
        except BaseException as exc:
            self.restore()
            if isinstance(exc, OSError):
                raise InputError(f"cannot move the outputs into place: {exc.strerror or exc}", self.out) from None
            raise
        return {name: self.out / name for name in staged}

    def restore(self) -> None:
        """Undo :meth:`publish`: this run's files go, the earlier run's come back (best effort, never raises)."""
        previous = self.staging / ".previous"
        for name in reversed(self._placed):
            with contextlib.suppress(OSError):
                os.replace(self.out / name, self.staging / name)
        for name in reversed(self._moved_old):
            with contextlib.suppress(OSError):
                os.replace(previous / name, self.out / name)
        self._placed.clear()
        self._moved_old.clear()
