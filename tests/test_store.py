"""Results store: record, deduplicate, history, compare, revisions, atomicity, parallel writers, reprocessing.

Runs on SQLite and on a real PostgreSQL server (CLOAKRCS_TEST_POSTGRES_URL; each test gets a
fresh schema). No mock database.
"""

from __future__ import annotations

import hashlib
import json
import math
import multiprocessing as mp
import os
import traceback
import uuid
from pathlib import Path

import numpy as np
import pytest
from conftest import point_echo, skip_or_fail, write_s1p
from sqlalchemy import create_engine, select, text
from sqlalchemy.engine import make_url

from cloakrcs import store
from cloakrcs import store_schema as S
from cloakrcs.campaign import load_campaign
from cloakrcs.cli import main
from cloakrcs.errors import InputError
from cloakrcs.outputs import json_ready
from cloakrcs.process import ProcessSettings, process_campaign

FREQ = np.linspace(8e9, 12e9, 201)


def write_campaign(folder: Path, name: str, subjects, date: str | None = "2026-11-20", prototype: str | None = "sleeve",
                   check: bool = False) -> Path:
    """A small valid campaign: background, sphere reference, bare, and subjects [(name, revision, amplitude)]."""
    raw = folder / "raw"
    rng = np.random.default_rng(1)
    n = len(FREQ)
    for pol in ("HH", "VV"):
        for rep in range(2):
            write_s1p(raw / f"empty_{pol}_{rep}.s1p", FREQ, point_echo(FREQ, 1.0, 0.01) + 1e-6 * rng.standard_normal(n))
        write_s1p(raw / f"sphere_{pol}.s1p", FREQ, point_echo(FREQ, 4.2, 0.1))
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"bare_{pol}_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 4.2, 0.3) * (1 + 0.01 * ang))
            for sub, _rev, amp in subjects:
                write_s1p(raw / f"{sub}_{pol}_{ang:+06.1f}.s1p", FREQ, point_echo(FREQ, 4.2, amp) * (1 - 0.02 * ang))
    head = f'[campaign]\nname = "{name}"\n'
    if prototype:
        head += f'prototype = "{prototype}"\n'
    if date:
        head += f"date = {date}\n"
    body = head + """
[chamber]
range_m = 4.2

[gate]
span_m = 0.6

[[target]]
name = "empty"
role = "background"
files = "raw/empty_{pol}_{repeat}.s1p"

[[target]]
name = "cal-sphere"
role = "reference"
shape = "sphere"
radius_m = 0.05
files = "raw/sphere_{pol}.s1p"

[[target]]
name = "bare"
role = "subject"
files = "raw/bare_{pol}_{angle}.s1p"
"""
    if check:
        body += '\n[[target]]\nname = "check-sphere"\nrole = "subject"\nshape = "sphere"\nradius_m = 0.05\n' \
                'files = "raw/sphere_{pol}.s1p"\n'
    for sub, rev, _amp in subjects:
        body += f'\n[[target]]\nname = "{sub}"\nrole = "subject"\nbaseline = "bare"\n'
        if rev:
            body += f'revision = "{rev}"\n'
        body += f'files = "raw/{sub}_{{pol}}_{{angle}}.s1p"\n'
    manifest = folder / "manifest.toml"
    folder.mkdir(parents=True, exist_ok=True)
    manifest.write_text(body)
    return manifest


def processed(manifest: Path):
    campaign = load_campaign(manifest)
    return campaign, process_campaign(campaign, ProcessSettings())


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    """Processed campaigns shared by the tests: name -> (manifest, campaign, result)."""
    root = tmp_path_factory.mktemp("campaigns")
    manifests = {
        "tiny": write_campaign(root / "tiny", "tiny", [("r1", "R1", 0.1)], check=True),
        "november": write_campaign(root / "nov", "november", [("r10", "R10", 0.1), ("r2", "R2", 0.15)],
                                   date="2026-11-20", check=True),
        "october": write_campaign(root / "oct", "october", [("r20", "R20", 0.2)], date="2026-10-01"),
        "loose": write_campaign(root / "loose", "loose-campaign", [("sleeve-x", None, 0.12)], prototype=None),
    }
    return {name: (m, *processed(m)) for name, m in manifests.items()}


@pytest.fixture
def tiny(work):
    return work["tiny"]


def _postgres_url():
    base = os.environ.get("CLOAKRCS_TEST_POSTGRES_URL")
    if not base:
        skip_or_fail("no PostgreSQL server: set CLOAKRCS_TEST_POSTGRES_URL")
    schema = "t_" + uuid.uuid4().hex[:12]
    admin = create_engine(base)
    try:
        with admin.begin() as conn:
            conn.execute(text(f"CREATE SCHEMA {schema}"))
    except Exception as exc:  # noqa: BLE001 - any connection failure means the service is missing
        admin.dispose()
        skip_or_fail(f"PostgreSQL at CLOAKRCS_TEST_POSTGRES_URL unusable: {exc}")
    url = make_url(base).update_query_dict({"options": f"-csearch_path={schema}"}).render_as_string(
        hide_password=False)
    return url, admin, schema


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request, tmp_path):
    """A fresh, empty store on each backend."""
    if request.param == "sqlite":
        url = f"sqlite:///{(tmp_path / 'store.sqlite').as_posix()}"
        yield url
        store.close_store(url)
        return
    url, admin, schema = _postgres_url()
    yield url
    store.close_store(url)
    with admin.begin() as conn:
        conn.execute(text(f"DROP SCHEMA {schema} CASCADE"))
    admin.dispose()


@pytest.fixture
def sqlite_url(tmp_path):
    url = f"sqlite:///{(tmp_path / 'store.sqlite').as_posix()}"
    yield url
    store.close_store(url)


def snapshot(url: str) -> dict:
    """Every row of every table, in id order (bytes for blobs), to compare the store's state exactly."""
    out = {}
    with store.open_store(url)() as s:
        for table in S.Base.metadata.sorted_tables:
            rows = s.execute(select(table).order_by(table.c.id)).all()
            out[table.name] = [tuple(bytes(v) if isinstance(v, memoryview) else v for v in r) for r in rows]
    return out


def counts(url: str) -> dict:
    return {name: len(rows) for name, rows in snapshot(url).items()}


# ---------------------------------------------------------------- recording and deduplication

def test_same_files_twice_add_a_run_not_a_campaign(store_url, tiny):
    manifest, campaign, result = tiny
    first = store.record_run(store_url, campaign, result)
    again = load_campaign(manifest)  # read the files anew: recognised by their hashes
    second = store.record_run(store_url, again, process_campaign(again, ProcessSettings(threshold_db=5.0)))
    assert second != first
    n = counts(store_url)
    assert n["campaign"] == 1 and n["processing_run"] == 2 and n["prototype"] == 1 and n["revision"] == 1
    cid = store.find_campaign(store_url, again)
    assert cid is not None
    assert store.campaign_for_hashes(store_url, campaign.file_hashes.values()) == [cid]
    # stored hashes are the files' SHA-256 (hashlib over the bytes on disk, FIPS 180-4)
    with store.open_store(store_url)() as s:
        rows = s.execute(select(S.CampaignFile.path, S.CampaignFile.sha256)).all()
    assert rows and all(hashlib.sha256((manifest.parent / p).read_bytes()).hexdigest() == h for p, h in rows)
    # history shows the latest run of the campaign by default, every run on request
    assert {r["run_id"] for r in store.history(store_url)} == {second}
    assert {r["run_id"] for r in store.history(store_url, all_runs=True)} == {first, second}
    assert [r["run_id"] for r in store.list_runs(store_url)] == [first, second]
    assert store.latest_run_id(store_url, "tiny") == second
    assert store.find_run_for_campaign(store_url, again) == second


def test_failure_partway_leaves_store_exactly_as_before(store_url, work, tmp_path, monkeypatch):
    _manifest, campaign, result = work["tiny"]
    store.record_run(store_url, campaign, result)
    before = snapshot(store_url)
    other, c2, r2 = work["loose"]  # a new prototype, revision, campaign, run and results
    original = store._add_metrics
    reached = []

    def fail_after_some_rows(s, run, crow, res):
        original(s, run, crow, res)  # metric and check rows are flushed to the database ...
        reached.append(s.scalar(select(S.MetricRow.id).where(S.MetricRow.run_id == run.id).limit(1)))
        raise RuntimeError("disk on fire")  # ... then the run fails

    monkeypatch.setattr(store, "_add_metrics", fail_after_some_rows)
    with pytest.raises(RuntimeError, match="disk on fire"):
        store.record_run(store_url, c2, r2)
    assert reached and reached[0] is not None  # rows had really been written inside the transaction
    assert snapshot(store_url) == before
    # the pipeline writes no output when recording fails
    from cloakrcs.pipeline import run_process

    with pytest.raises(RuntimeError):
        run_process(other, tmp_path / "out", store_url=store_url, report=False, campaign=c2)
    assert not (tmp_path / "out" / "summary.json").exists()
    assert snapshot(store_url) == before
    monkeypatch.setattr(store, "_add_metrics", original)
    store.record_run(store_url, c2, r2)
    assert counts(store_url)["campaign"] == 2


# ---------------------------------------------------------------- history, compare, revisions

def test_history_order_keys_and_fallbacks(store_url, work, capsys):
    results = {}
    for name in ("november", "october", "loose"):
        _m, c, r = work[name]
        results[c.manifest.name] = r
        store.record_run(store_url, c, r)
    rows = store.history(store_url, "sleeve")
    # date first (October before November), then labels in natural order: R2 < R10
    assert [(r["revision"], r["polarization"]) for r in rows] == [
        ("R20", "HH"), ("R20", "VV"), ("R2", "HH"), ("R2", "VV"), ("R10", "HH"), ("R10", "VV")]
    for r in rows:
        res = results[r["campaign"]]
        m = next(x for x in res.metrics if x["subject"] == r["subject"] and x["polarization"] == r["polarization"])
        assert r["band_reduction_db"] == pytest.approx(m["band_reduction_db"], rel=1e-12)
        assert r["band_reduction_uncertainty_db"] == pytest.approx(m["band_reduction_uncertainty_db"], rel=1e-12)
        checks = [c["max_error_db"] for c in res.checks if c["polarization"] == r["polarization"]]
        if checks:
            assert r["check_error_db"] == pytest.approx(max(abs(x) for x in checks), abs=1e-12)
        else:
            assert r["check_error_db"] is None
    assert any(r["check_error_db"] is not None for r in rows)
    # no prototype: the campaign name; no revision key: the subject's name
    loose_rows = store.history(store_url, "loose-campaign")
    assert {(r["prototype"], r["revision"]) for r in loose_rows} == {("loose-campaign", "sleeve-x")}

    assert main(["history", "sleeve", "--store", store_url, "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    required = {"prototype", "revision", "subject", "polarization", "campaign", "run_id", "processed_at",
                "band_reduction_db", "band_reduction_uncertainty_db", "bandwidth_hz", "worst_angle_reduction_db",
                "check_error_db"}
    assert out and all(required <= set(r) for r in out)
    assert [r["revision"] for r in out] == [r["revision"] for r in rows]
    assert main(["history", "--store", store_url]) == 0
    text_out = capsys.readouterr().out
    assert "R10" in text_out and "loose-campaign" in text_out
    assert main(["history", "nothing-like-it", "--store", store_url]) == 2
    assert "no prototype 'nothing-like-it'" in capsys.readouterr().err


def test_compare_difference_and_its_uncertainty(store_url, work, capsys):
    store.record_run(store_url, *work["november"][1:])
    rows = {r["revision"] + r["polarization"]: r for r in store.history(store_url)}
    diffs = store.compare(store_url, "R2", "R10")
    assert [d["polarization"] for d in diffs] == ["HH", "VV"]
    for d in diffs:
        a, b = rows["R2" + d["polarization"]], rows["R10" + d["polarization"]]
        assert d["difference_db"] == pytest.approx(b["band_reduction_db"] - a["band_reduction_db"], rel=1e-12)
        # GUM (JCGM 100:2008) eq. 10, y = B - A with uncorrelated inputs: u(y)^2 = u(A)^2 + u(B)^2
        ua, ub = a["band_reduction_uncertainty_db"], b["band_reduction_uncertainty_db"]
        assert d["difference_uncertainty_db"] == pytest.approx(math.sqrt(ua ** 2 + ub ** 2), rel=1e-12)
    # r10 scatters 1.5x less amplitude than r2: the difference is 20 log10(1.5) = 3.52 dB (point echoes)
    assert diffs[0]["difference_db"] == pytest.approx(20 * math.log10(1.5), abs=0.05)
    assert main(["compare", "R2", "R10", "--store", store_url, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)[0]["revision_b"] == "R10"
    assert main(["compare", "R2", "R10", "--store", store_url, "--prototype", "sleeve"]) == 0
    assert "+/-" in capsys.readouterr().out
    with pytest.raises(InputError, match="no revision 'R99'"):
        store.compare(store_url, "R2", "R99")


def test_revision_notes_and_parameters(store_url, tiny, capsys):
    _m, campaign, result = tiny
    store.record_run(store_url, campaign, result)
    assert main(["revision", "note", "sleeve", "R1", "first coated sleeve", "--store", store_url]) == 0
    assert main(["revision", "set", "sleeve", "R1", "thickness_mm=1.2", "eps_r=12-0.3j", "--store", store_url]) == 0
    assert main(["revision", "set", "sleeve", "R1", "thickness_mm=1.5", "--store", store_url]) == 0
    info = store.revision_info(store_url, "sleeve")
    assert info == [{"prototype": "sleeve", "revision": "R1", "current_run": None, "date": "2026-11-20",
                     "notes": "first coated sleeve",
                     "parameters": {"eps_r": "12-0.3j", "thickness_mm": "1.5"}, "campaigns": ["tiny"]}]
    assert main(["revision", "show", "--store", store_url]) == 0
    assert "first coated sleeve" in capsys.readouterr().out
    assert main(["revision", "set", "sleeve", "R1", "novalue", "--store", store_url]) == 2
    assert main(["revision", "note", "no such prototype", "R1", "x", "--store", store_url]) == 2
    assert capsys.readouterr().err.count("\n") == 2  # one line each


# ---------------------------------------------------------------- reprocessing from the store alone

def test_reprocessing_from_the_store_equals_processing_the_files(sqlite_url, tiny):
    import skrf

    manifest, campaign, result = tiny
    run_id = store.record_run(sqlite_url, campaign, result)
    cid = store.list_runs(sqlite_url)[0]["campaign_id"]
    rebuilt = store.load_campaign_from_store(sqlite_url, cid)
    for name, cube in campaign.cubes.items():
        got = rebuilt.cubes[name]
        assert got.data.dtype == np.complex128 and np.array_equal(got.data.values, cube.data.values)
        assert got.hashes == cube.hashes and np.array_equal(got.files, cube.files)
    # scikit-rf 2.2 reading the same file gives the sweep the store returns
    net = skrf.Network(str(manifest.parent / "raw" / "bare_VV_+005.0.s1p"))
    np.testing.assert_allclose(rebuilt.cubes["bare"].data.sel(polarization="VV", angle=5.0, repeat=0).values,
                               net.s[:, 0, 0], rtol=1e-12, atol=0)
    again = process_campaign(rebuilt, ProcessSettings.from_dict(result.settings["process_settings"]))
    assert json_ready(again.metrics) == json_ready(result.metrics)
    assert json_ready(again.checks) == json_ready(result.checks)
    assert again.settings == result.settings
    loaded = store.load_result(sqlite_url, run_id)
    assert json_ready(loaded["metrics"]) == json_ready(result.metrics)
    assert loaded["result"].rcs_table().equals(result.rcs_table())
    assert loaded["result"].reduction_table().equals(result.reduction_table())
    assert np.array_equal(loaded["band_mask"], result.band_mask)
    amp = loaded["targets"]["r1"]["amplitude"]
    assert amp.dims == ("polarization", "angle", "frequency")
    assert np.array_equal(amp.values, result.targets["r1"].amplitude.values)
    with pytest.raises(InputError):
        store.load_result(sqlite_url, run_id + 100)


def test_process_command_records_unless_told_not_to(tmp_path, tiny, monkeypatch):
    manifest, _c, _r = tiny
    url = f"sqlite:///{(tmp_path / 'env.sqlite').as_posix()}"
    monkeypatch.setenv(store.STORE_ENV, url)
    assert main(["process", str(manifest), "--out", str(tmp_path / "o1"), "--quiet", "--no-report"]) == 0
    assert main(["process", str(manifest), "--out", str(tmp_path / "o2"), "--quiet", "--no-report", "--no-store"]) == 0
    assert main(["process", str(manifest), "--out", str(tmp_path / "o3"), "--quiet", "--no-report"]) == 0
    assert [r["run_id"] for r in store.list_runs(url)] == [1, 2]
    summary = json.loads((tmp_path / "o3" / "summary.json").read_text())
    assert summary["run_id"] == 2
    store.close_store(url)


def test_urls(tmp_path, monkeypatch):
    monkeypatch.delenv(store.STORE_ENV, raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    if os.name == "posix" and os.uname().sysname == "Linux":
        assert store.default_url() == f"sqlite:///{(tmp_path / 'data' / 'cloakrcs' / 'results.sqlite').as_posix()}"
    assert store.resolve_url(None) == store.default_url()
    monkeypatch.setenv(store.STORE_ENV, "sqlite:///x.sqlite")
    assert store.resolve_url(None) == "sqlite:///x.sqlite"
    assert store.resolve_url("postgresql+psycopg://u@h/db") == "postgresql+psycopg://u@h/db"
    assert store.resolve_url(str(tmp_path / "plain.db")).startswith("sqlite:////")
    with pytest.raises(InputError):
        store.resolve_url("mysql://u@h/db")


def test_migrations_match_the_models(store_url, tmp_path):
    """A new store is created from the ORM models and stamped; replaying every Alembic migration on an
    empty database builds exactly the same tables (alembic autogenerate's comparison is the reference)."""
    from alembic import command
    from alembic.autogenerate import compare_metadata
    from alembic.migration import MigrationContext
    from sqlalchemy import create_engine

    engine = store.open_store(store_url).kw["bind"]
    with engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), S.Base.metadata)
        assert MigrationContext.configure(conn).get_current_revision() == store.SCHEMA_REVISION
    assert diff == []
    replayed = create_engine(f"sqlite:///{(tmp_path / 'replayed.sqlite').as_posix()}")
    cfg = store._alembic_config()
    with replayed.connect() as conn:
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")
        conn.commit()
        assert compare_metadata(MigrationContext.configure(conn), S.Base.metadata) == []
        assert MigrationContext.configure(conn).get_current_revision() == store.SCHEMA_REVISION
    replayed.dispose()
    # SQLite journal mode after opening (https://sqlite.org/wal.html: PRAGMA journal_mode returns "wal")
    if engine.dialect.name == "sqlite":
        with engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"


# ---------------------------------------------------------------- parallel writers

_SHARED: dict = {}


def _writer(url: str, which: int, n: int, err_path: str) -> None:
    try:
        store.close_store()  # engines inherited through fork are not used
        for _ in range(n):
            campaign, result = _SHARED["work"][which]
            store.record_run(url, campaign, result)
    except BaseException:  # noqa: BLE001 - report anything to the parent
        Path(err_path).write_text(traceback.format_exc())
        os._exit(1)
    os._exit(0)


def test_parallel_writers_on_sqlite_wait_instead_of_failing(tmp_path, work):
    _SHARED["work"] = [work["tiny"][1:], work["november"][1:]]
    url = f"sqlite:///{(tmp_path / 'parallel.sqlite').as_posix()}"  # a new file: the migration races as well
    ctx = mp.get_context("fork")
    procs = [ctx.Process(target=_writer, args=(url, i % 2, 3, str(tmp_path / f"err{i}.txt"))) for i in range(6)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(180)
        if p.is_alive():
            p.kill()
    errors = [f.read_text() for f in tmp_path.glob("err*.txt")]
    assert not errors, errors[0]
    assert [p.exitcode for p in procs] == [0] * 6
    n = counts(url)
    assert n["campaign"] == 2 and n["processing_run"] == 18 and n["prototype"] == 1
    store.close_store(url)


def test_schema_revision_constant_is_alembic_head():
    # alembic's own view of the migration scripts is the reference
    from alembic.script import ScriptDirectory

    assert ScriptDirectory.from_config(store._alembic_config()).get_current_head() == store.SCHEMA_REVISION


# ---------------------------------------------------------------- reprocessing from stored sweeps

def _outputs(folder: Path) -> dict:
    """rcs.csv and reduction.csv bytes, and summary.json without its run id."""
    summary = json.loads((folder / "summary.json").read_text())
    summary.pop("run_id", None)
    return {"rcs": (folder / "rcs.csv").read_bytes(), "reduction": (folder / "reduction.csv").read_bytes(),
            "summary": summary}


def test_reprocessing_takes_unchanged_sweeps_from_the_store(store_url, tmp_path, capsys):
    # a warm run must give byte for byte what a cold read of the same files gives (the fast path's contract)
    manifest = write_campaign(tmp_path / "c", "reuse", [("r1", "R1", 0.1)])
    tagged = tmp_path / "c" / "raw" / "bare_VV_+005.0.s1p"  # R without a value: the reader warns about it
    tagged.write_text(tagged.read_text().replace("# Hz S RI R 50", "# Hz S RI R"))

    def run(out: str, *store_args: str) -> str:
        assert main(["process", str(manifest), "--out", str(tmp_path / out), "--quiet", *store_args]) == 0
        return capsys.readouterr().out

    first = run("cold", "--store", store_url)
    assert "taken from the store" not in first
    second = run("warm", "--store", store_url)
    assert "18 of 18 sweeps taken from the store" in second, second
    cold, warm = _outputs(tmp_path / "cold"), _outputs(tmp_path / "warm")
    assert warm == cold
    assert any("bare_VV_+005.0.s1p" in w and "R has no value" in w for w in warm["summary"]["warnings"])

    changed = tmp_path / "c" / "raw" / "bare_HH_+000.0.s1p"
    write_s1p(changed, FREQ, point_echo(FREQ, 4.2, 0.25))
    third = run("changed", "--store", store_url)
    assert "17 of 18 sweeps taken from the store" in third, third
    assert "1 file(s) changed since they were stored, read afresh: bare_HH_+000.0.s1p" in third
    run("plain", "--no-store")
    assert _outputs(tmp_path / "changed") == _outputs(tmp_path / "plain")
    assert _outputs(tmp_path / "changed")["rcs"] != cold["rcs"]


def test_sweeps_stored_before_the_reuse_columns_are_read_afresh(sqlite_url, tmp_path, capsys):
    # targets recorded by an older cloakrcs have no stored frequency grid or reader warnings: read them again
    manifest = write_campaign(tmp_path / "c", "old", [("r1", "R1", 0.1)])
    assert main(["process", str(manifest), "--out", str(tmp_path / "a"), "--store", sqlite_url, "--quiet"]) == 0
    with store.open_store(sqlite_url, write=True).begin() as s:
        s.execute(text("UPDATE campaign_target SET frequency_hz = NULL, file_warnings = NULL"))
    capsys.readouterr()
    assert main(["process", str(manifest), "--out", str(tmp_path / "b"), "--store", sqlite_url, "--quiet"]) == 0
    assert "taken from the store" not in capsys.readouterr().out
    assert _outputs(tmp_path / "a") == _outputs(tmp_path / "b")
