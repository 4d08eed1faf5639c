"""Faults: SIGKILL during `cloakrcs process`, a read-only output folder, a full disk, and a fault
injected at every step of writing the outputs and recording the run.

After a kill the SQLite store stays consistent (integrity check, every run complete, no run
recorded before is lost), a rerun succeeds, and every output file that carries its final name
is complete; temporaries are ``.<name>.*.part`` (cloakrcs.outputs.atomic_write), the empty
``.probe.*`` write probe of prepare_out_dir, a killed run's ``.cloakrcs-staging-*`` folder (removed
by the next run) and the folder's ``.cloakrcs.lock``. A fault (full disk, Ctrl-C) at any step
leaves the store and the earlier outputs exactly as they were (README, Results store and revisions).
"""

from __future__ import annotations

import copy
import datetime
import json
import os
import random
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from cloakrcs.errors import InputError
from cloakrcs.simulate import simulate_campaign

CLI = [sys.executable, "-m", "cloakrcs.cli"]
ROOT = Path(__file__).resolve().parents[1]
OUTPUTS = ("rcs.csv", "reduction.csv", "summary.json", "report.html")
TEMPORARY = re.compile(r"^(\.(rcs\.csv|reduction\.csv|summary\.json|report\.html)\..+\.part|\.probe\..+"
                       r"|\.cloakrcs-staging-.+|\.cloakrcs\.lock)$")
CONFIG = {
    "seed": 3,
    "polarizations": ["HH", "VV"],
    "campaign": {"name": "faults", "prototype": "fault sleeve", "date": datetime.date(2026, 11, 20)},
    "chamber": {"range_m": 4.0},
    "sweep": {"start_ghz": 8.0, "stop_ghz": 12.0, "points": 201},
    "angles": {"start": -20.0, "stop": 20.0, "step": 10.0},
    "noise": {"level_db": -90.0},
    "gate": {"span_m": 0.6},
    "target": [
        {"name": "empty", "role": "background", "model": "empty", "repeats": 2},
        {"name": "cal", "role": "reference", "model": "sphere", "radius_m": 0.1},
        {"name": "bare", "role": "subject", "model": "sphere", "radius_m": 0.08},
        {"name": "r1", "role": "subject", "model": "sphere", "radius_m": 0.05, "baseline": "bare",
         "revision": "R1"},
    ],
}


def process(manifest, out, *extra):
    return subprocess.Popen([*CLI, "process", str(manifest), "--out", str(out), "--quiet", *extra], cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    return simulate_campaign(copy.deepcopy(CONFIG), tmp_path_factory.mktemp("faults") / "campaign").manifest_path


def assert_outputs_complete(out: Path, reference: Path) -> None:
    for p in out.iterdir():
        assert p.name in OUTPUTS or TEMPORARY.match(p.name), f"unexpected file {p.name}"
    for name in ("rcs.csv", "reduction.csv"):  # fixed number format: same inputs, same bytes
        if (out / name).exists():
            assert (out / name).read_bytes() == (reference / name).read_bytes(), f"{name} incomplete"
            assert len(pd.read_csv(out / name)) == len(pd.read_csv(reference / name))
    if (out / "summary.json").exists():
        got = json.loads((out / "summary.json").read_text())
        assert set(got) == set(json.loads((reference / "summary.json").read_text()))
    if (out / "report.html").exists():
        assert (out / "report.html").read_text().rstrip().endswith("</html>")


def store_state(url: str) -> dict[int, tuple]:
    """run id -> (rows of results, metrics, checks) of that run; the SQLite integrity check passes."""
    import sqlalchemy as sa

    from cloakrcs import store_schema as S

    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            assert conn.execute(sa.text("PRAGMA integrity_check")).scalar() == "ok"
            runs = conn.execute(sa.select(S.ProcessingRun.id)).scalars().all()
            state = {}
            for rid in runs:
                state[rid] = tuple(conn.execute(sa.select(sa.func.count()).select_from(t.__table__)
                                                .where(t.run_id == rid)).scalar()
                                   for t in (S.TargetResultRow, S.MetricRow, S.CheckRow))
            return state
    finally:
        engine.dispose()


def test_sigkill_during_process_leaves_store_and_outputs_consistent(campaign, tmp_path):
    try:
        from cloakrcs import store
    except ImportError:
        pytest.skip("cloakrcs.store (the results store module) is missing: nothing to record runs")
    url = f"sqlite:///{tmp_path / 'store.db'}"
    ref_out = tmp_path / "ref"
    p = process(campaign, ref_out, "--store", url)
    assert p.wait(timeout=300) == 0, p.stderr.read()
    # time a run like the ones to be killed (campaign already stored: a new run only)
    t0 = time.monotonic()
    p = process(campaign, tmp_path / "timing", "--store", url)
    assert p.wait(timeout=300) == 0, p.stderr.read()
    duration = time.monotonic() - t0
    complete = store_state(url)
    assert len(complete) == 2 and all(n > 0 for n in next(iter(complete.values()))[:2])
    shape = next(iter(complete.values()))
    assert [r["run_id"] if "run_id" in r else r.get("id") for r in store.list_runs(url)]  # the store's own view

    rng = random.Random(11)
    out = tmp_path / "out"
    killed = 0
    for attempt in range(5):
        before = store_state(url)
        p = process(campaign, out, "--store", url)
        time.sleep(rng.uniform(0.15, 0.9) * duration)
        if p.poll() is None:
            p.send_signal(signal.SIGKILL)
            killed += 1
        p.wait(timeout=60)
        after = store_state(url)
        assert set(before) <= set(after), "a run stored before was lost"
        assert len(after) - len(before) in (0, 1)
        assert all(v == shape for v in after.values()), f"an incomplete run in the store: {after}"
        if out.exists():
            assert_outputs_complete(out, ref_out)
    assert killed >= 2, "too few kills landed while the command ran"
    before = store_state(url)
    p = process(campaign, out, "--store", url)
    assert p.wait(timeout=300) == 0, p.stderr.read()
    after = store_state(url)
    assert len(after) == len(before) + 1 and set(before) <= set(after)
    assert all((out / n).exists() for n in OUTPUTS[:3])
    assert_outputs_complete(out, ref_out)


def _mount_tmpfs(target: Path, options: str) -> None:
    target.mkdir(parents=True, exist_ok=True)
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(target)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({r.stderr.strip() or 'mount failed'}): needs root or CAP_SYS_ADMIN")


def _assert_one_line_refusal(p, out: Path) -> None:
    code = p.wait(timeout=300)
    err = p.stderr.read()
    assert code == 2, (code, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("cloakrcs: ") and "Traceback" not in err, err
    assert str(out) in lines[0], lines[0]


def test_read_only_output_folder(campaign, tmp_path):
    out = tmp_path / "ro"
    if os.geteuid() == 0:  # root ignores file modes: a read-only tmpfs is read-only for root too
        _mount_tmpfs(out, "ro,size=64k")
    else:
        out.mkdir()
        out.chmod(0o555)
    try:
        p = process(campaign, out, "--no-store")
        _assert_one_line_refusal(p, out)
        assert list(out.iterdir()) == []
    finally:
        if os.geteuid() == 0:
            subprocess.run(["umount", str(out)], check=False)
        else:
            out.chmod(0o755)


@pytest.mark.parametrize("room", ["none", "first_files"])
def test_full_disk(campaign, tmp_path, room):
    """A tmpfs too small for the outputs: exit 2, one line, no partial file under a final name."""
    ref = tmp_path / "ref"
    p = process(campaign, ref, "--no-store")
    assert p.wait(timeout=300) == 0, p.stderr.read()
    first = sum((ref / n).stat().st_size for n in OUTPUTS[:3])
    size_kb = 8 if room == "none" else (first // 4096 + 2) * 4  # room for rcs/reduction/summary, not the report
    out = tmp_path / "full"
    _mount_tmpfs(out, f"size={size_kb}k")
    try:
        if room == "first_files" and (ref / "report.html").stat().st_size < 8192:
            pytest.skip("report.html too small to overflow the tmpfs after the other outputs")
        filler = out / "filler"
        p = process(campaign, out, "--no-store")
        _assert_one_line_refusal(p, out)
        assert not filler.exists()
        assert_outputs_complete(out, ref)
        assert not [q for q in out.iterdir() if q.name.endswith(".part")], "a temporary file was left"
    finally:
        subprocess.run(["umount", str(out)], check=False)


# ---------------------------------------------------------------- outputs and store as one outcome

class _Injected(OSError):
    def __init__(self):
        super().__init__(28, "No space left on device (injected)")


def _products(out: Path) -> dict[str, bytes]:
    return {n: (out / n).read_bytes() for n in OUTPUTS if (out / n).exists()}


@pytest.fixture(scope="module")
def processed(campaign):
    """The campaign loaded and processed once, and its report, reused by every injected run."""
    from cloakrcs.campaign import load_campaign
    from cloakrcs.process import process_campaign
    from cloakrcs.report import render_report

    loaded = load_campaign(campaign)
    result = process_campaign(loaded)
    return loaded, result, render_report(result, loaded)


@pytest.fixture
def injectable(processed, tmp_path, monkeypatch):
    """(run, url, out): run() is one `process` run into out with the store at url, processing replayed."""
    import cloakrcs.pipeline as P
    import cloakrcs.report as R
    from cloakrcs.pipeline import run_process

    loaded, result, html = processed
    monkeypatch.setattr(P, "process_campaign", lambda *_a, **_k: result)
    monkeypatch.setattr(R, "render_report", lambda *_a, **_k: html)
    url = f"sqlite:///{tmp_path / 'store.db'}"
    out = tmp_path / "out"

    def run(store: bool = True):
        return run_process(loaded.manifest.path, out, store_url=url if store else None, campaign=loaded)

    run()  # an earlier run's outputs and its stored run
    return run, url, out


def _count_replaces(run, monkeypatch) -> int:
    calls = []
    real = os.replace
    monkeypatch.setattr(os, "replace", lambda a, b: (calls.append(1), real(a, b))[1])
    run()
    monkeypatch.setattr(os, "replace", real)
    return len(calls)


@pytest.mark.parametrize("fault", [_Injected, KeyboardInterrupt])
def test_a_fault_at_any_file_step_leaves_outputs_and_store_as_they_were(injectable, monkeypatch, fault):
    """Every rename of a run (each output's atomic write, the summary with its run id, setting the earlier
    outputs aside, moving each new one into place) fails once in turn, as a full disk or as Ctrl-C."""
    run, url, out = injectable
    steps = _count_replaces(run, monkeypatch)
    assert steps >= 4 + 1 + 4 + 4  # 4 outputs + summary with run id, 4 set aside, 4 moved into place
    real = os.replace
    for k in range(1, steps + 1):
        before, files = store_state(url), _products(out)
        calls = []

        def replace(a, b, k=k):
            calls.append(1)
            if len(calls) == k:
                raise fault()
            return real(a, b)

        monkeypatch.setattr(os, "replace", replace)
        with pytest.raises((InputError, KeyboardInterrupt)):
            run()
        monkeypatch.setattr(os, "replace", real)
        assert store_state(url) == before, f"step {k}: the store changed"
        assert _products(out) == files, f"step {k}: the earlier outputs were not kept"
        assert not list(out.glob(".cloakrcs-staging-*")), f"step {k}: staging left behind"
    before = store_state(url)
    outcome = run()
    assert len(store_state(url)) == len(before) + 1
    assert json.loads((out / "summary.json").read_text())["run_id"] == outcome.run_id


@pytest.mark.parametrize("where", ["records", "commit", "processing"])
def test_a_store_fault_or_early_ctrl_c_leaves_outputs_and_store_as_they_were(injectable, monkeypatch, where):
    import sqlalchemy.orm

    import cloakrcs.pipeline as P
    from cloakrcs import store

    run, url, out = injectable
    before, files = store_state(url), _products(out)
    if where == "records":  # fails while the rows are written
        monkeypatch.setattr(store, "_add_metrics", lambda *_a: (_ for _ in ()).throw(_Injected()))
    elif where == "commit":  # the outputs are in place when the commit fails: they must go back
        def commit(self):
            raise _Injected()
        monkeypatch.setattr(sqlalchemy.orm.SessionTransaction, "commit", commit)
    else:
        monkeypatch.setattr(P, "process_campaign", lambda *_a, **_k: (_ for _ in ()).throw(KeyboardInterrupt()))
    with pytest.raises((OSError, KeyboardInterrupt)):
        run()
    monkeypatch.undo()
    assert store_state(url) == before and _products(out) == files
    assert not list(out.glob(".cloakrcs-staging-*"))


def test_ctrl_c_during_the_commit_is_held_until_it_is_done(injectable, monkeypatch):
    from cloakrcs.outputs import OutputFolder

    run, url, out = injectable
    before = store_state(url)
    real = OutputFolder.publish

    def publish(self):
        os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C while the outputs move into place
        return real(self)

    monkeypatch.setattr(OutputFolder, "publish", publish)
    outcome = run()
    assert len(store_state(url)) == len(before) + 1
    assert json.loads((out / "summary.json").read_text())["run_id"] == outcome.run_id


def test_no_store_run_is_published_whole(injectable, monkeypatch):
    run, url, out = injectable
    files = _products(out)
    real = os.replace
    calls = []

    def replace(a, b):
        calls.append(1)
        if len(calls) == 7:  # after the four writes, while the earlier outputs are set aside
            raise _Injected()
        return real(a, b)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(InputError, match="cannot move the outputs into place"):
        run(store=False)
    monkeypatch.setattr(os, "replace", real)
    assert _products(out) == files
