"""The built wheel, installed (not editable) in a fresh virtual environment, installs one import
package, ``cloakrcs``, and its console script; ``analysis`` and ``dashboard`` are not importable.

Wheel layout per the binary distribution format (PyPA specification, "Binary distribution
format": ``{name}-{version}.dist-info/RECORD`` lists every installed file).
"""

from __future__ import annotations

import csv
import importlib.util
import io
import os
import shutil
import site
import subprocess
import sys
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.slow


def _run(cmd, cwd, **kw):
    out = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=240, **kw)
    assert out.returncode == 0, f"{cmd}: {out.stdout}{out.stderr}"
    return out


@pytest.fixture(scope="module")
def wheel_env(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("wheel")
    # build from a copy, so the build leaves nothing in the repository
    src = tmp / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, src / name)
    for name in ("analysis", "dashboard"):
        shutil.copytree(ROOT / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
    isolation = [] if importlib.util.find_spec("wheel") or _setuptools_has_bdist_wheel() else None
    cmd = [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(tmp / "dist"), str(src)]
    _run(cmd + (["--no-build-isolation"] if isolation is not None else []), cwd=tmp)
    wheel = next((tmp / "dist").glob("cloakrcs-*.whl"))

    env_dir = tmp / "venv"
    venv.EnvBuilder(with_pip=False).create(env_dir)
    python = env_dir / "bin" / "python"
    _run([sys.executable, "-m", "pip", "--python", str(python), "install", "--no-deps", "-q", str(wheel)], cwd=tmp)
    # the dependencies come from this environment's site-packages, through a .pth file (its
    # entries are plain paths: .pth files inside them, such as editable installs, are not run)
    deps = [p for p in [*site.getsitepackages(), *sys.path] if p.endswith("site-packages") and os.path.isdir(p)]
    purelib = Path(subprocess.run([str(python), "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"],
                                  capture_output=True, text=True, check=True).stdout.strip())
    (purelib / "zz_test_dependencies.pth").write_text("\n".join(dict.fromkeys(deps)) + "\n")
    work = tmp / "elsewhere"  # a working folder outside the repository
    work.mkdir()
    return wheel, env_dir, work


def _setuptools_has_bdist_wheel() -> bool:
    return importlib.util.find_spec("setuptools.command.bdist_wheel") is not None


def _clean_env() -> dict:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    return env


def test_wheel_holds_only_the_cloakrcs_package(wheel_env):
    wheel, _, _ = wheel_env
    with zipfile.ZipFile(wheel) as z:
        names = z.namelist()
        info = next(n.split("/")[0] for n in names if n.endswith(".dist-info/RECORD"))
        record = [row[0] for row in csv.reader(io.StringIO(z.read(f"{info}/RECORD").decode()))]
        top_level = z.read(f"{info}/top_level.txt").decode().split() if f"{info}/top_level.txt" in names else None
        entry_points = z.read(f"{info}/entry_points.txt").decode()
    assert {r.split("/")[0] for r in record} == {"cloakrcs", info}
    assert set(names) == set(record)
    if top_level is not None:
        assert top_level == ["cloakrcs"]
    assert "cloakrcs = cloakrcs.cli:main" in entry_points
    # the package data that the store and the dashboard need at run time
    assert "cloakrcs/dashboard/assets/style.css" in record
    assert "cloakrcs/migrations/versions/0001_initial.py" in record


def test_installed_wheel_console_script_and_imports(wheel_env):
    _, env_dir, work = wheel_env
    python, script = env_dir / "bin" / "python", env_dir / "bin" / "cloakrcs"
    env = _clean_env()
    out = _run([str(script), "--version"], cwd=work, env=env)
    assert out.stdout.strip() == "cloakrcs 0.1.0"
    code = ("import cloakrcs, cloakrcs.dashboard.app; from cloakrcs import process_campaign, load_campaign; "
            "print(cloakrcs.__file__)")
    where = Path(_run([str(python), "-c", code], cwd=work, env=env).stdout.strip())
    assert where.is_relative_to(env_dir), where  # the installed copy, not the repository
    for name in ("analysis", "dashboard"):
        res = subprocess.run([str(python), "-c", f"import {name}"], cwd=work, env=env, capture_output=True,
                             text=True, timeout=60)
        assert res.returncode != 0 and f"No module named '{name}'" in res.stderr, res.stderr
    # the installed migrations create a store: an empty history, exit 0
    store = f"sqlite:///{work / 'store.sqlite'}"
    _run([str(script), "history", "--store", store], cwd=work, env=env)
    assert (work / "store.sqlite").stat().st_size > 0
