"""Files as real instruments and tools write them: what the reader tolerates (with a warning),
what it still refuses, and the limits it puts on a file before reading it.

Every file here is written by the test beside a header like an instrument's (the instruments
are invented). Numbers are checked against scikit-rf 2.2 reading the same file or, where
scikit-rf does not take the file, the same data in a form it does take; the rules are those of
the Touchstone specification (IBIS Open Forum, versions 1.1 and 2.0/2.1).
"""

from __future__ import annotations

import os
import subprocess
import sys
import warnings

import numpy as np
import pytest
import skrf

from cloakrcs.campaign import inspect_campaign, load_campaign
from cloakrcs.errors import InputError
from cloakrcs.touchstone import (
    MAX_FREQUENCIES,
    MAX_PORTS,
    max_file_bytes,
    parameter_index,
    read_echo,
    read_touchstone,
    write_touchstone,
)
from conftest import point_echo

HEADER = ("! Fictive Instruments VNA-7 firmware 4.2 (invented)\n"
          "! Date: 2026-11-20 10:42:17\n"
          "! Calibration: SOLT, port 1\n")


def skrf_read(path) -> skrf.Network:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return skrf.Network(str(path))


def write(path, text: str | bytes):
    path.write_bytes(text if isinstance(text, bytes) else text.encode("ascii"))
    return path


def refused(path, line, words):
    with pytest.raises(InputError) as info:
        read_touchstone(path)
    err = info.value
    text = str(err)
    assert "\n" not in text and err.path == str(path) and err.line == line, text
    assert words.lower() in text.lower(), text
    return text


ONE_PORT_ROWS = "1 0.1 -0.2\n2 0.3 0.4\n3 -0.5 0.06\n"
ONE_PORT_S11 = np.array([0.1 - 0.2j, 0.3 + 0.4j, -0.5 + 0.06j])


# --------------------------------------------------------------------------- comments not in UTF-8


def test_latin1_comments_are_read_like_their_utf8_spelling(tmp_path):
    # Windows-1252 / Latin-1 header as some instruments write it: degree sign, accented names
    text = ("! Opérateur: Zoë Müller\n! Température 23 °C, humidité 41 %\n# GHz S RI R 50\n"
            "1 0.1 -0.2 ! réf.\n2 0.3 0.4\n3 -0.5 0.06\n")
    latin = write(tmp_path / "latin.s1p", text.encode("latin-1"))
    utf8 = write(tmp_path / "utf8.s1p", text.encode("utf-8"))
    ours = read_touchstone(latin)
    ref = skrf_read(utf8)  # scikit-rf 2.2 reading the same file spelled in UTF-8
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-15)
    np.testing.assert_allclose(ours.frequency_hz, ref.f, rtol=1e-15)
    assert ours.comments == read_touchstone(utf8).comments  # Latin-1 decodes these letters exactly
    assert "Température 23 °C, humidité 41 %" in ours.comments
    assert ours.warnings == ()


def test_utf8_and_latin1_comments_in_one_file(tmp_path):
    raw = HEADER.encode() + "! UTF-8: 25 °C\n".encode("utf-8") + "! Latin-1: 25 °C\n".encode("latin-1") \
        + b"# GHz S RI R 50\n" + ONE_PORT_ROWS.encode()
    ours = read_touchstone(write(tmp_path / "both.s1p", raw))
    assert "UTF-8: 25 °C" in ours.comments and "Latin-1: 25 °C" in ours.comments
    np.testing.assert_array_equal(ours.s[:, 0, 0], ONE_PORT_S11)


@pytest.mark.parametrize("where, raw, line", [
    ("data", b"# GHz S RI R 50\n1 0.1 -0.2\n2 0.3\xb0 0.4\n", 3),
    ("option line", b"# GHz S RI R 50\xb0\n1 0.1 -0.2\n", 1),
    ("keyword", b"[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\xe9\n[Network Data]\n1 0.1 0.2\n", 3),
])
def test_non_utf8_outside_comments_is_still_refused(tmp_path, where, raw, line):
    refused(write(tmp_path / "x.s1p", raw), line, "outside a comment")


def test_nul_in_a_comment_is_still_binary(tmp_path):
    refused(write(tmp_path / "n.s1p", b"! caf\xe9 \x00\n# GHz S RI R 50\n1 0.1 0.2\n"), 1, "NUL byte")


# --------------------------------------------------------------------------- option line R without a value


@pytest.mark.parametrize("option", ["# GHz S RI R", "# GHz S R RI", "# R GHz RI"])
def test_r_without_value_is_50_ohm_with_a_warning(tmp_path, option):
    path = write(tmp_path / "r.s1p", HEADER + option + "\n" + ONE_PORT_ROWS)
    ours = read_touchstone(path)
    fixed = write(tmp_path / "r50.s1p", HEADER + "# GHz S RI R 50\n" + ONE_PORT_ROWS)
    ref = skrf_read(fixed)  # scikit-rf 2.2 on the same data with the default written out
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-15)
    np.testing.assert_array_equal(ours.z0, [50.0])  # Touchstone specification: default R is 50 ohm
    assert ours.warnings == (f"{path}:4: option line: R has no value: taken as the default 50 ohm",)


def test_r_without_value_in_a_v1_z_file_normalises_to_50_ohm(tmp_path):
    path = write(tmp_path / "z.s1p", "# GHz Z RI R\n1 1.5 0.5\n")
    ours = read_touchstone(path)
    # Touchstone 1.x: Z values normalised to R, so z = 1.5 + 0.5j is Z = 75 + 25j ohm; S = (Z - 50)/(Z + 50)
    z = (1.5 + 0.5j) * 50
    np.testing.assert_allclose(ours.s[0, 0, 0], (z - 50) / (z + 50), rtol=1e-14)


@pytest.mark.parametrize("option, words", [
    ("# GHz S RI R -50", "must be positive"),
    ("# GHz S RI R 50 R 75", "given twice"),
    ("# GHz S RI R fifty", "unknown token 'fifty'"),
])
def test_other_r_problems_are_still_refused(tmp_path, option, words):
    refused(write(tmp_path / "r.s1p", option + "\n" + ONE_PORT_ROWS), 1, words)


# --------------------------------------------------------------------------- v2 without [Network Data]


V2_NO_NETWORK_DATA = (HEADER + "[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\n"
                      "[Number of Frequencies] 3\n" + ONE_PORT_ROWS + "[End]\n")


def test_v2_data_after_number_of_frequencies_without_network_data(tmp_path):
    path = write(tmp_path / "v2.ts", V2_NO_NETWORK_DATA)
    ours = read_touchstone(path)
    fixed = write(tmp_path / "fixed.ts", V2_NO_NETWORK_DATA.replace("3\n1 0.1", "3\n[Network Data]\n1 0.1"))
    ref = skrf_read(fixed)  # scikit-rf 2.2 on the same file with the keyword written
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-15)
    np.testing.assert_allclose(ours.frequency_hz, ref.f, rtol=1e-15)
    assert len(ours.warnings) == 1
    assert ours.warnings[0].startswith(f"{path}:8: network data follow [Number of Frequencies] without")


def test_v2_data_without_network_data_still_counts_frequencies(tmp_path):
    path = write(tmp_path / "v2.ts", V2_NO_NETWORK_DATA.replace("Frequencies] 3", "Frequencies] 4"))
    refused(path, 7, "[Number of Frequencies] is 4 but the file holds 3")


@pytest.mark.parametrize("text, line, words", [
    ("[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\n1 0.1 0.2\n", 4, "data before [Network Data]"),
    ("[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\n[Number of Frequencies] 1\n[Noise Data]\n1 0.1 0.2\n"
     "[Network Data]\n", None, "no network data"),
])
def test_v2_data_elsewhere_is_still_refused(tmp_path, text, line, words):
    refused(write(tmp_path / "v2.ts", text), line, words)


# --------------------------------------------------------------------------- v2 without an option line


def test_v2_without_option_line_is_refused_not_read_as_ma(tmp_path):
    # Touchstone 2.0: the option line is required in version 2 files. Read with the v1 defaults
    # (MA), RI pairs would come out wrong (|0.5 + 0.5j| read as 0.5 at 0.5 degrees), silently.
    path = write(tmp_path / "v2.ts", "[Version] 2.0\n[Number of Ports] 1\n[Network Data]\n1 0.5 0.5\n[End]\n")
    text = refused(path, None, "no option line")
    assert "version 2.0 files must have one" in text


def test_v1_without_option_line_keeps_the_specified_defaults(tmp_path):
    ours = read_touchstone(write(tmp_path / "d.s1p", "1 0.5 90\n"))
    # Touchstone 1.1: defaults GHz, S, MA, R 50
    np.testing.assert_allclose(ours.s[0, 0, 0], 0.5j, atol=1e-16)
    assert ours.frequency_hz[0] == 1e9


# --------------------------------------------------------------------------- DB overflow


def test_db_value_that_overflows_is_one_line(tmp_path):
    path = write(tmp_path / "db.s1p", "# GHz S DB R 50\n1 -3 0\n2 7000 0\n")
    text = refused(path, 3, "DB value 7000 overflows")
    assert "dB below 6165" in text  # 20 log10 of the largest double, 1.798e308 (IEEE 754 binary64)


# --------------------------------------------------------------------------- wrapped v1 two-port rows


def _two_port_rows(f_ghz, s):
    """Rows f S11 S21 S12 S22 (Touchstone 1.x two-port order), RI."""
    rows = []
    for f, m in zip(f_ghz, s):
        vals = [m[0, 0], m[1, 0], m[0, 1], m[1, 1]]
        rows.append([f"{f:g}"] + [f"{x:.12g}" for v in vals for x in (v.real, v.imag)])
    return rows


def test_wrapped_v1_two_port_sub_ghz_keeps_every_row(tmp_path):
    # the frequency (0.1 .. 0.5 GHz) is smaller than the values on the previous line: the old
    # noise-block test compared it with that line's first token and kept 1 of 5 frequencies
    f = np.array([0.1, 0.2, 0.3, 0.4, 0.5])
    s = 0.5 + np.random.default_rng(3).random((5, 2, 2)) * (1 + 1j)
    rows = _two_port_rows(f, s)
    wrapped = "".join(" ".join(r[:5]) + "\n" + " ".join(r[5:]) + "\n" for r in rows)
    plain = "".join(" ".join(r) + "\n" for r in rows)
    ours = read_touchstone(write(tmp_path / "wrapped.s2p", HEADER + "# GHz S RI R 50\n" + wrapped))
    ref = skrf_read(write(tmp_path / "plain.s2p", HEADER + "# GHz S RI R 50\n" + plain))  # scikit-rf 2.2, unwrapped
    assert len(ours.frequency_hz) == 5
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-12)
    np.testing.assert_allclose(ours.frequency_hz, ref.f, rtol=1e-15)


def test_wrapped_v1_two_port_still_ends_at_its_noise_block(tmp_path):
    f = np.array([0.1, 0.2, 0.3])
    s = 0.9 + np.zeros((3, 2, 2), dtype=complex)
    rows = _two_port_rows(f, s)
    wrapped = "".join(" ".join(r[:5]) + "\n" + " ".join(r[5:]) + "\n" for r in rows)
    noise = "0.1 1.2 0.5 30 0.3\n0.3 1.4 0.45 40 0.32\n"  # Touchstone 1.1: noise rows f NFmin |G| ang Rn
    ours = read_touchstone(write(tmp_path / "n.s2p", "# GHz S RI R 50\n" + wrapped + noise))
    np.testing.assert_allclose(ours.frequency_hz, f * 1e9)
    np.testing.assert_allclose(ours.s, s)


# --------------------------------------------------------------------------- more than four ports


@pytest.mark.parametrize("n", [5, 6, 8])
def test_v1_files_of_more_than_four_ports_match_scikit_rf(tmp_path, n):
    rng = np.random.default_rng(n)
    f = np.linspace(1e9, 2e9, 7)
    s = 0.3 * (rng.normal(size=(7, n, n)) + 1j * rng.normal(size=(7, n, n)))
    path = tmp_path / f"matrix.s{n}p"
    write_touchstone(path, f, s, comments=["Fictive switch matrix SM-12 (invented), ports 1..%d" % n])
    lines = path.read_text().splitlines()
    assert max(len(line.split()) for line in lines if not line.startswith(("!", "#"))) <= 9  # 4 pairs a line
    ours = read_touchstone(path)
    ref = skrf_read(path)  # scikit-rf 2.2, same file
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-10)
    np.testing.assert_allclose(ours.s, s, rtol=1e-10)


def test_v2_twelve_port_file_and_two_digit_parameter_names(tmp_path):
    rng = np.random.default_rng(12)
    f = np.linspace(1e9, 3e9, 5)
    s = 0.2 * (rng.normal(size=(5, 12, 12)) + 1j * rng.normal(size=(5, 12, 12)))
    path = tmp_path / "rig.ts"
    write_touchstone(path, f, s, version="2.0", fmt="MA")
    ours = read_touchstone(path)
    ref = skrf_read(path)  # scikit-rf 2.2, same file
    np.testing.assert_allclose(ours.s, ref.s, rtol=1e-10)
    i, j = parameter_index("S10,11")
    assert (i, j) == (9, 10) and parameter_index("s12_1") == (11, 0)
    echo = read_echo(path, "S10,11")
    np.testing.assert_allclose(echo.values, ref.s[:, 9, 10], rtol=1e-10)  # Sij = into port i from port j


@pytest.mark.parametrize("name", ["S1011", "S100,1", "S0,3", "S10:11"])
def test_ambiguous_or_out_of_range_parameter_names_are_refused(name):
    with pytest.raises(InputError, match="S-parameter name"):
        parameter_index(name)


def test_more_ports_than_the_limit_are_refused(tmp_path):
    path = write(tmp_path / "big.ts", f"[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] {MAX_PORTS + 1}\n"
                                      "[Network Data]\n1 0 0\n")
    refused(path, 3, f"only 1 to {MAX_PORTS} ports")


def test_six_port_campaign_picks_its_echo_from_the_parameter_table(tmp_path):
    """The echo parameter is chosen as for four ports: a table per polarization."""
    freq = np.linspace(8e9, 12e9, 201)
    raw = tmp_path / "raw"
    raw.mkdir()

    def six_port(name, amp):
        s = np.zeros((freq.size, 6, 6), dtype=complex)
        s[:, 4, 5] = point_echo(freq, 4.2, amp)  # S56: VV in this rig
        s[:, 5, 4] = 1e-3  # S65: leakage the table must not pick
        write_touchstone(raw / f"{name}.s6p", freq, s, comments=["Fictive rig with switch matrix (invented)"])

    six_port("empty", 0.0)
    six_port("sphere", 0.1)
    six_port("bare", 0.3)
    table = '{ VV = "S56" }'
    manifest = tmp_path / "manifest.toml"
    manifest.write_text(f"""[campaign]
name = "six"
[chamber]
range_m = 4.2
[gate]
span_m = 0.6
[[target]]
name = "empty"
role = "background"
files = "raw/empty.s6p"
parameter = {table}
[[target]]
name = "sphere"
role = "reference"
files = "raw/sphere.s6p"
parameter = {table}
shape = "sphere"
radius_m = 0.05
[[target]]
name = "bare"
role = "subject"
files = "raw/bare.s6p"
parameter = {table}
""")
    campaign = load_campaign(manifest)
    np.testing.assert_allclose(campaign.cube("bare").data.sel(polarization="VV").values[0, 0],
                               point_echo(freq, 4.2, 0.3), rtol=1e-10)
    assert campaign.cube("bare").parameters == {"VV": "S56"}


# --------------------------------------------------------------------------- warnings reach the user


def _tiny_with_r_without_value(tiny_campaign):
    raw = tiny_campaign.parent / "raw"
    for p in sorted(raw.glob("bare_*.s1p")):
        p.write_text(p.read_text().replace("# Hz S RI R 50", "# Hz S RI R"))
    return tiny_campaign


def test_reader_warnings_reach_inspect_and_process(tiny_campaign, tmp_path):
    manifest = _tiny_with_r_without_value(tiny_campaign)
    first = manifest.parent / "raw" / "bare_HH_-005.0.s1p"  # the first file in cube order
    expected = (f"{first}:2: option line: R has no value: taken as the default 50 ohm "
                f"(and 5 more file(s) of target bare)")  # 6 files share it: shown once
    campaign, problems, warns = inspect_campaign(manifest)
    assert problems == [] and expected in warns
    assert expected in load_campaign(manifest).warnings
    env = {**os.environ, "CLOAKRCS_STORE": f"sqlite:///{tmp_path / 'store.sqlite'}"}
    cli = [sys.executable, "-m", "cloakrcs.cli"]
    out = subprocess.run(cli + ["inspect", str(manifest)], capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == 0 and expected in out.stdout, out.stdout + out.stderr
    out = subprocess.run(cli + ["process", str(manifest), "--out", str(tmp_path / "out"), "--quiet", "--no-store",
                                "--no-report"], capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == 0 and f"warning: {expected}" in out.stderr, out.stderr
    import json

    assert expected in json.loads((tmp_path / "out" / "summary.json").read_text())["warnings"]


# --------------------------------------------------------------------------- special and oversized files


def test_oversized_file_is_refused_before_it_is_read(tmp_path):
    path = tmp_path / "huge.s1p"
    with open(path, "wb") as fh:  # 1 GiB, sparse: nothing is written, so nothing can be read fast
        fh.write(b"# GHz S RI R 50\n")
        fh.truncate(1 << 30)
    text = refused(path, None, "larger than the")
    limit = max_file_bytes(1)
    assert f"{limit / 1e6:.0f} MB limit for a 1-port Touchstone file" in text
    assert f"{MAX_FREQUENCIES:,} frequencies" in text


def test_size_limit_grows_with_the_port_count():
    # rows of 1 + 2 n^2 numbers (Touchstone specification: one complex pair per Sij)
    assert max_file_bytes(2) - max_file_bytes(1) == MAX_FREQUENCIES * 6 * 32
    assert max_file_bytes(1) < 200e6 < max_file_bytes(4)


def test_v2_size_limit_uses_its_number_of_ports(tmp_path):
    path = tmp_path / "huge.ts"
    with open(path, "wb") as fh:
        fh.write(b"[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 2\n[Network Data]\n")
        fh.truncate(max_file_bytes(2) + 1)
    refused(path, None, "limit for a 2-port Touchstone file")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_fifo_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "pipe.s1p"
    os.mkfifo(fifo)
    refused(fifo, None, "not a regular file")


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_link_to_dev_zero_is_refused(tmp_path):
    link = tmp_path / "zero.s1p"
    link.symlink_to("/dev/zero")
    refused(link, None, "not a regular file")
