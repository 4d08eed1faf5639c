"""Command-line contracts: README's Quick start, CI calling it, option values with a minus sign."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from cloakrcs.cli import main, rejoin_negative_values

ROOT = Path(__file__).resolve().parents[1]


def quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"^#+ .*Quick start.*?^```[a-z]*\n(.*?)^```", text, re.S | re.M | re.I).group(1)
    return [line for line in block.splitlines() if line.strip() and not line.startswith("#")]


def test_quick_start_has_two_commands_and_ci_runs_the_second():
    cmds = quick_start_commands()
    assert len(cmds) == 2
    assert "cloakrcs demo" in cmds[0]
    assert "pytest" in cmds[1]
    ci = (ROOT / ".ci" / "run").read_text()
    assert cmds[1] in ci
    assert "CLOAKRCS_REQUIRE_SERVICES=1" in ci


def test_negative_values_rejoined():
    assert rejoin_negative_values(["reference", "plate", "--angle-deg", "-30:30:61", "--pol", "HH"]) == [
        "reference", "plate", "--angle-deg=-30:30:61", "--pol", "HH"]
    assert rejoin_negative_values(["--sector-deg", "-.5:3"]) == ["--sector-deg=-.5:3"]
    assert rejoin_negative_values(["--quiet", "--no-store"]) == ["--quiet", "--no-store"]


def test_reference_plate_exact_command_line(capsys):
    # the exact command line of the references issue
    assert main(["reference", "plate", "--width-m", "0.2", "--height-m", "0.15", "--freq-ghz", "10:10:1",
                 "--angle-deg", "-30:30:61"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0] == "frequency_hz,angle_deg,polarization,rcs_dbsm,phase_deg"
    assert len(lines) == 62


def test_console_script_runs_and_errors_are_one_line(tmp_path):
    exe = Path(sys.executable).with_name("cloakrcs")
    if not exe.exists():
        pytest.skip("console script not installed in this environment")
    ok = subprocess.run([str(exe), "--version"], capture_output=True, text=True)
    assert ok.returncode == 0 and "cloakrcs" in ok.stdout
    bad = subprocess.run([str(exe), "process", str(tmp_path / "none.toml"), "--out", str(tmp_path / "o"),
                          "--no-store"], capture_output=True, text=True)
    assert bad.returncode == 2
    assert bad.stderr.strip().count("\n") == 0 and "manifest not found" in bad.stderr
    assert not (tmp_path / "o").exists()


def test_demo_processes_sample_once(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("CLOAKRCS_STORE", f"sqlite:///{tmp_path / 'store.sqlite'}")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    assert main(["demo", "--no-serve"]) == 0
    first = capsys.readouterr()
    assert "r3 vs bare" in first.out
    assert main(["demo", "--no-serve"]) == 0
    assert "already stored" in capsys.readouterr().err
