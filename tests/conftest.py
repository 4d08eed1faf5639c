"""Shared test helpers: tiny campaigns written on the fly, and the service-skip policy."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

from cloakrcs.constants import C0

REQUIRE_SERVICES = os.environ.get("CLOAKRCS_REQUIRE_SERVICES") == "1"

# Property-based tests draw their examples from a fixed seed: no test may pass or fail by luck.
# (CLOAKRCS_HYPOTHESIS_RANDOM=1 explores new examples locally.)
from hypothesis import settings as _hypothesis_settings  # noqa: E402

_hypothesis_settings.register_profile("seeded", derandomize=True, database=None)
_hypothesis_settings.register_profile("explore")
_hypothesis_settings.load_profile("explore" if os.environ.get("CLOAKRCS_HYPOTHESIS_RANDOM") == "1" else "seeded")


def skip_or_fail(reason: str):
    """Skip a test whose system service is missing; fail instead where CI requires services."""
    if REQUIRE_SERVICES:
        pytest.fail(f"required service missing: {reason}")
    pytest.skip(reason)


def write_s1p(path: Path, freq_hz: np.ndarray, s: np.ndarray) -> Path:
    """Minimal Touchstone v1 one-port writer (RI, Hz) for tests that need files fast."""
    path.parent.mkdir(parents=True, exist_ok=True)
    rows = "\n".join(f"{f:.1f} {v.real:.12e} {v.imag:.12e}" for f, v in zip(freq_hz, s))
    path.write_text(f"! test sweep\n# Hz S RI R 50\n{rows}\n")
    return path


def point_echo(freq_hz: np.ndarray, range_m: float, amplitude: complex = 1.0) -> np.ndarray:
    """A point echo exp(-j 2 k r) * amplitude / r^2 (README, Signal model)."""
    k = 2 * np.pi * freq_hz / C0
    return amplitude * np.exp(-2j * k * range_m) / range_m ** 2


@pytest.fixture
def tiny_campaign(tmp_path):
    """A valid campaign: background (2 repeats), sphere reference, bare and one revision, HH/VV, 3 angles."""
    freq = np.linspace(8e9, 12e9, 401)
    raw = tmp_path / "raw"
    rng = np.random.default_rng(1)
    for pol in ("HH", "VV"):
        for rep in range(2):
            write_s1p(raw / f"empty_{pol}_{rep}.s1p", freq, point_echo(freq, 1.0, 0.01) + 1e-6 * rng.standard_normal(401))
        write_s1p(raw / f"sphere_{pol}.s1p", freq, point_echo(freq, 4.2, 0.1))
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"bare_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.3))
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.1))
    manifest = tmp_path / "manifest.toml"
    manifest.write_text(TINY_MANIFEST)
    return manifest


TINY_MANIFEST = """\
[campaign]
name = "tiny"
prototype = "test sleeve"
date = 2026-11-20

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
size_m = 0.3

[[target]]
name = "r1"
role = "subject"
baseline = "bare"
revision = "R1"
files = "raw/r1_{pol}_{angle}.s1p"
"""
