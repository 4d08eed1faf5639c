"""Corpus of hostile and broken inputs: what must be read correctly, what must be refused.

``tests/corpus/read/`` holds files that must read to the same numbers; ``tests/corpus/refuse/``
and ``tests/corpus/manifests/`` hold files that must be refused with one ``InputError`` line
naming the file (and line) and what is wrong. Cases that need the file system (symlink loops,
directories where files are expected, a non-uniform campaign grid, 10^6 points) are built in
``tmp_path`` at test time.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
import skrf

from cloakrcs.campaign import inspect_campaign, load_campaign
from cloakrcs.errors import InputError
from cloakrcs.manifest import parse_manifest
from cloakrcs.touchstone import read_touchstone, write_touchstone
from conftest import point_echo, write_s1p

CORPUS = Path(__file__).parent / "corpus"

# Every file in corpus/read holds S11 = 0.1-0.2j, 0.3+0.4j, -0.5+0.06j at 1, 2, 3 GHz, as its
# text says (RI format: Touchstone specification 2.1, "Option line" and "Network data").
EXPECTED_F_HZ = np.array([1e9, 2e9, 3e9])
EXPECTED_S11 = np.array([0.1 - 0.2j, 0.3 + 0.4j, -0.5 + 0.06j])
READ_CASES = sorted(p.name for p in (CORPUS / "read").iterdir() if p.suffix == ".s1p")
# files scikit-rf 2.2 also reads (it takes neither a BOM, CR-only endings, v2 keywords in other case, nor a reordered option line)
SKRF_CASES = ["crlf.s1p", "mixed_eol.s1p", "tabs.s1p", "long_comment.s1p", "upper_option.s1p",
              "lower_option.s1p", "mhz_trailing_comments.s1p"]

# refused Touchstone files: name -> (line of the error or None, fragment the message must hold)
REFUSE_CASES = {
    "bad_option.s1p": (2, "option line: unknown token 'XY'"),
    "wrong_count.s1p": (3, "wrong count of values"),
    "non_numeric.s1p": (3, "'zero' is not a number"),
    "decreasing.s1p": (4, "decreasing"),
    "duplicated_frequency.s1p": (4, "duplicated"),
    "nfreq_mismatch.s2p": (4, "[Number of Frequencies] is 3 but the file holds 2"),
    "truncated.s1p": (3, "truncated final row"),
    "empty.s1p": (None, "no network data"),
    "binary.s1p": (3, "binary content"),
    "non_utf8_data.s1p": (3, "non-UTF-8 content (byte 0xb0) outside a comment"),
    "nan.s1p": (3, "not a finite number"),
    "inf.s1p": (3, "not a finite number"),
    "frequency_overflow.s1p": (2, "frequenc"),
    "db_overflow.s1p": (3, "DB value 7000 overflows"),
    "v2_no_option_line.s1p": (None, "no option line"),  # refused, not warned: version 2 requires it
}
# refused manifests (parse_manifest and load_campaign): name -> (line or None, fragment)
MANIFEST_CASES = {
    "empty.toml": (None, "manifest is empty"),
    "non_utf8.toml": (3, "not UTF-8"),
    "invalid_toml.toml": (2, "invalid TOML"),
    "unknown_role.toml": (32, "'role' = 'subjekt' is not one of background, reference, subject"),
    "unknown_key.toml": (29, "unknown key 'colour'"),
    "duplicate_target.toml": (30, "duplicate target name 'bare'"),
    "missing_key.toml": (30, "missing required key 'files'"),
    "long_campaign_name.toml": (2, "'name' is 10000 characters long, more than the limit of 200"),
    "long_notes.toml": (2, "'notes' is 30000 characters long, more than the limit of 20000"),
    "nested_deep.toml": (None, "nested too deeply"),
    "pad_factor_huge.toml": (10, "'pad_factor' = 1e+308 is outside its range [1, 64]"),
    "kaiser_beta_huge.toml": (10, "'kaiser_beta' = 1e+308 is outside its range [0, 50]"),
    "radius_huge.toml": (21, "'radius_m' = 1e+300 m is outside its range"),
    "range_tiny.toml": (7, "'range_m' = 1e-300 m is outside its range"),
    "size_huge.toml": (28, "'size_m' = 1e+200 m is outside its range"),
    "unknown_background.toml": (24, "background 'nobody' is not a target"),
    "negative_gate_centre.toml": (18, "4.2 + -5 = -0.8 m is not a positive range"),
}


def assert_one_line(err: InputError, path, line, fragment: str) -> None:
    """The message contract: one line, names the file (and line), says what is wrong."""
    text = str(err)
    assert "\n" not in text and "\r" not in text, text
    assert err.path == str(path), (err.path, str(path))
    prefix = f"{err.path}:{line}: " if line is not None else f"{err.path}: "
    assert text.startswith(prefix), (text, prefix)
    assert fragment in text, (text, fragment)
    assert "np.float64" not in text and "Traceback" not in text, text  # plain numbers for people


# --------------------------------------------------------------------------- read correctly


@pytest.mark.parametrize("name", READ_CASES)
def test_corpus_file_reads_the_numbers_its_text_holds(name):
    ts = read_touchstone(CORPUS / "read" / name)
    np.testing.assert_allclose(ts.frequency_hz, EXPECTED_F_HZ, rtol=1e-15)
    np.testing.assert_allclose(ts.s[:, 0, 0], EXPECTED_S11, rtol=0, atol=1e-15)
    np.testing.assert_array_equal(ts.z0, [50.0])


@pytest.mark.parametrize("name", SKRF_CASES)
def test_corpus_file_agrees_with_scikit_rf(name):
    path = CORPUS / "read" / name
    ours = read_touchstone(path)
    ref = skrf.Network(str(path))  # scikit-rf 2.2 reading the same file
    np.testing.assert_allclose(ours.frequency_hz, ref.f, rtol=1e-15)
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-13, atol=1e-15)


def test_noise_block_after_wrapped_sub_ghz_two_port_keeps_every_frequency():
    """Touchstone 1.1: the noise block starts where the frequency stops increasing (0.3 -> 0.1 GHz);
    the wrapped continuation lines (first value 0.9 > 0.3 GHz) must not end the network data early."""
    ts = read_touchstone(CORPUS / "read" / "noise_after_wrapped_sub_ghz.s2p")
    np.testing.assert_allclose(ts.frequency_hz, [1e8, 2e8, 3e8], rtol=1e-15)
    np.testing.assert_allclose(ts.s, np.full((3, 2, 2), 0.9 + 0j), rtol=0, atol=1e-15)


def test_long_comment_is_kept_whole():
    ts = read_touchstone(CORPUS / "read" / "long_comment.s1p")
    assert max(len(c) for c in ts.comments) == 60_000


def test_corpus_counts():
    """Keeps the counts in the closing note honest: 12 + 1 read-correctly files, 15 + 17 refused."""
    assert len(READ_CASES) == 12 and len(list((CORPUS / "read").iterdir())) == 13
    assert sorted(REFUSE_CASES) == sorted(p.name for p in (CORPUS / "refuse").iterdir())
    assert sorted(MANIFEST_CASES) == sorted(p.name for p in (CORPUS / "manifests").iterdir() if p.name != "valid.toml")


# --------------------------------------------------------------------------- refused


@pytest.mark.parametrize("name", sorted(REFUSE_CASES))
def test_corpus_file_is_refused_with_one_line(name):
    path = CORPUS / "refuse" / name
    line, fragment = REFUSE_CASES[name]
    with pytest.raises(InputError) as info:
        read_touchstone(path)
    assert_one_line(info.value, path, line, fragment)


@pytest.mark.parametrize("name", sorted(MANIFEST_CASES))
@pytest.mark.parametrize("how", ["parse", "load", "inspect"])
def test_corpus_manifest_is_refused_with_one_line(name, how):
    path = CORPUS / "manifests" / name
    line, fragment = MANIFEST_CASES[name]
    if how == "inspect":
        _, problems, _ = inspect_campaign(path)
        assert problems, "inspect found no problem"
        err = problems[0]
    else:
        with pytest.raises(InputError) as info:
            parse_manifest(path) if how == "parse" else load_campaign(path)
        err = info.value
    assert_one_line(err, path, line, fragment)


def test_valid_manifest_of_the_corpus_parses():
    manifest, problems = parse_manifest(CORPUS / "manifests" / "valid.toml", collect=True)
    assert problems == [] and [t.name for t in manifest.targets] == ["empty", "cal-sphere", "bare", "r1"]


# --------------------------------------------------------------------------- file-system cases


def test_symlink_loop_touchstone(tmp_path):
    a, b = tmp_path / "a.s1p", tmp_path / "b.s1p"
    os.symlink(b, a)
    os.symlink(a, b)
    with pytest.raises(InputError) as info:
        read_touchstone(a)
    assert_one_line(info.value, a, None, "symbolic links")


def test_symlink_loop_manifest(tmp_path):
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    os.symlink(b, a)
    os.symlink(a, b)
    for call in (parse_manifest, load_campaign):
        with pytest.raises(InputError) as info:
            call(a)
        assert_one_line(info.value, a, None, "symbolic links")


def test_symlink_loop_matched_by_a_pattern(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    for pol in ("HH", "VV"):  # a loop named like a sweep at +10 deg, in both polarizations
        os.symlink(raw / f"loop_{pol}", raw / f"bare_{pol}_+010.0.s1p")
        os.symlink(raw / f"bare_{pol}_+010.0.s1p", raw / f"loop_{pol}")
    with pytest.raises(InputError) as info:
        load_campaign(tiny_campaign)
    assert_one_line(info.value, raw / "bare_HH_+010.0.s1p", None, "symbolic links")


def test_directory_where_a_touchstone_file_is_expected(tmp_path):
    folder = tmp_path / "x.s1p"
    folder.mkdir()
    with pytest.raises(InputError) as info:
        read_touchstone(folder)
    assert_one_line(info.value, folder, None, "is a directory")


def test_directory_matched_by_a_pattern(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    for pol in ("HH", "VV"):
        (raw / f"bare_{pol}_+010.0.s1p").mkdir()
    with pytest.raises(InputError) as info:
        load_campaign(tiny_campaign)
    assert_one_line(info.value, raw / "bare_HH_+010.0.s1p", None, "is a directory")


def test_manifest_path_that_is_a_directory(tmp_path):
    folder = tmp_path / "manifest.toml"
    folder.mkdir()
    for call in (parse_manifest, load_campaign):
        with pytest.raises(InputError) as info:
            call(folder)
        assert_one_line(info.value, folder, None, "is a directory")


def test_missing_manifest(tmp_path):
    with pytest.raises(InputError) as info:
        load_campaign(tmp_path / "nowhere.toml")
    assert_one_line(info.value, tmp_path / "nowhere.toml", None, "not found")


def test_non_uniform_grid_is_refused_by_the_campaign_loader(tiny_campaign):
    """The reader takes any increasing grid; time gating needs a uniform one (README, The processing chain, step 2)."""
    raw = tiny_campaign.parent / "raw"
    freq = np.linspace(8e9, 12e9, 401)
    freq = np.r_[freq[:200], freq[201:]]  # one point dropped: a step twice as long at 10 GHz
    for path in raw.glob("*.s1p"):
        write_s1p(path, freq, point_echo(freq, 4.2, 0.1))
    read_touchstone(raw / "empty_HH_0.s1p")  # readable on its own
    with pytest.raises(InputError) as info:
        load_campaign(tiny_campaign)
    assert_one_line(info.value, raw / "empty_HH_0.s1p", None, "not uniform")


# --------------------------------------------------------------------------- 10^6 points

# Budget (stated here, as no document gives one): the reader's peak memory (growth of the
# resident set) stays within 16 x the raw data it returns (frequency float64 + S complex128 =
# 24 bytes a point, 24 MB for 10^6 points), i.e. 384 MB for a 41 MB one-port file. Measured:
# 326 MB = 13.6 x (the text, its split lines and the joined copy dominate).
MEMORY_BUDGET_X_RAW = 16
_MEASURE = textwrap.dedent("""
    import sys
    import numpy, pandas, skrf
    from cloakrcs.touchstone import read_touchstone

    def status(key):  # kB, from the Linux proc(5) status file
        for line in open("/proc/self/status"):
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024

    with open("/proc/self/clear_refs", "w") as fh:  # reset the peak (VmHWM) to the current RSS
        fh.write("5")
    before = status("VmRSS")
    ts = read_touchstone(sys.argv[1])
    peak = status("VmHWM") - before
    raw = ts.frequency_hz.nbytes + ts.s.nbytes
    print(ts.frequency_hz.size, peak, raw, ts.s[123456, 0, 0].real, ts.s[123456, 0, 0].imag)
""")


def test_million_points_read_within_the_memory_budget(tmp_path):
    if not os.path.exists("/proc/self/clear_refs"):
        pytest.skip("peak memory is measured through Linux /proc/self/status and clear_refs")
    n = 1_000_000
    f = np.linspace(1e9, 18e9, n)
    rng = np.random.default_rng(3)
    s = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    path = tmp_path / "million.s1p"
    write_touchstone(path, f, s, version="1.0", fmt="RI", unit="Hz", digits=9)
    # a fresh interpreter, so that the peak resident set measures this read alone
    out = subprocess.run([sys.executable, "-c", _MEASURE, str(path)], capture_output=True, text=True,
                         check=True, cwd=Path(__file__).parents[1]).stdout.split()
    points, peak, raw = int(out[0]), int(out[1]), int(out[2])
    assert points == n and raw == 24 * n
    assert peak <= MEMORY_BUDGET_X_RAW * raw, f"peak {peak / 1e6:.0f} MB > {MEMORY_BUDGET_X_RAW} x {raw / 1e6:.0f} MB"
    # the numbers survive: 9 significant digits written (write_touchstone's %.9g)
    np.testing.assert_allclose(float(out[3]) + 1j * float(out[4]), s[123456], rtol=1e-8)
