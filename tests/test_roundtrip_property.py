"""Property-based round trip of the Touchstone writer and reader (hypothesis).

write_touchstone -> read_touchstone over random port counts (1..4), formats (RI, MA, DB),
units (Hz, kHz, MHz, GHz) and versions (1.0, 2.0, 2.1) gives back the written numbers.

Tolerance: values are written with ``digits`` significant digits (%.Ng), so each written number
carries a relative rounding error of at most 0.5 x 10^(1 - digits). Frequencies: relative
10^(1 - digits). RI: each part within 10^(1 - digits) x max(|part|, smallest written
magnitude scale) -- we compare the complex value with atol = 10^(1 - digits) x |s|max + tiny.
MA/DB: magnitude relative 10^(1 - digits) (DB: x ln(10)/20 x |dB| more, from the derivative of
10^(x/20)), angle 10^(1 - digits) x 180 degrees absolute -> |ds| <= |s| (rel_mag + angle_rad).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
import skrf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cloakrcs.touchstone import read_touchstone, write_touchstone

_UNIT_HZ = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}


@st.composite
def networks(draw):
    ports = draw(st.integers(1, 4))
    fmt = draw(st.sampled_from(["RI", "MA", "DB"]))
    unit = draw(st.sampled_from(list(_UNIT_HZ)))
    version = draw(st.sampled_from(["1.0", "2.0", "2.1"]))
    digits = draw(st.integers(6, 17))
    nf = draw(st.integers(1, 12))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    # frequencies: a random start and increasing random steps, in Hz (1 Hz .. 100 GHz)
    start = draw(st.floats(0.0, 1e11))
    steps = rng.uniform(1.0, 1e9, nf - 1) * 10.0 ** rng.integers(-3, 2, nf - 1)
    f = start + np.concatenate([[0.0], np.cumsum(steps)])
    if np.any(np.diff(f) <= 0):  # steps lost in rounding at this start: spread them
        f = start + np.arange(nf) * max(1.0, start * 1e-6)
    scale = 10.0 ** rng.uniform(-6, 3, (nf, ports, ports))
    s = scale * np.exp(1j * rng.uniform(-np.pi, np.pi, (nf, ports, ports)))  # magnitudes > 0
    if fmt == "RI" and draw(st.booleans()):
        s.real[rng.random(s.shape) < 0.2] = 0.0  # exact zeros are legal in RI
    z0 = draw(st.sampled_from([50.0, 75.0, "per-port"]))
    if z0 == "per-port":
        z0 = rng.uniform(1.0, 200.0, ports) if version != "1.0" or ports > 1 else 50.0
    comments = draw(st.lists(st.text(st.characters(min_codepoint=32, max_codepoint=126), max_size=40),
                             max_size=3))
    return dict(ports=ports, fmt=fmt, unit=unit, version=version, digits=digits, f=f, s=s, z0=z0,
                comments=comments)


def _assert_same(case, ts):
    d = case["digits"]
    # what d significant digits can hold, but never finer than a float64 can (4 ulp: the written
    # decimal and its re-read binary value each round once; IEEE 754 binary64)
    rel = max(10.0 ** (1 - d), 4 * np.finfo(float).eps)
    f, s = case["f"], case["s"]
    np.testing.assert_allclose(ts.frequency_hz, f, rtol=rel, atol=rel * _UNIT_HZ[case["unit"]])
    mag = np.abs(s)
    if case["fmt"] == "RI":
        bound = rel * np.maximum(np.abs(s.real), np.abs(s.imag)) * 2 + 1e-300
    else:
        db_extra = np.log(10) / 20 * np.abs(20 * np.log10(mag)) if case["fmt"] == "DB" else 0.0
        bound = mag * (rel * (1 + db_extra) + rel * np.pi) * 2
    err = np.abs(ts.s - s)
    assert np.all(err <= bound), f"max excess {np.max(err / bound):.3g} of the bound"
    np.testing.assert_allclose(ts.z0, np.broadcast_to(case["z0"], (case["ports"],)), rtol=rel)
    assert ts.version == case["version"] and ts.n_ports == case["ports"]


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(networks())
def test_write_then_read_gives_back_the_numbers(case):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"net.s{case['ports']}p"
        write_touchstone(path, case["f"], case["s"], version=case["version"], fmt=case["fmt"],
                         unit=case["unit"], z0=case["z0"], digits=case["digits"], comments=case["comments"])
        _assert_same(case, read_touchstone(path))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(networks())
def test_scikit_rf_reads_what_we_write(case):
    """Outside check: scikit-rf 2.2 reading the same file gives the numbers we read."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"net.s{case['ports']}p"
        write_touchstone(path, case["f"], case["s"], version=case["version"], fmt=case["fmt"],
                         unit=case["unit"], z0=case["z0"], digits=case["digits"])
        ours = read_touchstone(path)
        ref = skrf.Network(str(path))  # scikit-rf 2.2 reading the same file
        np.testing.assert_allclose(ref.f, ours.frequency_hz, rtol=1e-15)
        np.testing.assert_allclose(ref.s, ours.s, rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(np.real(ref.z0[0]), ours.z0, rtol=1e-12)
        _assert_same(case, ours)


@pytest.mark.parametrize("fmt", ["RI", "MA", "DB"])
def test_round_trip_can_fail(tmp_path, fmt):
    """The bound is tight enough to see a one-digit-too-few write (the test can fail)."""
    case = dict(ports=1, fmt=fmt, unit="GHz", version="1.0", digits=8, f=np.array([1e9, 2e9]),
                s=np.array([0.123456789 + 0.3j, 0.5 - 0.987654321j])[:, None, None], z0=50.0, comments=[])
    path = tmp_path / "net.s1p"
    write_touchstone(path, case["f"], case["s"], fmt=fmt, digits=4)
    with pytest.raises(AssertionError):
        _assert_same(case, read_touchstone(path))
