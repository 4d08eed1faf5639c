"""Results store: every campaign and processing run kept, findable, reprocessable and comparable.

A SQLite file by default (:func:`default_url`, overridden by ``--store URL`` or the
``CLOAKRCS_STORE`` environment variable), or PostgreSQL by URL
(``postgresql+psycopg://user:pw@host/db``). Tables: :mod:`cloakrcs.store_schema`; the
schema is created and upgraded by the Alembic migrations in ``analysis/migrations``
whenever a store is opened.

A campaign is identified by its fingerprint: prototype, campaign name and, for every sweep,
the target, polarization, angle, repeat and the file's SHA-256. Importing the same files
again adds a processing run to the existing campaign. :func:`record_run` is one
transaction: it either records everything or leaves the store exactly as it was.

SQLite takes one writer at a time: write transactions start with ``BEGIN IMMEDIATE`` (the
write lock is taken first, so a writer never fails halfway on a lock) in WAL mode with a
long busy timeout, so parallel writers queue and wait instead of failing with "database is
locked". Readers do not block writers and are not blocked by them.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import io
import json
import math
import os
import re
import sys
import tempfile
import threading
import tomllib
import zlib
from dataclasses import replace
from pathlib import Path

import numpy as np
import xarray as xr
from sqlalchemy import create_engine, event, func, insert, select
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, DatabaseError, IntegrityError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from . import store_schema as S
from .errors import InputError

STORE_ENV = "CLOAKRCS_STORE"
BUSY_TIMEOUT_S = 600.0  # a SQLite writer waits this long for the write lock before giving up
BOUND_LABELS = ("none", "lower", "upper", "undetermined")
POL_ORDER = ("HH", "VV", "HV", "VH")
_METRIC_COLUMNS = ("subject", "baseline", "revision", "polarization", "band_reduction_db",
                   "band_reduction_uncertainty_db", "best_reduction_db", "best_frequency_hz", "bandwidth_hz",
                   "bandwidth_start_hz", "bandwidth_stop_hz", "bandwidth_truncated", "fractional_bandwidth",
                   "worst_angle_deg", "worst_angle_reduction_db", "bound", "floor_limited_points", "points",
                   "mounting_offset_deg", "check_error_db")
_CHECK_COLUMNS = ("target", "polarization", "max_error_db", "rms_error_db", "mean_error_db", "tolerance_db",
                  "passed", "points")

_engines: dict[tuple[str, int], tuple] = {}
_lock = threading.Lock()


# ---------------------------------------------------------------- URLs and engines

def data_dir() -> Path:
    """The per-user data folder: $XDG_DATA_HOME/cloakrcs (LOCALAPPDATA on Windows, Application Support on macOS)."""
    if sys.platform == "win32":
        base = Path(os.environ.get("LOCALAPPDATA") or Path.home() / "AppData" / "Local")
    elif sys.platform == "darwin":
        base = Path.home() / "Library" / "Application Support"
    else:
        base = Path(os.environ.get("XDG_DATA_HOME") or Path.home() / ".local" / "share")
    return base / "cloakrcs"


def default_url() -> str:
    """The per-user SQLite store: ``data_dir() / "results.sqlite"``."""
    return "sqlite:///" + (data_dir() / "results.sqlite").as_posix()


def resolve_url(url: str | None = None) -> str:
    """The store URL to use: ``url``, else $CLOAKRCS_STORE, else :func:`default_url`.

    A plain file path (no ``scheme://``) means a SQLite file.
    """
    url = url or os.environ.get(STORE_ENV) or default_url()
    if "://" not in url:
        url = "sqlite:///" + Path(url).expanduser().resolve().as_posix()
    try:
        parsed = make_url(url)
    except ArgumentError:
        raise InputError(f"store URL {url!r} is not a database URL such as sqlite:///path or "
                         f"postgresql+psycopg://user@host/db") from None
    if parsed.get_backend_name() not in ("sqlite", "postgresql"):
        raise InputError(f"store URL {url!r}: only SQLite and PostgreSQL stores are supported")
    return url


def _sqlite_engine(url: str):
    path = make_url(url).database
    if path and path != ":memory:":
        try:
            Path(path).parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"cannot create the store's folder: {exc.strerror or exc}", path) from None
    engine = create_engine(url, connect_args={"timeout": BUSY_TIMEOUT_S})

    @event.listens_for(engine, "connect")
    def _connect(dbapi_conn, _record):
        dbapi_conn.isolation_level = None  # transactions are begun by _begin below
        cur = dbapi_conn.cursor()
        cur.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        cur.execute("PRAGMA journal_mode = WAL")
        cur.execute("PRAGMA synchronous = NORMAL")  # WAL + NORMAL: consistent after a crash, one fsync per checkpoint
        cur.execute("PRAGMA foreign_keys = ON")
        cur.close()

    @event.listens_for(engine, "begin")
    def _begin(conn):
        # writers take the write lock at BEGIN, waiting (busy timeout) for the current writer
        conn.exec_driver_sql("BEGIN IMMEDIATE" if conn.get_execution_options().get("cloakrcs_write") else "BEGIN")

    return engine


def _engine_pair(url: str):
    key = (url, os.getpid())  # never share a pool across fork
    with _lock:
        if key not in _engines:
            backend = make_url(url).get_backend_name()
            if backend == "sqlite":
                _check_sqlite_file(url)
            engine = _sqlite_engine(url) if backend == "sqlite" else create_engine(url, pool_pre_ping=True)
            try:
                _check_schema(engine, url)
                _migrate(engine)
            except InputError:
                engine.dispose()
                raise
            except DatabaseError as exc:
                engine.dispose()
                raise damaged_store_error(url, exc) from None
            writer = engine.execution_options(cloakrcs_write=True)
            _engines[key] = (engine, sessionmaker(bind=engine), sessionmaker(bind=writer))
        return _engines[key]


SQLITE_HEADER = b"SQLite format 3\x00"


def damaged_store_error(url: str, exc: Exception) -> InputError:
    """One line for a store the database refuses to read (garbled or truncated file, lost server)."""
    reason = " ".join(str(getattr(exc, "orig", None) or exc).split())[:200]
    try:
        where, postgres = _safe(url), make_url(url).get_backend_name() == "postgresql"
    except ArgumentError:
        where, postgres = url, False
    if isinstance(exc, OperationalError) and postgres:
        return InputError(f"cannot open the results store {where}: {reason}")
    return InputError(f"the results store {where} is damaged or is not a database ({reason}): restore it "
                      f"from a backup, or give --store a new file")


def _check_sqlite_file(url: str) -> None:
    """Refuse, in one line, a store path that holds something other than a SQLite database."""
    path = make_url(url).database
    if not path or path == ":memory:":
        return
    p = Path(path)
    if p.is_dir():
        raise InputError("the results store is a folder, not a SQLite file: give --store a file", p)
    try:
        with open(p, "rb") as fh:
            head = fh.read(len(SQLITE_HEADER))
    except FileNotFoundError:
        return  # a new store
    except OSError as exc:
        raise InputError(f"cannot read the results store: {exc.strerror or exc}", p) from None
    if head and head != SQLITE_HEADER:
        raise InputError("is not a SQLite database (it does not begin with SQLite's header): give --store a "
                         "cloakrcs results store or a new file", p)


def known_revisions() -> set[str]:
    """Schema revisions this cloakrcs knows: the ids of its migration files."""
    folder = Path(__file__).with_name("migrations") / "versions"
    found = set()
    for f in folder.glob("*.py"):
        m = re.search(r'^revision\s*=\s*["\']([^"\']+)["\']', f.read_text(encoding="utf-8"), re.M)
        if m:
            found.add(m.group(1))
    return found


def _check_schema(engine, url: str) -> None:
    """Before any work: the store is readable, is a cloakrcs store (or empty) and not from a newer cloakrcs."""
    from sqlalchemy import inspect as sa_inspect
    from sqlalchemy import text

    with engine.connect() as conn:
        tables = set(sa_inspect(conn).get_table_names())
        revision = None
        if "alembic_version" in tables:
            revision = conn.execute(text("SELECT version_num FROM alembic_version")).scalar()
        for table in ("prototype", "campaign", "processing_run"):  # read a page of each: damage shows here
            if table in tables:
                conn.execute(text(f"SELECT count(*) FROM {table}")).scalar()
        conn.rollback()
    if revision is None and tables - {"alembic_version"}:
        shown = ", ".join(sorted(tables)[:5]) + (", ..." if len(tables) > 5 else "")
        raise InputError(f"the results store {_safe(url)} is not a cloakrcs store: it holds other tables ({shown}); "
                         f"give --store a cloakrcs results store or a new file")
    if revision is not None and revision not in known_revisions():
        raise InputError(f"the results store {_safe(url)} has schema revision {revision!r}, newer than this "
                         f"cloakrcs knows (up to {SCHEMA_REVISION!r}): it was written by a newer cloakrcs; "
                         f"upgrade cloakrcs to use it")


def check_store(url: str | None = None) -> str:
    """Open the store and check it now (a bad --store fails before any processing); returns the URL."""
    url = resolve_url(url)
    open_store(url)
    return url


def _safe(url: str) -> str:
    return make_url(url).render_as_string(hide_password=True)


def _alembic_config():
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(Path(__file__).with_name("migrations")))
    return cfg


SCHEMA_REVISION = "i15a"  # newest migration in analysis/migrations/versions (a test keeps them equal)


def _stored_revision(engine) -> str | None:
    """The schema revision recorded in the store, read without importing Alembic."""
    from sqlalchemy import inspect as sa_inspect
    from sqlalchemy import text

    with engine.connect() as conn:
        if not sa_inspect(conn).has_table("alembic_version"):
            return None
        value = conn.execute(text("SELECT version_num FROM alembic_version")).scalar()
        conn.rollback()
    return value


def _migrate(engine) -> None:
    """Upgrade the schema to the newest migration (one migrator at a time).

    A store already at SCHEMA_REVISION is left alone without importing Alembic (its import
    costs about a second at every start).
    """
    if _stored_revision(engine) == SCHEMA_REVISION or _create_new(engine):
        return
    from alembic import command
    from alembic.runtime.migration import MigrationContext
    from alembic.script import ScriptDirectory

    cfg = _alembic_config()
    head = ScriptDirectory.from_config(cfg).get_current_head()
    with engine.connect() as conn:
        current = MigrationContext.configure(conn).get_current_revision()
        conn.rollback()
    if current == head:
        return
    with engine.execution_options(cloakrcs_write=True).connect() as conn:
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")
        conn.commit()


def _create_new(engine) -> bool:
    """An empty store gets the newest schema from the models in one step, stamped with SCHEMA_REVISION
    (what replaying every migration gives; a test compares the two). False when the store is not empty."""
    from sqlalchemy import inspect as sa_inspect
    from sqlalchemy import text

    from . import store_schema as S

    with engine.execution_options(cloakrcs_write=True).connect() as conn:
        if engine.dialect.name == "postgresql":  # SQLite's writers lock at BEGIN; PostgreSQL's creators queue here
            conn.exec_driver_sql("SELECT pg_advisory_xact_lock(7215)")
        if sa_inspect(conn).get_table_names():  # checked inside the write lock: one creator at a time
            conn.rollback()
            return False
        S.Base.metadata.create_all(conn)
        conn.execute(text("CREATE TABLE alembic_version (version_num VARCHAR(32) NOT NULL, "
                          "CONSTRAINT alembic_version_pkc PRIMARY KEY (version_num))"))
        conn.execute(text("INSERT INTO alembic_version (version_num) VALUES (:v)"), {"v": SCHEMA_REVISION})
        conn.commit()
    return True


def open_store(url: str | None = None, write: bool = False) -> sessionmaker:
    """Session factory of a store, its schema migrated to head.

    ``write=True`` gives sessions whose transactions take SQLite's write lock at BEGIN.
    ``factory.kw["bind"]`` is the engine.
    """
    _engine, reader, writer = _engine_pair(resolve_url(url))
    return writer if write else reader


def close_store(url: str | None = None) -> None:
    """Dispose the pooled connections of one store (all stores when url is None)."""
    with _lock:
        for key in list(_engines):
            if url is None or key[0] == url:
                _engines.pop(key)[0].dispose()


# ---------------------------------------------------------------- arrays

_NPY_MAGIC = b"\x93NUMPY"


def pack_array(a, compress: bool = False) -> bytes:
    """np.save bytes (no pickle), dtype and shape kept exactly; zlib-compressed on request.

    Sweeps are stored as binary complex128 (16 bytes a point, against about 40 in Touchstone
    text) without compression by default: measured noise barely compresses (about 5 %) and
    zlib would cost most of a store write.
    """
    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(a), allow_pickle=False)
    return zlib.compress(buf.getvalue(), 1) if compress else buf.getvalue()


def unpack_array(blob: bytes) -> np.ndarray:
    """Inverse of pack_array (compressed or not)."""
    raw = bytes(blob)
    return np.load(io.BytesIO(raw if raw.startswith(_NPY_MAGIC) else zlib.decompress(raw)), allow_pickle=False)


def _num(x):
    """A finite float, or None (NaN and infinities are stored as NULL)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _json(obj):
    from .outputs import json_ready

    return json_ready(obj)


def _utc(t: dt.datetime | None) -> dt.datetime | None:
    if t is not None and t.tzinfo is None:
        t = t.replace(tzinfo=dt.timezone.utc)  # SQLite returns naive datetimes; they were stored in UTC
    return t


def natural_key(label: str) -> tuple:
    """Sort key putting R2 before R10 (digit runs compare as numbers, the rest case-blind)."""
    return tuple((0, int(p), "") if p.isdigit() else (1, 0, p.casefold()) for p in re.split(r"(\d+)", label) if p)


def _pol_key(pol: str) -> int:
    return POL_ORDER.index(pol) if pol in POL_ORDER else len(POL_ORDER)


# ---------------------------------------------------------------- recording

def campaign_fingerprint(campaign) -> str:
    """SHA-256 over prototype, campaign name and every sweep's (target, role, pol, angle, repeat, file SHA-256)."""
    m = campaign.manifest
    items = [m.prototype, m.name]
    for name in sorted(campaign.cubes):
        cube = campaign.cubes[name]
        for ip, pol in enumerate(cube.polarizations):
            for ia, ang in enumerate(cube.angles_deg):
                for ir, rep in enumerate(cube.data.repeat.values):
                    items.append([name, cube.spec.role, pol, repr(float(ang)), int(rep),
                                  cube.hashes[str(cube.files[ip, ia, ir])]])
    return hashlib.sha256(json.dumps(items).encode()).hexdigest()


def _target_dates(manifest) -> dict[str, dt.date]:
    """Per-target ``date`` keys of the manifest (TargetSpec does not keep them)."""
    try:
        doc = tomllib.loads(manifest.text)
    except tomllib.TOMLDecodeError:
        return {}
    out = {}
    for t in doc.get("target", []) if isinstance(doc.get("target"), list) else []:
        d = t.get("date") if isinstance(t, dict) else None
        if isinstance(d, dt.datetime):
            d = d.date()
        if isinstance(d, dt.date) and isinstance(t.get("name"), str):
            out[t["name"]] = d
    return out


def _spec_dict(spec) -> dict:
    from dataclasses import asdict

    d = asdict(spec)
    d["calibrates"] = list(spec.calibrates) if spec.calibrates is not None else None
    return _json(d)


def _get_prototype(s: Session, name: str, create: bool = True) -> S.Prototype | None:
    proto = s.scalar(select(S.Prototype).where(S.Prototype.name == name))
    if proto is None and create:
        proto = S.Prototype(name=name, created_at=dt.datetime.now(dt.timezone.utc))
        s.add(proto)
        s.flush()
    return proto


def _get_revision(s: Session, proto: S.Prototype, label: str, date: dt.date | None,
                  create: bool = True) -> S.Revision | None:
    rev = s.scalar(select(S.Revision).where(S.Revision.prototype_id == proto.id, S.Revision.label == label))
    if rev is None and create:
        rev = S.Revision(prototype_id=proto.id, label=label, date=date, notes="")
        s.add(rev)
        s.flush()
    elif rev is not None and date is not None and (rev.date is None or date < rev.date):
        rev.date = date  # a revision's date is its first measurement
    return rev


def _ensure_campaign(s: Session, campaign) -> S.Campaign:
    """The stored campaign with these files, created with its raw sweeps when new."""
    fp = campaign_fingerprint(campaign)
    found = s.scalar(select(S.Campaign).where(S.Campaign.fingerprint == fp))
    if found is not None:
        return found
    m = campaign.manifest
    proto = _get_prototype(s, m.prototype)
    shared = _campaign_sharing_files(s, campaign)
    row = S.Campaign(prototype_id=proto.id, name=m.name, date=m.date, fingerprint=fp, manifest_text=m.text,
                     linked_campaign_id=shared[0] if shared else None,
                     manifest_path=str(m.path),
                     chamber={"range_m": m.chamber.range_m, "offset_m": m.chamber.offset_m,
                              "bistatic_deg": m.chamber.bistatic_deg},
                     frequency_hz=pack_array(campaign.frequency_hz), created_at=dt.datetime.now(dt.timezone.utc))
    s.add(row)
    s.flush()
    dates = _target_dates(m)
    for pos, spec in enumerate(m.targets):
        cube = campaign.cubes[spec.name]
        rev = None
        date = dates.get(spec.name, m.date)
        if spec.role == "subject" and spec.baseline:
            rev = _get_revision(s, proto, spec.revision or spec.name, date)
        t = S.CampaignTarget(
            campaign_id=row.id, revision_id=rev.id if rev else None, position=pos, name=spec.name,
            role=spec.role, date=dates.get(spec.name), spec=_spec_dict(spec), n_ports=cube.n_ports,
            parameters=dict(cube.parameters), polarizations=cube.polarizations,
            angles_deg=pack_array(cube.angles_deg), repeats=pack_array(cube.data.repeat.values),
            data=pack_array(cube.data.values.astype(np.complex128, copy=False)),
            frequency_hz=pack_array(cube.data.frequency.values), file_warnings=dict(cube.file_warnings))
        s.add(t)
        s.flush()
        pols = cube.polarizations
        s.execute(insert(S.CampaignFile), [  # one executemany for all of a target's files
            {"campaign_id": row.id, "target_id": t.id, "path": os.path.relpath(path, m.folder).replace(os.sep, "/"),
             "sha256": cube.hashes[str(path)], "polarization": pols[ip], "angle_index": ia, "repeat_index": ir}
            for (ip, ia, ir), path in np.ndenumerate(cube.files)])
    s.flush()
    return row


def _hash_files(paths, workers: int | None) -> list[str]:
    """SHA-256 of each file, on a thread per core (hashlib and file reads release the GIL)."""
    from concurrent.futures import ThreadPoolExecutor

    from .touchstone import file_sha256

    with ThreadPoolExecutor(max_workers=workers or os.cpu_count() or 1) as pool:
        return list(pool.map(file_sha256, paths, chunksize=64))


def stored_echoes(url: str | None, paths, parameters, manifest_path: Path, workers: int | None = None):
    """The echoes of these files that the store already holds, found by SHA-256.

    Parameters
    ----------
    url : str or None
        The results store.
    paths : list of Path
        Sweep files, in reading order.
    parameters : list of str or None
        The S-parameter each file is read for (None: the default for its port count).
    manifest_path : Path
        The campaign's manifest: a stored campaign of the same manifest whose file at the same
        (relative) path has another SHA-256 names that file as changed.
    workers : int, optional
        Hashing threads (default one per core).

    Returns
    -------
    (list, dict)
        Per file a :class:`cloakrcs.touchstone.Echo` rebuilt from the stored sweep (bit for bit the
        values, frequency grid and reader warnings a fresh read gives) or None where the file must be
        read; and ``{"from_store", "read", "changed"}``: counts, and the files whose stored sweep at the
        same path has a different SHA-256 (changed since they were stored).
    """
    from .touchstone import Echo

    paths = [Path(p) for p in paths]
    out: list = [None] * len(paths)
    with open_store(url)() as s:
        if s.scalar(select(S.CampaignFile.id).limit(1)) is None:  # an empty store: nothing to hash for
            return out, {"from_store": 0, "read": len(paths), "changed": []}
        hashes = _hash_files(paths, workers)
        hit: dict[str, tuple] = {}
        unique = sorted(set(hashes))
        for i in range(0, len(unique), 500):
            q = (select(S.CampaignFile.sha256, S.CampaignFile.target_id, S.CampaignFile.polarization,
                        S.CampaignFile.angle_index, S.CampaignFile.repeat_index)
                 .join(S.CampaignTarget, S.CampaignFile.target_id == S.CampaignTarget.id)
                 .where(S.CampaignFile.sha256.in_(unique[i:i + 500]), S.CampaignTarget.file_warnings.is_not(None))
                 .order_by(S.CampaignFile.id.desc()))  # the newest stored copy of a file
            for sha, *where in s.execute(q):
                hit.setdefault(sha, tuple(where))
        targets = {}
        for tid in sorted({hit[h][0] for h in hashes if h in hit}):
            t = s.get(S.CampaignTarget, tid)
            data = unpack_array(t.data)
            targets[tid] = (t, data, unpack_array(t.frequency_hz), data.shape)
        for k, (path, sha, parameter) in enumerate(zip(paths, hashes, parameters)):
            if sha not in hit:
                continue
            tid, pol, ia, ir = hit[sha]
            t, data, freq, (n_pol, n_ang, n_rep, _) = targets[tid]
            name = parameter or {1: "S11", 2: "S21"}.get(t.n_ports)
            if name is None or pol not in t.polarizations or t.parameters.get(pol) != name:
                continue  # read for another parameter than it was stored with
            ip = t.polarizations.index(pol)
            tails = t.file_warnings.get(str((ip * n_ang + ia) * n_rep + ir), [])
            out[k] = Echo(freq, data[ip, ia, ir].copy(), t.n_ports, name, sha,
                          tuple(str(path) + tail for tail in tails))
        missed = [k for k, e in enumerate(out) if e is None]
        changed = []
        rel = {os.path.relpath(paths[k], Path(manifest_path).parent).replace(os.sep, "/"): k for k in missed}
        names = sorted(rel)
        for i in range(0, len(names), 500):
            q = (select(S.CampaignFile.path, S.CampaignFile.sha256)
                 .join(S.Campaign, S.CampaignFile.campaign_id == S.Campaign.id)
                 .where(S.Campaign.manifest_path == str(manifest_path), S.CampaignFile.path.in_(names[i:i + 500])))
            for p, sha in s.execute(q):
                if sha != hashes[rel[p]]:
                    changed.append(paths[rel[p]])
    return out, {"from_store": len(paths) - len(missed), "read": len(missed),
                 "changed": sorted(set(changed), key=str)}


def _campaign_sharing_files(s: Session, campaign) -> tuple[int, str, int, int] | None:
    """(id, name, files shared, files of the campaign) of the stored campaign sharing most of these raw files."""
    per_file = list(campaign.file_hashes.values())
    hashes = sorted(set(per_file))
    found: dict[int, set] = {}
    for i in range(0, len(hashes), 500):
        chunk = hashes[i:i + 500]
        for cid, h in s.execute(select(S.CampaignFile.campaign_id, S.CampaignFile.sha256)
                                .where(S.CampaignFile.sha256.in_(chunk)).distinct()):
            found.setdefault(cid, set()).add(h)
    if not found:
        return None
    shared = {cid: sum(h in hs for h in per_file) for cid, hs in found.items()}
    cid = max(sorted(shared), key=lambda c: shared[c])
    return cid, s.get(S.Campaign, cid).name, shared[cid], len(per_file)


def files_already_stored(url: str | None, campaign) -> dict | None:
    """When a campaign not yet stored shares raw files with a stored one: ``{campaign_id, campaign,
    files, of}`` (the stored campaign sharing most, how many files it shares, of how many); else None."""
    fp = campaign_fingerprint(campaign)
    with open_store(url)() as s:
        if s.scalar(select(S.Campaign.id).where(S.Campaign.fingerprint == fp)) is not None:
            return None
        found = _campaign_sharing_files(s, campaign)
    if found is None:
        return None
    cid, name, n, total = found
    return {"campaign_id": cid, "campaign": name, "files": n, "of": total}


def _add_run(s: Session, crow: S.Campaign, campaign, result) -> S.ProcessingRun:
    run = S.ProcessingRun(
        campaign_id=crow.id, processed_at=dt.datetime.now(dt.timezone.utc),
        software_version=str(result.settings.get("software_version", "")),
        process_settings=_json(result.settings.get("process_settings", {})),
        settings=_json(result.settings if getattr(result, "arm", None) is None
                       else {**result.settings, "bistatic": result.arm.summary}),
        manifest_text=campaign.manifest.text, floor=_json(result.floor), warnings=list(result.warnings),
        frequency_hz=pack_array(result.frequency_hz), valid_mask=pack_array(result.valid_mask),
        band_mask=pack_array(result.band_mask))
    s.add(run)
    s.flush()
    return run


def _add_results(s: Session, run: S.ProcessingRun, result) -> None:
    """Calibrated cubes and reduction maps of every target."""
    for pos, (name, t) in enumerate(result.targets.items()):
        s.add(S.TargetResultRow(
            run_id=run.id, position=pos, name=name, role=t.role, revision=t.revision, baseline=t.baseline,
            gate=_json(t.gate), shape=_json(t.shape), polarizations=[str(p) for p in t.amplitude.polarization.values],
            angles_deg=pack_array(t.amplitude.angle.values), amplitude=pack_array(t.amplitude.values),
            floor=pack_array(t.floor.values), rep_rel_u=None if t.rep_rel_u is None else pack_array(t.rep_rel_u.values)))
    for (subject, pol), ds in result.reductions.items():
        codes = np.vectorize(BOUND_LABELS.index, otypes=[np.int8])(ds["bound"].values)
        s.add(S.ReductionRow(run_id=run.id, subject=subject, polarization=pol,
                             angles_deg=pack_array(ds.angle.values), frequency_hz=pack_array(ds.frequency.values),
                             reduction_db=pack_array(ds["reduction_db"].values), bound=pack_array(codes)))
    s.flush()


def _add_metrics(s: Session, run: S.ProcessingRun, crow: S.Campaign, result) -> None:
    """Metrics and checks as queryable rows."""
    rev_of = dict(s.execute(select(S.CampaignTarget.name, S.CampaignTarget.revision_id)
                            .where(S.CampaignTarget.campaign_id == crow.id)).all())
    for m in result.metrics:
        cols = {k: m.get(k) for k in _METRIC_COLUMNS}
        for k in _METRIC_COLUMNS[4:]:
            if k not in ("bandwidth_truncated", "bound", "floor_limited_points", "points"):
                cols[k] = _num(cols[k])
        cols["bandwidth_truncated"] = None if m.get("bandwidth_truncated") is None else bool(m["bandwidth_truncated"])
        extra = _json({k: v for k, v in m.items() if k not in _METRIC_COLUMNS})
        s.add(S.MetricRow(run_id=run.id, revision_id=rev_of.get(m["subject"]), extra=extra, **cols))
    for c in result.checks:
        cols = {k: c.get(k) for k in _CHECK_COLUMNS}
        for k in ("max_error_db", "rms_error_db", "mean_error_db", "tolerance_db"):
            cols[k] = _num(cols[k])
        cols["passed"] = bool(cols["passed"])
        s.add(S.CheckRow(run_id=run.id, extra=_json({k: v for k, v in c.items() if k not in _CHECK_COLUMNS}), **cols))
    s.flush()


_CENTRE_COLUMNS = ("target", "revision", "polarization", "rank", "down_range_m", "cross_range_m", "rcs_dbsm",
                   "floor_limited", "down_range_resolution_m", "cross_range_resolution_m")


def _add_centres(s: Session, run: S.ProcessingRun, result) -> None:
    """Scattering centres of the run's images (cloakrcs.imaging.result_centres)."""
    for c in getattr(result, "centres", None) or []:
        cols = {k: c[k] for k in _CENTRE_COLUMNS}
        s.add(S.ScatteringCentreRow(run_id=run.id, extra=_json({k: v for k, v in c.items() if k not in cols}),
                                    **cols))
    s.flush()


def centres(url: str | None, prototype: str | None = None, all_runs: bool = False) -> list[dict]:
    """Stored scattering centres with their run's prototype, campaign and measurement date.

    By default only each campaign's latest run. Rows as ``cloakrcs.imaging.scattering_centres``
    plus prototype, campaign, campaign_id, run_id, date.
    """
    with open_store(url)() as s:
        _check_prototype(s, prototype)
        q = (select(S.ScatteringCentreRow, S.ProcessingRun, S.Campaign, S.Prototype)
             .join(S.ProcessingRun, S.ScatteringCentreRow.run_id == S.ProcessingRun.id)
             .join(S.Campaign, S.ProcessingRun.campaign_id == S.Campaign.id)
             .join(S.Prototype, S.Campaign.prototype_id == S.Prototype.id)
             .order_by(S.ScatteringCentreRow.id))
        if prototype is not None:
            q = q.where(S.Prototype.name == prototype)
        rows = s.execute(q).all()
        latest = dict(s.execute(select(S.ProcessingRun.campaign_id, func.max(S.ProcessingRun.id))
                                .group_by(S.ProcessingRun.campaign_id)).all())
        tdate_of = {(cid, name): d for cid, name, d in
                    s.execute(select(S.CampaignTarget.campaign_id, S.CampaignTarget.name, S.CampaignTarget.date))}
        out = []
        for c, run, camp, p in rows:
            if not all_runs and latest.get(camp.id) != run.id:
                continue
            date = tdate_of.get((camp.id, c.target)) or camp.date
            out.append({**{k: getattr(c, k) for k in _CENTRE_COLUMNS}, **c.extra, "prototype": p.name,
                        "campaign": camp.name, "campaign_id": camp.id, "run_id": run.id,
                        "date": date.isoformat() if date else None})
    return out


def record_run(url: str | None, campaign, result, before_commit=None, on_rollback=None) -> int:
    """Record a processing run (and its campaign, when new) in one transaction; returns the run id.

    On any error nothing is written. A unique-key clash with a concurrent writer (two
    writers adding the same new campaign on PostgreSQL) retries the transaction.
    ``before_commit(run_id)`` runs inside the transaction, last, with Ctrl-C held back until the
    commit is over (the run's outputs are moved into place there); when it or the commit fails,
    the transaction rolls back and ``on_rollback()`` undoes what it did.
    """
    from .outputs import interrupts_deferred

    factory = open_store(url, write=True)
    for attempt in range(3):
        hooked = False
        try:
            with contextlib.ExitStack() as commit:
                with factory.begin() as s:
                    crow = _ensure_campaign(s, campaign)
                    run = _add_run(s, crow, campaign, result)
                    _add_results(s, run, result)
                    _add_metrics(s, run, crow, result)
                    _add_centres(s, run, result)
                    run_id = run.id
                    if before_commit is not None:
                        commit.enter_context(interrupts_deferred())
                        hooked = True
                        before_commit(run_id)
                return run_id
        except BaseException as exc:
            if hooked and on_rollback is not None:
                on_rollback()
            if not isinstance(exc, IntegrityError) or attempt == 2:
                raise
    raise AssertionError("unreachable")


# ---------------------------------------------------------------- queries

def list_runs(url: str | None, prototype: str | None = None) -> list[dict]:
    """Every processing run, oldest first: run_id, campaign_id, campaign, prototype, date, processed_at, ..."""
    with open_store(url)() as s:
        q = (select(S.ProcessingRun, S.Campaign, S.Prototype)
             .join(S.Campaign, S.ProcessingRun.campaign_id == S.Campaign.id)
             .join(S.Prototype, S.Campaign.prototype_id == S.Prototype.id).order_by(S.ProcessingRun.id))
        if prototype is not None:
            q = q.where(S.Prototype.name == prototype)
        return [{"run_id": r.id, "campaign_id": c.id, "campaign": c.name, "prototype": p.name,
                 "date": c.date.isoformat() if c.date else None, "processed_at": _utc(r.processed_at).isoformat(),
                 "software_version": r.software_version, "manifest": c.manifest_path,
                 "linked_campaign_id": c.linked_campaign_id}
                for r, c, p in s.execute(q).all()]


def latest_run_id(url: str | None, campaign_name: str | None = None) -> int | None:
    """Id of the newest run (of the newest campaign of that name), None when there is none."""
    with open_store(url)() as s:
        q = select(func.max(S.ProcessingRun.id))
        if campaign_name is not None:
            q = q.join(S.Campaign, S.ProcessingRun.campaign_id == S.Campaign.id).where(S.Campaign.name == campaign_name)
        return s.scalar(q)


def find_campaign(url: str | None, campaign) -> int | None:
    """Id of the stored campaign holding exactly these files (same fingerprint), or None."""
    with open_store(url)() as s:
        return s.scalar(select(S.Campaign.id).where(S.Campaign.fingerprint == campaign_fingerprint(campaign)))


def find_run_for_campaign(url: str | None, campaign) -> int | None:
    """Id of the newest run of the stored campaign holding exactly these files, or None."""
    with open_store(url)() as s:
        return s.scalar(select(func.max(S.ProcessingRun.id)).join(S.Campaign, S.ProcessingRun.campaign_id == S.Campaign.id)
                        .where(S.Campaign.fingerprint == campaign_fingerprint(campaign)))


def campaign_for_hashes(url: str | None, hashes) -> list[int]:
    """Ids of the stored campaigns whose files have exactly this set of SHA-256 values."""
    want = set(hashes)
    with open_store(url)() as s:
        got: dict[int, set] = {}
        for cid, h in s.execute(select(S.CampaignFile.campaign_id, S.CampaignFile.sha256)).all():
            got.setdefault(cid, set()).add(h)
    return sorted(cid for cid, hs in got.items() if hs == want)


def _prototype_names(s: Session) -> list[str]:
    return sorted(s.scalars(select(S.Prototype.name)).all())


def _check_prototype(s: Session, prototype: str | None) -> None:
    if prototype is not None and s.scalar(select(S.Prototype.id).where(S.Prototype.name == prototype)) is None:
        known = ", ".join(repr(n) for n in _prototype_names(s)) or "none"
        raise InputError(f"no prototype {prototype!r} in the store (known: {known})")


def history(url: str | None, prototype: str | None = None, all_runs: bool = False) -> list[dict]:
    """Cloak metrics per revision and polarization, in revision order.

    Order: revision date (its first measurement), labels in natural order (R2 < R10), then
    campaign date, polarization, run. By default only the latest run of each campaign;
    ``all_runs=True`` gives every run. ``check_error_db`` is the largest absolute error over
    the valid band of the run's check targets in that polarization (None without one).
    """
    with open_store(url)() as s:
        _check_prototype(s, prototype)
        q = (select(S.MetricRow, S.ProcessingRun, S.Campaign, S.Prototype, S.Revision)
             .join(S.ProcessingRun, S.MetricRow.run_id == S.ProcessingRun.id)
             .join(S.Campaign, S.ProcessingRun.campaign_id == S.Campaign.id)
             .join(S.Prototype, S.Campaign.prototype_id == S.Prototype.id)
             .outerjoin(S.Revision, S.MetricRow.revision_id == S.Revision.id))
        if prototype is not None:
            q = q.where(S.Prototype.name == prototype)
        rows = s.execute(q).all()
        latest = dict(s.execute(select(S.ProcessingRun.campaign_id, func.max(S.ProcessingRun.id))
                                .group_by(S.ProcessingRun.campaign_id)).all())
        checks: dict[tuple[int, str], float] = {}
        for run_id, pol, err in s.execute(select(S.CheckRow.run_id, S.CheckRow.polarization, S.CheckRow.max_error_db)):
            if err is not None:
                checks[(run_id, pol)] = max(checks.get((run_id, pol), 0.0), abs(err))
        pins = {rid: run_id for rid, run_id in s.execute(select(S.Revision.id, S.Revision.current_run_id))
                if run_id is not None}
        pinned_runs = set(s.scalars(select(S.ProcessingRun.id).where(S.ProcessingRun.id.in_(set(pins.values())))))
        pins = {rid: run_id for rid, run_id in pins.items() if run_id in pinned_runs}  # deleted runs: newest
        tdates = dict(s.execute(select(S.CampaignTarget.id, S.CampaignTarget.date)).all())
        tdate_of = {(cid, name): tdates[tid] for tid, cid, name in
                    s.execute(select(S.CampaignTarget.id, S.CampaignTarget.campaign_id, S.CampaignTarget.name))}
    out = []
    far = dt.date.max
    for m, run, c, p, rev in rows:
        pinned = pins.get(m.revision_id)
        current = run.id == pinned if pinned is not None else latest.get(c.id) == run.id
        if not all_runs and not current:
            continue
        measured = tdate_of.get((c.id, m.subject)) or c.date
        rev_date = rev.date if rev is not None and rev.date is not None else measured
        item = {
            "prototype": p.name, "revision": m.revision, "subject": m.subject, "baseline": m.baseline,
            "polarization": m.polarization, "campaign": c.name, "campaign_id": c.id, "run_id": run.id,
            "processed_at": _utc(run.processed_at).isoformat(), "software_version": run.software_version,
            "date": measured.isoformat() if measured else None,
            "band_reduction_db": m.band_reduction_db, "band_reduction_uncertainty_db": m.band_reduction_uncertainty_db,
            "bandwidth_hz": m.bandwidth_hz, "bandwidth_start_hz": m.bandwidth_start_hz,
            "bandwidth_stop_hz": m.bandwidth_stop_hz,
            "worst_angle_deg": m.worst_angle_deg, "worst_angle_reduction_db": m.worst_angle_reduction_db,
            "bound": m.bound, "check_error_db": checks.get((run.id, m.polarization)),
            "current": bool(current), "current_chosen": pinned is not None,
            **settings_columns(run.settings or {}, m.subject, m.baseline),
        }
        key = (p.name, rev_date or far, natural_key(m.revision), measured or far, c.name, _pol_key(m.polarization),
               m.subject, run.id)
        out.append((key, item))
    out.sort(key=lambda kv: kv[0])
    return [item for _key, item in out]


def _latest_rows(rows: list[dict], revision: str) -> dict[str, dict]:
    """Per polarization, the newest measurement of a revision (latest campaign date, then run)."""
    mine = [r for r in rows if r["revision"] == revision]
    mine.sort(key=lambda r: (r["date"] or "", r["run_id"]))
    return {r["polarization"]: r for r in mine}


COMPARED_SETTINGS = (("band_ghz", "band (GHz)"), ("sector_deg", "sector (deg)"), ("window", "window"),
                     ("kaiser_beta", "Kaiser beta"), ("pad_factor", "zero padding"),
                     ("edge_fraction", "gate edge fraction"), ("subject_gate_span_m", "subject gate span (m)"),
                     ("baseline_gate_span_m", "baseline gate span (m)"), ("threshold_db", "threshold (dB)"),
                     ("floor_margin_db", "floor margin (dB)"), ("drift_correction", "drift correction"),
                     ("align_angles", "angle alignment"), ("auto_gate", "auto gate"), ("coverage_k", "coverage k"))


def comparison_settings(settings: dict, subject: str, baseline: str) -> dict:
    """The processing settings a metric depends on, in comparable form (README, Results store and revisions)."""
    band = settings.get("reporting_band_hz")
    gates = settings.get("gates") or {}
    window = settings.get("window")

    def span(name):
        g = gates.get(name)
        return None if not g else round(float(g["span_m"]), 6)

    return {"band_ghz": None if not band else [round(band[0] / 1e9, 4), round(band[1] / 1e9, 4)],
            "sector_deg": "all" if not settings.get("sector_deg") else [float(x) for x in settings["sector_deg"]],
            "window": window, "kaiser_beta": settings.get("kaiser_beta") if window == "kaiser" else None,
            "pad_factor": settings.get("pad_factor"), "edge_fraction": settings.get("edge_fraction"),
            "subject_gate_span_m": span(subject), "baseline_gate_span_m": span(baseline),
            "threshold_db": settings.get("threshold_db"), "floor_margin_db": settings.get("floor_margin_db"),
            "drift_correction": bool(settings.get("drift_correction")),
            "align_angles": bool(settings.get("align_angles")), "auto_gate": bool(settings.get("auto_gate")),
            "coverage_k": settings.get("coverage_k")}


def _show(value) -> str:
    if isinstance(value, list):
        return ":".join(f"{v:g}" for v in value)
    if isinstance(value, bool):
        return "on" if value else "off"
    return "-" if value is None else (f"{value:g}" if isinstance(value, float) else str(value))


def settings_label(comp: dict) -> str:
    """A short text of the settings that most often differ: band, sector, window, gate spans, threshold."""
    win = comp["window"] + (f" beta {comp['kaiser_beta']:g}" if comp.get("kaiser_beta") is not None else "")
    spans = {comp["subject_gate_span_m"], comp["baseline_gate_span_m"]}
    return (f"band {_show(comp['band_ghz'])} GHz, sector {_show(comp['sector_deg'])} deg, {win}, gate "
            f"{'/'.join(_show(x) for x in sorted(spans, key=lambda v: -1 if v is None else v))} m, "
            f"threshold {_show(comp['threshold_db'])} dB")


def settings_columns(settings: dict, subject: str, baseline: str) -> dict:
    """History columns describing how a metric was computed: band, sector, settings key and label."""
    comp = comparison_settings(settings, subject, baseline)
    key = hashlib.sha256(json.dumps(comp, sort_keys=True).encode()).hexdigest()[:8]
    return {"band_hz": settings.get("reporting_band_hz"), "sector_deg": settings.get("sector_deg"),
            "sector_contents": settings.get("sector_contents"), "settings_key": key,
            "settings_label": settings_label(comp), "settings": comp}


def settings_differences(a: dict, b: dict) -> list[str]:
    """'name A vs B' for every compared setting that differs between two comparison_settings dicts."""
    return [f"{label} {_show(a.get(k))} vs {_show(b.get(k))}" for k, label in COMPARED_SETTINGS
            if a.get(k) != b.get(k)]


def compare(url: str | None, rev_a: str, rev_b: str, prototype: str | None = None,
            allow_different: bool = False) -> list[dict]:
    """B - A of the band-averaged reduction per polarization, with the uncertainty of the difference.

    Each revision's newest measurement is used. The two results are taken as independent,
    so U(B - A) = sqrt(U_A^2 + U_B^2) (GUM, JCGM 100:2008 eq. 10, uncorrelated inputs);
    both U are expanded with the same coverage factor. Revisions measured against the same
    baseline sweeps are positively correlated, which makes this an overestimate.
    """
    rows = history(url, prototype)
    protos = {}
    for label in (rev_a, rev_b):
        found = sorted({r["prototype"] for r in rows if r["revision"] == label})
        if not found:
            known = ", ".join(sorted({r["revision"] for r in rows}, key=natural_key)) or "none"
            raise InputError(f"no revision {label!r} in the store" + (f" for prototype {prototype!r}" if prototype
                                                                      else "") + f" (known: {known})")
        protos[label] = found
    common = sorted(set(protos[rev_a]) & set(protos[rev_b]))
    if not common:
        raise InputError(f"revisions {rev_a!r} and {rev_b!r} belong to different prototypes "
                         f"({', '.join(protos[rev_a])} / {', '.join(protos[rev_b])})")
    if len(common) > 1:
        raise InputError(f"revisions {rev_a!r} and {rev_b!r} exist in several prototypes "
                         f"({', '.join(common)}): choose one with --prototype")
    proto = common[0]
    rows = [r for r in rows if r["prototype"] == proto]
    a, b = _latest_rows(rows, rev_a), _latest_rows(rows, rev_b)
    pols = sorted(set(a) & set(b), key=_pol_key)
    if not pols:
        raise InputError(f"revisions {rev_a!r} and {rev_b!r} share no polarization")
    differences = []
    for pol in pols:
        for d in settings_differences(a[pol]["settings"], b[pol]["settings"]):
            if d not in differences:
                differences.append(d)
    if differences and not allow_different:
        raise InputError(f"revisions {rev_a!r} (run {a[pols[0]]['run_id']}) and {rev_b!r} (run "
                         f"{b[pols[0]]['run_id']}) were processed differently: {'; '.join(differences)}; "
                         f"reprocess one like the other, choose comparable runs with `cloakrcs revision current`, "
                         f"or pass --allow-different")
    out = []
    for pol in pols:
        ra, rb = a[pol], b[pol]

        def diff(key):
            return None if ra[key] is None or rb[key] is None else rb[key] - ra[key]

        ua, ub = ra["band_reduction_uncertainty_db"], rb["band_reduction_uncertainty_db"]
        out.append({
            "prototype": proto, "revision_a": rev_a, "revision_b": rev_b, "polarization": pol,
            "band_reduction_a_db": ra["band_reduction_db"], "band_reduction_b_db": rb["band_reduction_db"],
            "uncertainty_a_db": ua, "uncertainty_b_db": ub,
            "difference_db": diff("band_reduction_db"),
            "difference_uncertainty_db": None if ua is None or ub is None else math.hypot(ua, ub),
            "bandwidth_a_hz": ra["bandwidth_hz"], "bandwidth_b_hz": rb["bandwidth_hz"],
            "bandwidth_difference_hz": diff("bandwidth_hz"),
            "worst_angle_reduction_a_db": ra["worst_angle_reduction_db"],
            "worst_angle_reduction_b_db": rb["worst_angle_reduction_db"],
            "worst_angle_difference_db": diff("worst_angle_reduction_db"),
            "run_a": ra["run_id"], "run_b": rb["run_id"], "campaign_a": ra["campaign"], "campaign_b": rb["campaign"],
            "band_a_hz": ra["band_hz"], "band_b_hz": rb["band_hz"], "sector_a_deg": ra["sector_deg"],
            "sector_b_deg": rb["sector_deg"], "settings_differ": differences,
        })
    return out


# ---------------------------------------------------------------- revision notes and parameters

def _revision_for_edit(s: Session, prototype: str, revision: str) -> S.Revision:
    """An existing revision of an existing prototype; InputError naming the known revisions otherwise."""
    _check_prototype(s, prototype)
    if not revision.strip():
        raise InputError("revision label must not be empty")
    proto = _get_prototype(s, prototype, create=False)
    rev = _get_revision(s, proto, revision, None, create=False)
    if rev is None:
        labels = sorted(s.scalars(select(S.Revision.label).where(S.Revision.prototype_id == proto.id)).all(),
                        key=natural_key)
        raise InputError(f"no revision {revision!r} of prototype {prototype!r} (known: "
                         f"{', '.join(labels) or 'none'}): revisions come from measured subjects")
    return rev


def set_current_run(url: str | None, prototype: str, revision: str, run_id: int | None) -> None:
    """Choose the run that is a revision's "current" one (history, compare, the trend); None: the newest."""
    with open_store(url, write=True).begin() as s:
        rev = _revision_for_edit(s, prototype, revision)
        if run_id is not None:
            runs = sorted(set(s.scalars(select(S.MetricRow.run_id).where(S.MetricRow.revision_id == rev.id))))
            if int(run_id) not in runs:
                raise InputError(f"run {run_id} holds no metrics of revision {revision!r} (runs that do: "
                                 f"{', '.join(map(str, runs)) or 'none'})")
        rev.current_run_id = None if run_id is None else int(run_id)


def set_revision_note(url: str | None, prototype: str, revision: str, text: str) -> None:
    """Replace the notes of a revision (created under an existing prototype when new)."""
    with open_store(url, write=True).begin() as s:
        _revision_for_edit(s, prototype, revision).notes = text


def set_revision_parameter(url: str | None, prototype: str, revision: str, key: str, value) -> None:
    """Set one design parameter (key -> value, stored as text) of a revision."""
    set_revision_parameters(url, prototype, revision, {key: value})


def set_revision_parameters(url: str | None, prototype: str, revision: str, values: dict) -> None:
    """Set several design parameters of a revision in one transaction."""
    values = {str(k).strip(): v for k, v in values.items()}
    if any(not k for k in values):
        raise InputError("design parameter name must not be empty")
    with open_store(url, write=True).begin() as s:
        rev = _revision_for_edit(s, prototype, revision)
        for key, value in values.items():
            row = s.scalar(select(S.RevisionParameter).where(S.RevisionParameter.revision_id == rev.id,
                                                             S.RevisionParameter.key == key))
            if row is None:
                s.add(S.RevisionParameter(revision_id=rev.id, key=key, value=str(value)))
            else:
                row.value = str(value)


def revision_info(url: str | None, prototype: str | None = None) -> list[dict]:
    """Revisions in revision order: prototype, revision, date, notes, parameters {key: value}, campaigns."""
    with open_store(url)() as s:
        _check_prototype(s, prototype)
        q = select(S.Revision, S.Prototype).join(S.Prototype, S.Revision.prototype_id == S.Prototype.id)
        if prototype is not None:
            q = q.where(S.Prototype.name == prototype)
        out = []
        for rev, p in s.execute(q).all():
            camps = s.scalars(select(S.Campaign.name).join(S.CampaignTarget, S.CampaignTarget.campaign_id == S.Campaign.id)
                              .where(S.CampaignTarget.revision_id == rev.id).distinct()).all()
            out.append({"prototype": p.name, "revision": rev.label, "current_run": rev.current_run_id,
                        "date": rev.date.isoformat() if rev.date else None, "notes": rev.notes,
                        "parameters": {r.key: r.value for r in sorted(rev.parameters, key=lambda r: r.key)},
                        "campaigns": sorted(camps), "_key": (p.name, rev.date or dt.date.max, natural_key(rev.label))})
    out.sort(key=lambda r: r["_key"])
    for r in out:
        del r["_key"]
    return out


# ---------------------------------------------------------------- reading back

def parse_manifest_text(text: str, path: str | Path):
    """Parse manifest text as if it were the file ``path`` (written to a temporary file first)."""
    from .manifest import parse_manifest

    with tempfile.TemporaryDirectory(prefix="cloakrcs-manifest-") as tmp:
        tmp_path = Path(tmp) / "manifest.toml"
        tmp_path.write_text(text, encoding="utf-8")
        manifest, _ = parse_manifest(tmp_path)
    return replace(manifest, path=Path(path))


def load_campaign_from_store(url: str | None, campaign_id: int, run_id: int | None = None):
    """Rebuild an :class:`cloakrcs.campaign.Campaign` from the store alone (no data file is read).

    The manifest is re-parsed from the stored text (the text the run ``run_id`` used, when
    given); raw sweeps come back bit for bit (complex128). Table-shape references still
    read their table file from the original location.
    """
    from .campaign import Campaign, TargetCube, check_campaign

    with open_store(url)() as s:
        crow = s.get(S.Campaign, campaign_id)
        if crow is None:
            raise InputError(f"no campaign {campaign_id} in the store")
        text = crow.manifest_text
        if run_id is not None:
            run = s.get(S.ProcessingRun, run_id)
            if run is None or run.campaign_id != campaign_id:
                raise InputError(f"no run {run_id} of campaign {campaign_id} in the store")
            text = run.manifest_text
        targets = s.scalars(select(S.CampaignTarget).where(S.CampaignTarget.campaign_id == campaign_id)
                            .order_by(S.CampaignTarget.position)).all()
        files = s.execute(select(S.CampaignFile).where(S.CampaignFile.campaign_id == campaign_id)).scalars().all()
        stored = [(t.id, t.name, t.spec, t.n_ports, t.parameters, t.polarizations, unpack_array(t.angles_deg),
                   unpack_array(t.repeats), unpack_array(t.data)) for t in targets]
        file_rows = [(f.target_id, f.path, f.sha256, f.polarization, f.angle_index, f.repeat_index) for f in files]
        manifest_path, freq = crow.manifest_path, unpack_array(crow.frequency_hz)
    manifest = parse_manifest_text(text, manifest_path)
    shapes = {name: spec.get("shape") for _tid, name, spec, *_ in stored}
    manifest = replace(manifest, targets=tuple(replace(t, shape=shapes.get(t.name, t.shape)) for t in manifest.targets))
    folder = manifest.folder
    cubes = {}
    for tid, name, _spec, n_ports, params, pols, angles, repeats, data in stored:
        spec = manifest.target(name)
        paths = np.empty(data.shape[:3], dtype=object)
        hashes = {}
        for target_id, rel, sha, pol, ia, ir in file_rows:
            if target_id == tid:
                p = str(folder / rel)
                paths[pols.index(pol), ia, ir] = p
                hashes[p] = sha
        cube = xr.DataArray(data, dims=("polarization", "angle", "repeat", "frequency"),
                            coords={"polarization": list(pols), "angle": angles, "repeat": repeats, "frequency": freq},
                            name=name, attrs={"units": "VNA ratio", "target": name, "role": spec.role})
        cubes[name] = TargetCube(spec=spec, data=cube, files=paths, hashes=hashes, n_ports=n_ports,
                                 parameters=dict(params))

    def fail(err):
        raise err

    warnings: list[str] = []
    check_campaign(manifest, cubes, fail, warnings.append)
    return Campaign(manifest=manifest, cubes=cubes, frequency_hz=freq, warnings=warnings)


def load_result(url: str | None, run_id: int) -> dict:
    """Everything a report or the dashboard needs from one stored run.

    Returns a dict: ``run_id``, ``campaign_id``, ``campaign``, ``prototype``, ``date`` (ISO or
    None), ``processed_at`` (ISO, UTC), ``software_version``, ``settings`` (the run's settings
    dict), ``process_settings`` (``ProcessSettings.as_dict()``), ``summary`` (as summary.json),
    ``metrics`` and ``checks`` (lists of dicts as in ProcessingResult; non-finite numbers are
    None), ``floor`` {pol: dBsm}, ``warnings``; ``frequency_hz`` (Hz), ``valid_mask``,
    ``band_mask`` (bool arrays over frequency); ``targets`` {name: {role, revision, baseline,
    gate, shape, amplitude (complex xarray (polarization, angle, frequency), m),
    floor (xarray (polarization, frequency), m^2), rep_rel_u (xarray or None)}};
    ``reductions`` {(subject, pol): xarray.Dataset reduction_db, bound (angle, frequency)}; and
    ``result``: the same as an :class:`cloakrcs.process.ProcessingResult`.
    """
    from .process import ProcessingResult, TargetResult

    with open_store(url)() as s:
        run = s.get(S.ProcessingRun, run_id)
        if run is None:
            raise InputError(f"no run {run_id} in the store")
        crow = s.get(S.Campaign, run.campaign_id)
        proto = s.get(S.Prototype, crow.prototype_id)
        trows = s.scalars(select(S.TargetResultRow).where(S.TargetResultRow.run_id == run_id)
                          .order_by(S.TargetResultRow.position)).all()
        reds = s.scalars(select(S.ReductionRow).where(S.ReductionRow.run_id == run_id).order_by(S.ReductionRow.id)).all()
        mrows = s.scalars(select(S.MetricRow).where(S.MetricRow.run_id == run_id).order_by(S.MetricRow.id)).all()
        crows = s.scalars(select(S.CheckRow).where(S.CheckRow.run_id == run_id).order_by(S.CheckRow.id)).all()
        srows = s.scalars(select(S.ScatteringCentreRow).where(S.ScatteringCentreRow.run_id == run_id)
                          .order_by(S.ScatteringCentreRow.id)).all()
        centre_rows = [{**{k: getattr(c, k) for k in _CENTRE_COLUMNS}, **c.extra} for c in srows]
        f = unpack_array(run.frequency_hz)
        targets: dict = {}
        for t in trows:
            coords = {"polarization": list(t.polarizations), "angle": unpack_array(t.angles_deg), "frequency": f}
            dims = ("polarization", "angle", "frequency")
            targets[t.name] = TargetResult(
                name=t.name, role=t.role, revision=t.revision, baseline=t.baseline,
                amplitude=xr.DataArray(unpack_array(t.amplitude), dims=dims, coords=coords, name=t.name),
                floor=xr.DataArray(unpack_array(t.floor), dims=("polarization", "frequency"),
                                   coords={"polarization": list(t.polarizations), "frequency": f}),
                rep_rel_u=None if t.rep_rel_u is None else xr.DataArray(unpack_array(t.rep_rel_u), dims=dims,
                                                                        coords=coords),
                gate=dict(t.gate), shape=t.shape)
        reductions = {}
        for r in reds:
            bound = np.asarray(BOUND_LABELS, dtype=object)[unpack_array(r.bound)]
            reductions[(r.subject, r.polarization)] = xr.Dataset(
                {"reduction_db": (("angle", "frequency"), unpack_array(r.reduction_db)),
                 "bound": (("angle", "frequency"), bound)},
                coords={"angle": unpack_array(r.angles_deg), "frequency": unpack_array(r.frequency_hz)})
        metrics = [{**{k: getattr(m, k) for k in _METRIC_COLUMNS}, **m.extra} for m in mrows]
        checks = [{**{k: getattr(c, k) for k in _CHECK_COLUMNS}, **c.extra} for c in crows]
        result = ProcessingResult(
            campaign=crow.name, prototype=proto.name, date=crow.date.isoformat() if crow.date else None,
            frequency_hz=f, valid_mask=unpack_array(run.valid_mask), band_mask=unpack_array(run.band_mask),
            targets=targets, checks=checks, floor=dict(run.floor), metrics=metrics, settings=dict(run.settings),
            warnings=list(run.warnings), reductions=reductions, centres=centre_rows)
        out = {"run_id": run.id, "campaign_id": crow.id, "campaign": crow.name, "prototype": proto.name,
               "date": result.date, "processed_at": _utc(run.processed_at).isoformat(),
               "software_version": run.software_version, "settings": result.settings,
               "process_settings": dict(run.process_settings), "summary": result.summary(), "metrics": metrics,
               "checks": checks, "floor": result.floor, "warnings": result.warnings, "frequency_hz": f,
               "valid_mask": result.valid_mask, "band_mask": result.band_mask,
               "targets": {name: {"role": t.role, "revision": t.revision, "baseline": t.baseline, "gate": t.gate,
                                  "shape": t.shape, "amplitude": t.amplitude, "floor": t.floor,
                                  "rep_rel_u": t.rep_rel_u} for name, t in targets.items()},
               "reductions": reductions, "result": result}
    return out
