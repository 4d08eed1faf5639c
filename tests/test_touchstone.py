"""Touchstone reader/writer, checked against scikit-rf 2.2 reading the same files and against
the Touchstone specification (v1.0, v2.0, v2.1, IBIS Open Forum)."""

from __future__ import annotations

import hashlib
import os
import warnings

import numpy as np
import pytest
import skrf
from skrf.network import s2y, s2z

from cloakrcs.errors import InputError
from cloakrcs.touchstone import (
    Touchstone,
    file_sha256,
    parameter_index,
    read_many,
    read_touchstone,
    write_touchstone,
)

RTOL = 1e-12


def skrf_read(path) -> skrf.Network:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return skrf.Network(str(path))


def assert_same_as_skrf(ours: Touchstone, path):
    """Our reading equals scikit-rf 2.2 reading the same file: S, frequency and z0."""
    net = skrf_read(path)
    np.testing.assert_allclose(ours.s, net.s, rtol=RTOL, atol=1e-300)  # scikit-rf 2.2, same file
    np.testing.assert_allclose(ours.frequency_hz, net.f, rtol=RTOL)  # scikit-rf 2.2, same file
    np.testing.assert_allclose(ours.z0, net.z0[0].real, rtol=RTOL)  # scikit-rf 2.2, same file


def random_s(nf, n, seed=0, symmetric=False):
    rng = np.random.default_rng(seed)
    s = 0.5 * (rng.normal(size=(nf, n, n)) + 1j * rng.normal(size=(nf, n, n)))
    if symmetric:
        s = (s + s.transpose(0, 2, 1)) / 2
    return s


def write_text(path, text, newline="\n", bom=False):
    data = text.replace("\n", newline).encode("ascii")
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + data)
    return path


# --------------------------------------------------------------------------- written files


@pytest.mark.parametrize("version", ["1.0", "2.0", "2.1"])
@pytest.mark.parametrize("fmt", ["RI", "MA", "DB"])
@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_written_files_match_scikit_rf(tmp_path, version, fmt, n):
    f = np.linspace(1e9, 3e9, 21)
    s = random_s(21, n, seed=n)
    path = tmp_path / (f"a.s{n}p" if version == "1.0" else "a.ts")
    write_touchstone(path, f, s, version=version, fmt=fmt, unit="GHz", comments=["campaign A", "angle 0"])
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    # what was written comes back (12 significant digits; angles in degrees)
    np.testing.assert_allclose(ours.s, s, rtol=1e-9)
    np.testing.assert_allclose(ours.frequency_hz, f, rtol=1e-12)
    assert ours.version == version and ours.n_ports == n and ours.source_parameter == "S"
    assert ours.comments == ("campaign A", "angle 0")


@pytest.mark.parametrize("unit", ["Hz", "kHz", "MHz", "GHz"])
@pytest.mark.parametrize("version", ["1.0", "2.1"])
def test_units_match_scikit_rf(tmp_path, unit, version):
    f = np.linspace(2.5e9, 3.5e9, 11)
    path = tmp_path / ("u.s2p" if version == "1.0" else "u.ts")
    write_touchstone(path, f, random_s(11, 2), version=version, unit=unit, fmt="MA")
    assert unit in path.read_text().splitlines()[0 if version == "1.0" else 1]
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    np.testing.assert_allclose(ours.frequency_hz, f, rtol=1e-12)


@pytest.mark.parametrize("order", ["12_21", "21_12"])
@pytest.mark.parametrize("version", ["2.0", "2.1"])
def test_two_port_order_matches_scikit_rf(tmp_path, order, version):
    s = random_s(5, 2, seed=3)  # not reciprocal: S12 and S21 differ
    path = tmp_path / "o.ts"
    write_touchstone(path, np.arange(1, 6) * 1e9, s, version=version, two_port_order=order)
    assert f"[Two-Port Data Order] {order}" in path.read_text()
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    np.testing.assert_allclose(ours.s[:, 1, 0], s[:, 1, 0], rtol=1e-10)  # S21 stays S21


@pytest.mark.parametrize("matrix", ["Lower", "Upper"])
@pytest.mark.parametrize("n", [2, 3, 4])
def test_matrix_format_lower_upper_matches_scikit_rf(tmp_path, matrix, n):
    s = random_s(7, n, seed=n, symmetric=True)
    path = tmp_path / "m.ts"
    write_touchstone(path, np.linspace(1e9, 2e9, 7), s, version="2.0", matrix_format=matrix, fmt="RI")
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    np.testing.assert_allclose(ours.s, s, rtol=1e-10)
    np.testing.assert_array_equal(ours.s, ours.s.transpose(0, 2, 1))  # other half filled


def test_per_port_reference_matches_scikit_rf(tmp_path):
    path = tmp_path / "r.ts"
    write_touchstone(path, [1e9, 2e9], random_s(2, 3), version="2.0", z0=[50.0, 75.0, 25.0])
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    np.testing.assert_array_equal(ours.z0, [50.0, 75.0, 25.0])


def test_v1_four_port_rows_wrap_at_four_pairs(tmp_path):
    path = tmp_path / "w.s4p"
    write_touchstone(path, [1e9, 2e9], random_s(2, 4))
    lines = [ln for ln in path.read_text().splitlines() if ln and ln[0] not in "!#"]
    # Touchstone specification v1: at most four pairs per line, a matrix row per line
    assert [len(ln.split()) for ln in lines] == [9, 8, 8, 8] * 2


# --------------------------------------------------------------------------- hand-written files

S2P_PLAIN = """! two-port, canonical
# GHz S MA R 50
1.0 0.9 -10 0.1 80 0.11 81 0.8 -20
2.0 0.85 -20 0.2 70 0.21 71 0.75 -30
3.0 0.8 -30 0.3 60 0.31 61 0.7 -40
"""

S2P_MESSY = """\t! two-port with the same data, written badly
! Port[1] = A
#\tr 50  ma   s ghz ! options in another order
1.0\t0.9 -10 0.1 80 0.11 81 0.8 -20 ! first point
! a comment between data lines

  2.0 0.85 -20    0.2 70 0.21 71 0.75 -30
3.0 0.8 -30 0.3 60 0.31 61 0.7 -40!end
"""


def test_messy_file_crlf_tabs_bom_comments(tmp_path):
    plain = write_text(tmp_path / "plain.s2p", S2P_PLAIN)
    messy = write_text(tmp_path / "messy.s2p", S2P_MESSY, newline="\r\n", bom=True)
    ours = read_touchstone(messy)
    # scikit-rf 2.2 reads the option line by position, so compare with it on the canonical file
    assert_same_as_skrf(ours, plain)
    assert ours.comments == ("two-port with the same data, written badly", "Port[1] = A",
                             "options in another order", "first point", "a comment between data lines", "end")
    # Touchstone specification v1: 2-port order is S11 S21 S12 S22; MA angles in degrees
    np.testing.assert_allclose(ours.s[0, 1, 0], 0.1 * np.exp(1j * np.deg2rad(80)), rtol=RTOL)
    np.testing.assert_allclose(ours.s[0, 0, 1], 0.11 * np.exp(1j * np.deg2rad(81)), rtol=RTOL)


def test_messy_file_scikit_rf_reads_crlf_bom_too(tmp_path):
    text = S2P_PLAIN.replace("1.0 0.9", "1.0\t0.9").replace("3.0 0.8 -30", "3.0 0.8 -30 ") + "! tail\n"
    path = write_text(tmp_path / "crlf.s2p", text, newline="\r\n", bom=True)
    assert_same_as_skrf(read_touchstone(path), path)


@pytest.mark.parametrize("option, canonical", [
    ("#", "# GHz S MA R 50"),
    ("# MHz", "# MHz S MA R 50"),
    ("# RI", "# GHz S RI R 50"),
    ("# r 75 hz", "# Hz S MA R 75"),
    ("# db Khz", "# kHz S DB R 50"),
])
def test_option_line_defaults_any_order(tmp_path, option, canonical):
    body = "1 0.5 10\n2 0.25 20\n"
    ours = read_touchstone(write_text(tmp_path / "o.s1p", option + "\n" + body))
    ref = write_text(tmp_path / "c.s1p", canonical + "\n" + body)
    # Touchstone specification: defaults GHz, S, MA, R 50; scikit-rf 2.2 on the canonical form
    assert_same_as_skrf(ours, ref)


S3P_V1 = """# MHz S RI R 50
100 0.11 0.01 0.12 0.02 0.13 0.03
    0.21 0.04 0.22 0.05 0.23 0.06
    0.31 0.07 0.32 0.08 0.33 0.09
200 0.41 0.01 0.42 0.02 0.43 0.03 ! comment inside a row
    0.51 0.04 0.52 0.05 0.53 0.06
    0.61 0.07 0.62 0.08 0.63 0.09
"""

S4P_V1 = """# GHz S DB R 50
1 -1 1 -2 2 -3 3 -4 4
  -5 5 -6 6 -7 7 -8 8
  -9 9 -10 10 -11 11 -12 12
  -13 13 -14 14 -15 15 -16 16
2 -1.5 1 -2.5 2 -3.5 3 -4.5 4
  -5.5 5 -6.5 6 -7.5 7 -8.5 8
  -9.5 9 -10.5 10 -11.5 11 -12.5 12
  -13.5 13 -14.5 14 -15.5 15 -16.5 16
"""


def test_v1_three_port_wrapped_rows(tmp_path):
    path = write_text(tmp_path / "h.s3p", S3P_V1)
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2, same file
    # Touchstone specification v1: 3-port rows are row-major (S11 S12 S13 / S21 ...)
    assert ours.s[0, 0, 1] == 0.12 + 0.02j and ours.s[1, 2, 0] == 0.61 + 0.07j


def test_v1_four_port_wrapped_rows(tmp_path):
    path = write_text(tmp_path / "h.s4p", S4P_V1)
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2, same file
    # Touchstone specification: DB is 20 log10 |S|, angle in degrees; row-major order
    np.testing.assert_allclose(ours.s[0, 1, 3], 10 ** (-8 / 20) * np.exp(1j * np.deg2rad(8)), rtol=RTOL)


S2P_NOISE = S2P_PLAIN + """! noise parameters: f Fmin(dB) Gamma_opt(mag ang) Rn/R
1.0 1.2 0.5 30 0.3
2.0 1.4 0.45 40 0.32
"""


def test_v1_two_port_noise_block_skipped(tmp_path):
    path = write_text(tmp_path / "n.s2p", S2P_NOISE)
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2 also ends the network data there
    assert len(ours.frequency_hz) == 3


TS_V2 = """! version 2 file with everything
[Version] 2.1
# MHz S RI R 50
[Number of Ports] 2
[Two-Port Data Order] 21_12
[Number of Frequencies] 2
[Number of Noise Frequencies] 2
[Reference] 50
  75 ! second port on the next line
[Matrix Format] Full
[Begin Information]
[Manufacturer] nobody
[End Information]
[Network Data]
100 0.1 0.2 0.3 0.4 0.5 0.6 0.7 0.8
200 0.11 0.21 0.31 0.41 0.51 0.61 0.71 0.81 ! trailing
[Noise Data]
100 1.2 0.5 30 0.3
200 1.4 0.45 40 0.32
[End]
"""


def test_v2_keywords_reference_information_noise(tmp_path):
    ours = read_touchstone(write_text(tmp_path / "k.ts", TS_V2, newline="\r\n"))
    assert ours.version == "2.1" and ours.n_ports == 2
    np.testing.assert_array_equal(ours.z0, [50.0, 75.0])  # [Reference] per port
    # scikit-rf 2.2 cannot read [Begin Information]: compare with it on the file without that block
    plain = TS_V2.replace("[Begin Information]\n[Manufacturer] nobody\n[End Information]\n", "")
    assert_same_as_skrf(ours, write_text(tmp_path / "plain.ts", plain))
    # Touchstone specification: 21_12 means S11 S21 S12 S22
    assert ours.s[0, 1, 0] == 0.3 + 0.4j and ours.s[0, 0, 1] == 0.5 + 0.6j


def test_v2_three_port_lower_hand_written(tmp_path):
    text = """[Version] 2.0
# GHz S RI R 50
[Number of Ports] 3
[Number of Frequencies] 1
[Matrix Format] Lower
[Network Data]
1 0.11 0 ! S11
  0.21 0 0.22 0 ! S21 S22
  0.31 0 0.32 0 0.33 0
[End]
"""
    path = write_text(tmp_path / "l.ts", text)
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2, same file
    assert ours.s[0, 0, 2] == ours.s[0, 2, 0] == 0.31  # Touchstone specification: symmetric fill


def test_v2_with_snp_extension(tmp_path):
    path = tmp_path / "v2.s2p"
    write_touchstone(path, [1e9, 2e9], random_s(2, 2), version="2.0")
    assert_same_as_skrf(read_touchstone(path), path)


# --------------------------------------------------------------------------- Y and Z files


def _zy_text(values, parameter, version, n, z0):
    """Y or Z data (nf, n, n) as a Touchstone text, RI, full matrix, 12_21 for v2."""
    rows = []
    for k, m in enumerate(values):
        flat = m.T.ravel() if (n == 2 and version == "1.0") else m.ravel()
        rows.append(f"{k + 1} " + " ".join(f"{float(v.real)!r} {float(v.imag)!r}" for v in flat))
    if version == "1.0":
        return f"# GHz {parameter} RI R {z0}\n" + "\n".join(rows) + "\n"
    return (f"[Version] {version}\n# GHz {parameter} RI R {z0}\n[Number of Ports] {n}\n"
            + ("[Two-Port Data Order] 12_21\n" if n == 2 else "")
            + f"[Number of Frequencies] {len(values)}\n[Network Data]\n" + "\n".join(rows) + "\n[End]\n")


@pytest.mark.parametrize("parameter", ["Z", "Y"])
@pytest.mark.parametrize("n", [1, 2, 3])
def test_v2_z_y_files_convert_like_scikit_rf(tmp_path, parameter, n):
    s = random_s(3, n, seed=7) * 0.5
    z0 = 50.0
    values = s2z(s, z0) if parameter == "Z" else s2y(s, z0)  # scikit-rf 2.2 conversions
    path = write_text(tmp_path / "p.ts", _zy_text(values, parameter, "2.0", n, z0))
    ours = read_touchstone(path)
    assert ours.source_parameter == parameter
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2 reading the same file
    np.testing.assert_allclose(ours.s, s, rtol=1e-9, atol=1e-12)  # back to the S we started from


def test_v1_z_file_is_normalised_to_r(tmp_path):
    s = random_s(3, 2, seed=8) * 0.5
    z = s2z(s, 75.0) / 75.0  # Touchstone specification v1: Z values divided by R
    path = write_text(tmp_path / "z.s2p", _zy_text(z, "Z", "1.0", 2, 75.0))
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)  # scikit-rf 2.2 agrees on normalised Z
    np.testing.assert_allclose(ours.s, s, rtol=1e-9, atol=1e-12)


def test_v1_y_file_is_normalised_to_r(tmp_path):
    # Touchstone specification v1 (from memory): Y values normalised, y = Y R. A normalised
    # admittance of 1 is a matched load (S11 = 0) and 2 gives S11 = (1 - 2)/(1 + 2) (Pozar,
    # Microwave Engineering, reflection from a normalised load). scikit-rf 2.2 multiplies Y by R
    # instead, so it is not the reference here.
    path = write_text(tmp_path / "y.s1p", "# GHz Y RI R 50\n1 1 0\n2 2 0\n")
    ours = read_touchstone(path)
    np.testing.assert_allclose(ours.s[:, 0, 0], [0.0, -1.0 / 3.0], atol=1e-15)
    s = random_s(2, 2, seed=9) * 0.5
    y = s2y(s, 50.0) * 50.0
    ours2 = read_touchstone(write_text(tmp_path / "y.s2p", _zy_text(y, "Y", "1.0", 2, 50.0)))
    np.testing.assert_allclose(ours2.s, s, rtol=1e-9, atol=1e-12)  # scikit-rf 2.2 s2y, inverted


@pytest.mark.parametrize("parameter", ["H", "G"])
def test_h_g_refused(tmp_path, parameter):
    path = write_text(tmp_path / "h.s2p", f"# GHz {parameter} RI R 50\n1 1 0 0 0 0 0 1 0\n")
    with pytest.raises(InputError, match=r"h\.s2p:1: .*hybrid"):
        read_touchstone(path)


# --------------------------------------------------------------------------- refusals


def refused(path, line, pattern):
    with pytest.raises(InputError) as info:
        read_touchstone(path)
    err = info.value
    assert err.path == str(path)
    assert err.line == line, str(err)
    text = str(err)
    assert text.startswith(str(path) + (f":{line}: " if line is not None else ": "))
    assert pattern.lower() in text.lower(), text
    return text


BAD_TEXTS = [
    # (name, text, line, words in the message)   -- Touchstone specification, syntax rules
    ("unknown_option", "# GHz S MA R 50 X\n1 0.5 0\n", 1, "unknown token 'X'"),
    ("second_option", "# GHz S MA R 50\n# MHz S RI R 50\n1 0.5 0\n", 2, "second option line"),
    ("r_not_a_number", "# GHz S MA R x50\n1 0.5 0\n", 1, "unknown token 'x50'"),
    ("unit_twice", "# GHz MHz\n1 0.5 0\n", 1, "given twice"),
    ("short_row", "# GHz S MA R 50\n1 0.5 0\n2 0.5\n3 0.5 0\n", 3, "wrong count of values"),
    ("long_row", "# GHz S MA R 50\n1 0.5 0\n2 0.5 0 7\n", 3, "this row has 4"),
    ("non_numeric", "# GHz S MA R 50\n1 0.5 0\n2 abc 0\n", 3, "'abc' is not a number"),
    ("underscore", "# GHz S MA R 50\n1 0.5 0\n2 1_0 0\n", 3, "'1_0' is not a number"),
    ("nan", "# GHz S MA R 50\n1 0.5 0\n2 nan 0\n", 3, "NaN or Inf"),
    ("inf", "# GHz S MA R 50\n1 0.5 0\n2 0.5 -inf\n", 3, "NaN or Inf"),
    ("decreasing", "# GHz S MA R 50\n1 0.5 0\n3 0.5 0\n2 0.5 0\n", 4, "decreasing"),
    ("duplicated", "# GHz S MA R 50\n1 0.5 0\n2 0.5 0\n2 0.5 0\n", 4, "duplicated"),
    ("empty", "", None, "no network data"),
    ("comments_only", "! nothing\n# GHz S MA R 50\n\n", None, "no network data"),
    ("keyword_in_v1", "# GHz S MA R 50\n[Number of Ports] 1\n1 0.5 0\n", 2, "version 1 file"),
    ("option_after_data", "1 0.5 0\n# GHz S MA R 50\n", 2, "option line after the data"),
]


@pytest.mark.parametrize("name, text, line, words", BAD_TEXTS, ids=[b[0] for b in BAD_TEXTS])
def test_refusals_name_file_line_and_problem(tmp_path, name, text, line, words):
    refused(write_text(tmp_path / f"{name}.s1p", text), line, words)


def test_refuses_truncated_final_row_of_wrapped_file(tmp_path):
    text = S4P_V1.rsplit("\n", 2)[0] + "\n"  # drop the last line of the last frequency
    refused(write_text(tmp_path / "t.s4p", text), 6, "truncated final row")


def test_refuses_mis_wrapped_row(tmp_path):
    text = S3P_V1.replace("0.21 0.04 0.22 0.05 0.23 0.06", "0.21 0.04 0.22 0.05")
    refused(write_text(tmp_path / "m.s3p", text), 2, "wrong count of values")


V2_HEAD = "[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 1\n"


@pytest.mark.parametrize("name, text, line, words", [
    ("nfreq", V2_HEAD + "[Number of Frequencies] 3\n[Network Data]\n1 0.5 0\n2 0.5 0\n[End]\n", 4,
     "[Number of Frequencies] is 3 but the file holds 2"),
    ("unknown_keyword", V2_HEAD + "[Colour] red\n[Network Data]\n1 0.5 0\n", 4, "unknown keyword [Colour]"),
    ("bad_version", "[Version] 3.7\n# GHz S RI R 50\n", 1, "unsupported [Version]"),
    ("data_before_network", V2_HEAD + "1 0.5 0\n", 4, "data before [Network Data]"),
    ("bad_order", V2_HEAD + "[Two-Port Data Order] 11_22\n", 4, "12_21 or 21_12"),
    ("mixed_mode", V2_HEAD + "[Mixed-Mode Order] D2,1\n", 4, "mixed-mode"),
    ("short_reference", V2_HEAD.replace("1\n", "2\n") + "[Reference] 50\n[Network Data]\n", 4,
     "[Reference] holds fewer than 2"),
])
def test_v2_refusals(tmp_path, name, text, line, words):
    refused(write_text(tmp_path / f"{name}.ts", text), line, words)


def test_v2_missing_number_of_ports(tmp_path):
    refused(write_text(tmp_path / "np.ts", "[Version] 2.0\n# GHz S RI R 50\n[Network Data]\n1 0.5 0\n"),
            None, "[Number of Ports] is missing")


def test_refuses_binary_nul(tmp_path):
    path = tmp_path / "b.s1p"
    path.write_bytes(b"# GHz S MA R 50\n1 0.5 0\n\x00\x01\x02")
    refused(path, 3, "binary content")


def test_refuses_undecodable(tmp_path):
    path = tmp_path / "u.s1p"
    path.write_bytes(b"# GHz S MA R 50\n\xff\xfe 1 0.5 0\n")
    refused(path, 2, "non-UTF-8")


def test_refuses_missing_file_and_directory(tmp_path):
    refused(tmp_path / "nothere.s2p", None, "does not exist")
    refused(tmp_path, None, "is a directory")


@pytest.mark.parametrize("name", ["data.txt", "data.s2", "noext"])
def test_refuses_v1_extension_without_port_count(tmp_path, name):
    refused(write_text(tmp_path / name, "# GHz S MA R 50\n1 0.5 0\n"), None, "extension")


def test_n_ports_argument(tmp_path):
    path = write_text(tmp_path / "data.txt", "# GHz S MA R 50\n1 0.5 0\n")
    assert read_touchstone(path, n_ports=1).n_ports == 1
    with pytest.raises(InputError, match="extension says 2"):
        read_touchstone(write_text(tmp_path / "x.s2p", S2P_PLAIN), n_ports=3)


def test_errors_are_one_line_and_input_errors_only(tmp_path):
    for i, (_, text, _, _) in enumerate(BAD_TEXTS):
        path = write_text(tmp_path / f"f{i}.s1p", text)
        with pytest.raises(InputError) as info:
            read_touchstone(path)
        assert "\n" not in str(info.value)


# --------------------------------------------------------------------------- parameter_index


@pytest.mark.parametrize("name, index", [("S21", (1, 0)), ("S11", (0, 0)), ("s12", (0, 1)), ("S34", (2, 3))])
def test_parameter_index(name, index):
    # Touchstone / network convention: Sij, into port i from port j -> row i-1, column j-1
    assert parameter_index(name) == index


@pytest.mark.parametrize("name", ["S0", "S01", "X21", "S1", "", "S123", "21"])
def test_parameter_index_refuses(name):
    with pytest.raises(InputError, match="S-parameter name"):
        parameter_index(name)


def test_parameter_index_selects_like_scikit_rf(tmp_path):
    path = tmp_path / "p.s2p"
    write_touchstone(path, [1e9, 2e9], random_s(2, 2, seed=4))
    r, c = parameter_index("S21")
    # scikit-rf 2.2: Network.s21 is s[:, 1, 0]
    np.testing.assert_allclose(read_touchstone(path).s[:, r, c], skrf_read(path).s21.s[:, 0, 0], rtol=RTOL)


# --------------------------------------------------------------------------- writer


def test_writer_one_port_vector_and_per_port_v1(tmp_path):
    path = tmp_path / "one.s1p"
    s = np.array([0.1 + 0.2j, 0.3 - 0.4j])
    write_touchstone(path, [1e6, 2e6], s, unit="MHz", fmt="MA", z0=75)
    ours = read_touchstone(path)
    assert_same_as_skrf(ours, path)
    np.testing.assert_allclose(ours.s[:, 0, 0], s, rtol=1e-11)
    assert ours.z0.tolist() == [75.0]


def test_writer_is_atomic_on_failure(tmp_path, monkeypatch):
    path = tmp_path / "keep.s2p"
    write_touchstone(path, [1e9, 2e9], random_s(2, 2))
    before = path.read_bytes()

    def broken(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", broken)
    with pytest.raises(InputError, match="No space left"):
        write_touchstone(path, [1e9, 2e9], random_s(2, 2, seed=5))
    assert path.read_bytes() == before  # the old file is intact
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep.s2p"]  # no temporary left behind


@pytest.mark.parametrize("kwargs, words", [
    (dict(fmt="XY"), "fmt must be"),
    (dict(unit="THz"), "unit must be"),
    (dict(version="3.0"), "version must be"),
    (dict(matrix_format="Lower"), "full matrix only"),
    (dict(z0=-50), "positive"),
    (dict(z0=[50, 75, 100]), "one per port"),
])
def test_writer_refuses_bad_arguments(tmp_path, kwargs, words):
    with pytest.raises(InputError, match=words):
        write_touchstone(tmp_path / "x.s2p", [1e9, 2e9], random_s(2, 2), **kwargs)
    assert not list(tmp_path.iterdir())


def test_writer_refuses_bad_data(tmp_path):
    p = tmp_path / "x.s2p"
    with pytest.raises(InputError, match="shapes do not fit"):
        write_touchstone(p, [1e9, 2e9, 3e9], random_s(2, 2))
    with pytest.raises(InputError, match="strictly increasing"):
        write_touchstone(p, [2e9, 1e9], random_s(2, 2))
    with pytest.raises(InputError, match="finite"):
        write_touchstone(p, [1e9, 2e9], np.full((2, 2, 2), np.nan))
    with pytest.raises(InputError, match="extension says 2"):
        write_touchstone(p, [1e9, 2e9], random_s(2, 3))
    with pytest.raises(InputError, match="symmetric"):
        write_touchstone(tmp_path / "x.ts", [1e9, 2e9], random_s(2, 3), version="2.0", matrix_format="Upper")
    with pytest.raises(InputError, match="zero magnitude"):
        write_touchstone(p, [1e9, 2e9], np.zeros((2, 2, 2)), fmt="DB")


# --------------------------------------------------------------------------- hashing, many files


def test_file_sha256_known_vector(tmp_path):
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert file_sha256(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    big = tmp_path / "big.bin"
    big.write_bytes(os.urandom(3 << 20))
    assert file_sha256(big) == hashlib.sha256(big.read_bytes()).hexdigest()  # Python hashlib
    with pytest.raises(InputError, match="does not exist"):
        file_sha256(tmp_path / "none")


def test_read_many_order_serial_and_pool(tmp_path):
    paths = []
    for k in range(20):
        p = tmp_path / f"f{k:02d}.s2p"
        write_touchstone(p, np.linspace(1e9, 2e9, 5), random_s(5, 2, seed=k))
        paths.append(p)
    paths = paths[::-1]  # order given, not sorted
    serial = read_many(paths, workers=1)
    pooled = read_many(paths, workers=2)
    for p, a, b in zip(paths, serial, pooled):
        np.testing.assert_allclose(a.s, skrf_read(p).s, rtol=RTOL)  # scikit-rf 2.2, same file
        np.testing.assert_array_equal(a.s, b.s)


def test_read_many_reports_the_failing_file(tmp_path):
    paths = []
    for k in range(20):
        p = tmp_path / f"f{k:02d}.s1p"
        write_touchstone(p, [1e9, 2e9], np.array([0.1, 0.2]))
        paths.append(p)
    write_text(paths[7], "# GHz S MA R 50\n1 0.5 0\n1 0.5 0\n")
    with pytest.raises(InputError) as info:
        read_many(paths, workers=2)
    assert info.value.path == str(paths[7]) and info.value.line == 3
