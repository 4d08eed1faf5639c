"""Hostile input, second round: each case must end in one InputError line (CLI: exit 2), never a
traceback, a hang, a silent skip, a wrong result or a damaged store (README, Commands; Campaign manifest).

Every case here failed before the checks it exercises existed. Outputs and store as one outcome,
under injected faults, are in tests/test_faults.py.
"""

from __future__ import annotations

import base64
import io
import os
import signal
import socket
import sqlite3
import subprocess
import sys
import threading
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from cloakrcs import campaign as C
from cloakrcs import store
from cloakrcs.campaign import inspect_campaign, load_campaign
from cloakrcs.cli import main
from cloakrcs.errors import InputError
from cloakrcs import manifest as M
from cloakrcs.manifest import parse_manifest
from conftest import TINY_MANIFEST, point_echo, write_s1p

ROOT = Path(__file__).resolve().parents[1]
CLI = [sys.executable, "-m", "cloakrcs.cli"]


def one_line(capsys, code, expected_code=2) -> str:
    """The CLI contract: the exit status, and exactly one line on stderr, no traceback."""
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == expected_code, (code, err)
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


def with_keys(manifest: Path, section: str, text: str) -> Path:
    """Add lines right after a section header ([chamber], [gate], ...) of the tiny manifest."""
    body = manifest.read_text().replace(f"[{section}]\n", f"[{section}]\n{text}\n", 1)
    manifest.write_text(body)
    return manifest


# ---------------------------------------------------------------- 2: damaged, foreign, newer stores

@pytest.fixture(scope="module")
def bad_stores(tmp_path_factory):
    folder = tmp_path_factory.mktemp("stores")
    good = folder / "good.db"
    store.open_store(f"sqlite:///{good}")
    store.close_store()
    data = good.read_bytes()
    rng = np.random.default_rng(5)
    (folder / "random.db").write_bytes(rng.bytes(5000))
    (folder / "text.db").write_text("name,value\nthis is a text file,1\n")
    (folder / "truncated.db").write_bytes(data[: len(data) // 2])
    zeroed = bytearray(data)
    zeroed[100:8000] = bytes(7900)  # the schema page overwritten
    (folder / "garbled.db").write_bytes(bytes(zeroed))
    con = sqlite3.connect(folder / "foreign.db")
    con.execute("CREATE TABLE people (name TEXT)")
    con.commit()
    con.close()
    newer = folder / "newer.db"
    newer.write_bytes(data)
    con = sqlite3.connect(newer)
    con.execute("UPDATE alembic_version SET version_num = 'z9999'")
    con.commit()
    con.close()
    return folder


@pytest.mark.parametrize("name, fragment", [
    ("random.db", "is not a SQLite database"), ("text.db", "is not a SQLite database"),
    ("truncated.db", "is damaged"), ("garbled.db", "is damaged"),
    ("foreign.db", "is not a cloakrcs store"),
    ("newer.db", "schema revision 'z9999', newer than this cloakrcs knows (up to"),
])
@pytest.mark.parametrize("command", [["history"], ["compare", "A", "B"], ["revision", "show"], ["report", "1", "--out", "x.html"]])
def test_bad_store_is_one_line_in_every_command(bad_stores, name, fragment, command, capsys):
    line = one_line(capsys, main([*command, "--store", str(bad_stores / name)]))
    assert fragment in line and line.startswith("cloakrcs: "), line


def test_bad_store_fails_before_the_work(bad_stores, tiny_campaign, tmp_path, capsys, monkeypatch):
    import cloakrcs.pipeline as P

    def no_work(*_a, **_k):
        raise AssertionError("the campaign was loaded although the store is unusable")

    monkeypatch.setattr(P, "load_campaign", no_work)
    out = tmp_path / "out"
    line = one_line(capsys, main(["process", str(tiny_campaign), "--out", str(out), "--quiet", "--store",
                                  str(bad_stores / "newer.db")]))
    assert "newer" in line and not out.exists()


# ---------------------------------------------------------------- 3: names and free text bounded

@pytest.mark.parametrize("where, line", [
    ("campaign", 'name = "{long}"'), ("campaign", 'prototype = "{long}"'), ("campaign", 'notes = "{huge}"'),
    ("target", 'revision = "{long}"'), ("target", 'notes = "{huge}"'), ("chamber", 'notes = "{huge}"'),
])
def test_long_names_and_text_are_refused_at_the_manifest(tiny_campaign, where, line):
    text = line.format(long="n" * 10_000, huge="t" * 30_000)
    if where == "target":
        tiny_campaign.write_text(TINY_MANIFEST.replace('revision = "R1"\n', f'{text}\n'))
    elif where == "campaign":
        body = TINY_MANIFEST.replace('name = "tiny"\n', "").replace('prototype = "test sleeve"\n', "")
        base = 'name = "tiny"\n' if "name =" not in text else ""
        tiny_campaign.write_text(body.replace("[campaign]\n", f"[campaign]\n{base}{text}\n"))
    else:
        with_keys(tiny_campaign, where, text)
    with pytest.raises(InputError) as err:
        parse_manifest(tiny_campaign)
    msg = str(err.value)
    assert "more than the limit of" in msg and "\n" not in msg and len(msg) < 400, msg[:400]


def test_long_target_name_is_refused_and_the_message_stays_short(tiny_campaign):
    tiny_campaign.write_text(TINY_MANIFEST.replace('name = "r1"', f'name = "{"x" * 30_000}"'))
    _, problems = parse_manifest(tiny_campaign, collect=True)
    assert problems and all(len(str(p)) < 400 for p in problems)
    assert any(f"limit of {M.MAX_NAME_CHARS}" in str(p) for p in problems)


def test_dashboard_truncates_long_names():
    from cloakrcs.dashboard.callbacks import UI_NAME_CHARS, Views, _table

    class Source:  # a store written before names were bounded
        def runs(self):
            return [{"run_id": 1, "campaign": "c" * 30_000, "prototype": "p" * 10_000, "processed_at": "now"}]

    label = Views(Source()).run_options()[0]["label"]
    assert len(label) < 3 * UI_NAME_CHARS
    cell = _table([["x" * 10_000]], ["name"]).children[1].children[0].children[0]
    assert len(cell.children) == UI_NAME_CHARS


# ---------------------------------------------------------------- 4: process-many goes on

def test_process_many_turns_any_failure_into_its_failed_line(tiny_campaign, tmp_path, capsys):
    nested = tmp_path / "nested" / "manifest.toml"
    nested.parent.mkdir()
    nested.write_text('[campaign]\nname = "deep"\nx = ' + "[" * 20_000 + "]" * 20_000 + "\n")
    fifo_dir = tmp_path / "fifo"
    fifo_dir.mkdir()
    os.mkfifo(fifo_dir / "manifest.toml")
    code = main(["process-many", str(tiny_campaign), str(nested), str(fifo_dir / "manifest.toml"),
                 "--out-root", str(tmp_path / "results"), "--workers", "1", "--no-store", "--no-report"])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    failed = [line for line in captured.err.splitlines() if line.startswith("FAILED")]
    assert len(failed) == 2 and "Traceback" not in captured.err, captured.err
    assert any("nested too deeply" in line for line in failed) and any("FIFO" in line for line in failed)
    assert "1 of 3 campaigns processed" in captured.out
    assert (tmp_path / "results" / "tiny" / "rcs.csv").exists()


# ---------------------------------------------------------------- 5: uploads

def _zip_folder(folder: Path) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for p in sorted(folder.rglob("*")):
            if p.is_file():
                zf.write(p, p.relative_to(folder).as_posix())
    return buf.getvalue()


def test_upload_failing_unexpectedly_is_one_line_and_cleaned_up(tiny_campaign, tmp_path, monkeypatch):
    from cloakrcs.dashboard import upload as U

    root = tmp_path / "uploads"

    def broken(*_a, **_k):
        raise RuntimeError(f"disk trouble under {root}")

    monkeypatch.setattr(C, "load_campaign", broken)
    with pytest.raises(InputError) as err:
        U.unpack_campaign(_zip_folder(tiny_campaign.parent), root, "c.zip")
    assert "RuntimeError" in str(err.value) and str(root) not in str(err.value)
    assert list(root.iterdir()) == []


def test_upload_errors_name_paths_inside_the_upload(tiny_campaign, tmp_path):
    from cloakrcs.dashboard import upload as U

    (tiny_campaign.parent / "raw" / "bare_HH_+005.0.s1p").write_text("# GHz S RI R 50\n8 0.1\n")
    root = tmp_path / "uploads"
    with pytest.raises(InputError) as err:
        U.unpack_campaign(_zip_folder(tiny_campaign.parent), root, "c.zip")
    assert str(err.value).startswith("c.zip:raw/bare_HH_+005.0.s1p"), str(err.value)
    assert str(tmp_path) not in str(err.value) and list(root.iterdir()) == []


def test_upload_job_errors_name_paths_inside_the_upload(tiny_campaign, tmp_path):
    import cloakrcs.dashboard.callbacks as CB
    from cloakrcs.dashboard.data import MemorySource

    tiny_campaign.write_text(TINY_MANIFEST + "\n[band]\nstart_ghz = 20.0\nstop_ghz = 30.0\n")
    views = CB.Views(MemorySource(tmp_path / "uploads"))
    data = "data:application/zip;base64," + base64.b64encode(_zip_folder(tiny_campaign.parent)).decode()
    try:
        job = views.start_upload(data, "c.zip")
    except InputError as err:  # refused while unpacking
        message = str(err)
    else:
        for _ in range(600):
            if views.job_status(job)[1] != "running":
                break
            threading.Event().wait(0.05)
        message = views.jobs.get(job).error
    assert message.startswith("c.zip:manifest.toml:") and "[band] 20-30 GHz lies outside" in message, message
    assert str(tmp_path) not in message and list((tmp_path / "uploads").iterdir()) == []


def test_upload_job_failing_is_one_line_and_cleaned_up(tiny_campaign, tmp_path, monkeypatch):
    import cloakrcs.dashboard.callbacks as CB
    from cloakrcs.dashboard.data import MemorySource

    def broken(*_a, **_k):
        raise MemoryError()

    monkeypatch.setattr(CB, "process_campaign", broken)
    views = CB.Views(MemorySource(tmp_path / "uploads"))
    data = "data:application/zip;base64," + base64.b64encode(_zip_folder(tiny_campaign.parent)).decode()
    job = views.start_upload(data, "c.zip")
    for _ in range(600):
        if views.job_status(job)[1] != "running":
            break
        threading.Event().wait(0.05)
    state = views.jobs.get(job)
    assert state.state == "failed" and "MemoryError" in state.error and "\n" not in state.error
    assert list((tmp_path / "uploads").iterdir()) == []


def test_upload_asking_for_too_much_work_is_refused(tiny_campaign, tmp_path, monkeypatch):
    from cloakrcs.dashboard import upload as U

    monkeypatch.setattr(C, "UPLOAD_TRANSFORM_SAMPLES", 5_000)
    with pytest.raises(InputError, match="more than the limit of 5000"):
        U.unpack_campaign(_zip_folder(tiny_campaign.parent), tmp_path / "up", "c.zip")


# ---------------------------------------------------------------- 6: silently wrong results

def test_negative_gate_centre_through_the_offset_is_refused_like_a_direct_one(tiny_campaign, capsys):
    with_keys(tiny_campaign, "chamber", "offset_m = -5.0")
    assert main(["inspect", str(tiny_campaign)]) == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 3 and all("4.2 + -5 = -0.8 m is not a positive range" in line for line in lines), lines
    with pytest.raises(InputError, match="is not a positive range"):
        load_campaign(tiny_campaign)


def test_huge_magnitude_is_refused_not_turned_into_inf(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    freq = np.linspace(8e9, 12e9, 401)
    write_s1p(raw / "bare_VV_+000.0.s1p", freq, 1e300 * np.ones(401))
    with pytest.raises(InputError) as err:
        load_campaign(tiny_campaign)
    assert err.value.path == str(raw / "bare_VV_+000.0.s1p") and "1e+300" in str(err.value)


@pytest.mark.parametrize("option, value", [("--threshold-db", "nan"), ("--floor-margin-db", "inf"),
                                           ("--check-tolerance-db", "-1"), ("--kaiser-beta", "1e308"),
                                           ("--trim-ghz", "nan"), ("--sector-deg", "nan:30"),
                                           ("--band-ghz", "nan:10")])
def test_non_finite_or_out_of_range_options_are_refused(tiny_campaign, tmp_path, option, value, capsys):
    out = tmp_path / "out"
    line = one_line(capsys, main(["process", str(tiny_campaign), "--out", str(out), "--no-store",
                                  f"{option}={value}"]))
    assert option in line and not out.exists()


# ---------------------------------------------------------------- 7: extreme values

@pytest.mark.parametrize("section, text, key", [
    ("gate", "pad_factor = 1e308", "pad_factor"), ("gate", "pad_factor = 1e6", "pad_factor"),
    ("gate", "pad_factor = 300000", "pad_factor"), ("gate", "kaiser_beta = 1e308", "kaiser_beta"),
    ("chamber", "offset_m = 1e300", "offset_m"), ("gate", "center_m = 1e-300", "center_m"),
    ("gate", "trim_ghz = 1e300", "trim_ghz"),
])
def test_extreme_section_values_are_refused_with_their_range(tiny_campaign, section, text, key):
    with_keys(tiny_campaign, section, text)
    with pytest.raises(InputError) as err:
        parse_manifest(tiny_campaign)
    assert f"'{key}'" in str(err.value) and "outside its range [" in str(err.value), str(err.value)


@pytest.mark.parametrize("old, new, key", [
    ("range_m = 4.2", "range_m = 1e-300", "range_m"),
    ("radius_m = 0.05", "radius_m = 1e300", "radius_m"),
    ("size_m = 0.3", "size_m = 1e200", "size_m"),
])
def test_extreme_target_values_are_refused_also_by_inspect(tiny_campaign, old, new, key, capsys):
    tiny_campaign.write_text(TINY_MANIFEST.replace(old, new))
    with pytest.raises(InputError, match=f"'{key}' = .* is outside its range"):
        parse_manifest(tiny_campaign)
    code = main(["inspect", str(tiny_campaign)])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and "outside its range" in err


def test_repeat_above_int64_is_refused(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    (raw / "empty_HH_1.s1p").rename(raw / "empty_HH_99999999999999999999999.s1p")
    with pytest.raises(InputError, match=r"\{repeat\} 99999999999999999999 is larger than 999999"):
        load_campaign(tiny_campaign)


def test_toml_nested_twenty_thousand_deep_is_one_line(tmp_path):
    path = tmp_path / "manifest.toml"
    path.write_text("[campaign]\nname = 'x'\ndeep = " + "[" * 20_000 + "]" * 20_000 + "\n")
    for collect in (False, True):
        try:
            _, problems = parse_manifest(path, collect=collect)
        except InputError as err:
            problems = [err]
        assert "nested too deeply" in str(problems[0]) and str(problems[0]).startswith(str(path))


def test_unknown_background_name_in_inspect(tiny_campaign, capsys):
    tiny_campaign.write_text(TINY_MANIFEST.replace('name = "bare"\n', 'name = "bare"\nbackground = "nobody"\n'))
    code = main(["inspect", str(tiny_campaign)])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and "background 'nobody' is not a target" in err


# ---------------------------------------------------------------- 9: special files matched by a pattern

def _inspect_subprocess(manifest: Path):
    return subprocess.run([*CLI, "inspect", str(manifest)], cwd=ROOT, capture_output=True, text=True, timeout=120)


def test_fifo_matched_by_a_pattern_is_refused_without_hanging(tiny_campaign):
    fifo = tiny_campaign.parent / "raw" / "bare_HH_+010.0.s1p"
    os.mkfifo(fifo)
    r = _inspect_subprocess(tiny_campaign)  # before the check this blocked on open() forever
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert f"{fifo}: is a FIFO, not a regular file" in r.stderr
    with pytest.raises(InputError, match="is a FIFO"):
        load_campaign(tiny_campaign)


def test_link_to_a_device_is_refused(tiny_campaign):
    link = tiny_campaign.parent / "raw" / "bare_HH_+010.0.s1p"
    os.symlink("/dev/zero", link)
    with pytest.raises(InputError) as err:
        load_campaign(tiny_campaign)
    assert str(err.value) == f"{link}: is a device, not a regular file: only regular Touchstone files are read"


def test_file_far_larger_than_any_touchstone_file_is_refused_unread(tiny_campaign, monkeypatch):
    big = tiny_campaign.parent / "raw" / "bare_HH_+010.0.s1p"
    with open(big, "wb") as fh:
        fh.truncate(1 << 30)  # 1 GiB, sparse
    from cloakrcs import touchstone

    def no_read(*_a, **_k):
        raise AssertionError("the oversized file was read")

    monkeypatch.setattr(touchstone, "read_echoes", no_read)
    with pytest.raises(InputError) as err:
        load_campaign(tiny_campaign)
    limit, _ = C.max_sweep_file_bytes(big)
    assert str(err.value).startswith(f"{big}: is 1073741824 bytes") and f"({limit} bytes)" in str(err.value)
    assert limit == 100_001 * 3 * 40 + 1024 ** 2  # 1 port: a frequency and 2 numbers a row


def test_plausible_limit_grows_with_the_ports():
    assert C.max_sweep_file_bytes(Path("x.s4p")) == (100_001 * 33 * 40 + 1024 ** 2, 4)
    assert C.max_sweep_file_bytes(Path("x.ts"))[1] == 4


# ---------------------------------------------------------------- 10: output folders

def test_no_report_removes_an_older_runs_report(tiny_campaign, tmp_path):
    from cloakrcs.pipeline import run_process

    out = tmp_path / "out"
    run_process(tiny_campaign, out, store_url=None, report=True)
    assert (out / "report.html").exists()
    run_process(tiny_campaign, out, store_url=None, report=False)
    assert not (out / "report.html").exists()
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "rcs.csv", "reduction.csv", "summary.json"]


def test_second_run_on_a_locked_output_folder_is_refused(tiny_campaign, tmp_path, capsys):
    from cloakrcs.outputs import FolderLock

    out = tmp_path / "out"
    # another process holds the lock (an OS file lock: a child process, as a second cloakrcs run would be)
    holder = subprocess.Popen([sys.executable, "-c", "import sys, time; from cloakrcs.outputs import FolderLock; "
                               "lock = FolderLock(sys.argv[1]).acquire(); print('locked', flush=True); time.sleep(60)",
                               str(out)], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert holder.stdout.readline().strip() == "locked"
        line = one_line(capsys, main(["process", str(tiny_campaign), "--out", str(out), "--no-store", "--quiet"]))
        assert "in use by another cloakrcs run" in line and str(out) in line
        assert not (out / "rcs.csv").exists()
    finally:
        holder.kill()
        holder.wait()
    with FolderLock(out):  # released when its holder ended
        pass


# ---------------------------------------------------------------- 11: bounded work

def test_work_per_target_is_bounded_and_the_limit_stated(tiny_campaign):
    with pytest.raises(InputError) as err:
        load_campaign(tiny_campaign, max_samples=5_000)
    assert "more than the limit of 5000" in str(err.value) and "pad_factor" in str(err.value)
    campaign, problems, _ = inspect_campaign(tiny_campaign)
    assert problems == []  # within the command line's limit
    assert C.work_problem(campaign.manifest, campaign.cubes, 5_000) is not None


def test_fft_length_is_bounded(tiny_campaign, monkeypatch):
    monkeypatch.setattr(C, "MAX_TRANSFORM_LENGTH", 1000)
    with pytest.raises(InputError, match=r"asks for an FFT of \d+ points, more than the limit of 1000"):
        load_campaign(tiny_campaign)


# ---------------------------------------------------------------- 12: inspect checks what process checks

@pytest.mark.parametrize("section, text, fragment", [
    ("gate", "trim_ghz = 3.0", "no valid band left"),
    ("band", "start_ghz = 20.0\nstop_ghz = 30.0", "lies outside the measured frequencies"),
])
def test_inspect_reports_band_and_trim_problems(tiny_campaign, section, text, fragment, capsys):
    if section == "band":
        tiny_campaign.write_text(tiny_campaign.read_text() + f"\n[band]\n{text}\n")
    else:
        with_keys(tiny_campaign, section, text)
    code = main(["inspect", str(tiny_campaign)])
    captured = capsys.readouterr()
    assert code == 2 and fragment in captured.err and "problems: 1" in captured.out, captured


# ---------------------------------------------------------------- 13: the small ones

def test_grid_mismatch_message_prints_the_differing_values(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    freq = np.linspace(8e9, 12e9, 401) + 1e3  # 1 kHz off
    write_s1p(raw / "bare_HH_+005.0.s1p", freq, point_echo(freq, 4.2, 0.3))
    with pytest.raises(InputError) as err:
        load_campaign(tiny_campaign)
    assert "8000001000 Hz against 8000000000 Hz (+1000 Hz" in str(err.value), str(err.value)


def test_names_a_spreadsheet_would_evaluate_are_prefixed(tiny_campaign, tmp_path):
    from cloakrcs.pipeline import run_process

    # OWASP "CSV Injection": cells beginning with = + - @ are prefixed with an apostrophe (common practice)
    text = TINY_MANIFEST.replace('name = "bare"', 'name = "=HYPERLINK(1)"').replace(
        'baseline = "bare"', 'baseline = "=HYPERLINK(1)"').replace('name = "r1"', 'name = "@r1"')
    tiny_campaign.write_text(text)
    out = run_process(tiny_campaign, tmp_path / "out", store_url=None, report=False).out_dir
    rcs = pd.read_csv(out / "rcs.csv")
    assert set(rcs["target"]) == {"'=HYPERLINK(1)", "'@r1"}
    red = pd.read_csv(out / "reduction.csv")
    assert set(red["subject"]) == {"'@r1"} and set(red["baseline"]) == {"'=HYPERLINK(1)"}


def test_busy_port_is_one_line_exit_2(capsys):
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        sock.listen(1)
        port = sock.getsockname()[1]
        line = one_line(capsys, main(["serve", "--port", str(port)]))
    assert f"cannot serve on 127.0.0.1:{port}" in line and "another program" in line


def test_ctrl_c_while_the_command_starts_is_one_line(monkeypatch, capsys):
    import cloakrcs.cli as cli

    def interrupted():
        raise KeyboardInterrupt  # as if Ctrl-C came while the command modules were imported

    monkeypatch.setattr(cli, "build_parser", interrupted)
    assert one_line(capsys, cli.main(["inspect", "x.toml"]), 130) == "cloakrcs: interrupted"


def test_ctrl_c_after_the_work_is_complete_keeps_exit_0(tmp_path):
    # a Ctrl-C landing after main() returned (during interpreter shutdown) must not turn a complete
    # run into a death by signal (exit -2) or a traceback
    code = ("import os, signal, sys\nfrom cloakrcs.cli import main\n"
            "sys.argv = ['cloakrcs', 'reference', 'sphere', '--radius-m', '0.05', '--freq-ghz', '10:10:1']\n"
            "rc = main()\nos.kill(os.getpid(), signal.SIGINT)\nsys.exit(rc)\n")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and "Traceback" not in r.stderr, (r.returncode, r.stderr)
    assert signal.SIGINT  # the signal the terminal sends on Ctrl-C
