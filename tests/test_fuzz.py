"""Short fuzz run for CI: random and mutated bytes into the Touchstone reader and the manifest parser.

The only exception allowed out is the project's ``InputError`` (one line). The long local run
is ``tests/benchmarks/fuzz_long.py`` (several minutes, same mutations plus campaign loading).
"""

from __future__ import annotations

import tempfile
import warnings
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cloakrcs.errors import InputError
from cloakrcs.manifest import parse_manifest
from cloakrcs.touchstone import read_touchstone

CORPUS = Path(__file__).parent / "corpus"
SEEDS_TS = sorted(p.read_bytes()[:4000] for p in (CORPUS / "read").iterdir()) + [
    b"[Version] 2.1\n# MHz S MA R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
    b"[Number of Frequencies] 2\n[Reference] 50 75\n[Matrix Format] Lower\n[Network Data]\n"
    b"1 0.1 2 0.3 4 0.5 6\n2 0.1 2 0.3 4 0.5 6\n[Noise Data]\n1 2 3 4 5\n[End]\n",
    b"# GHz S DB R 50\n1 -1 2 -3 4 -5 6 -7 8\n2 -1 2 -3 4 -5 6 -7 8\n3 1 2 3 4 5\n",
]
SEEDS_MANIFEST = [(CORPUS / "manifests" / "valid.toml").read_bytes()]
TOKENS = [b"[", b"]", b"#", b"!", b"\n", b"\r", b"nan", b"inf", b"1e999", b"-", b"=", b'"', b"\x00", b"\xff",
          b"[Version] 2.0", b"[Number of Ports] 3", b"[Matrix Format] Upper", b"[Reference]", b"[[target]]",
          b"[campaign]", b"role = \"subject\"", b"files = \"../*\"", b"{", b"}", b"9" * 40, b"\xef\xbb\xbf"]


@st.composite
def mutated(draw, seeds):
    data = bytearray(draw(st.sampled_from(seeds)))
    for _ in range(draw(st.integers(1, 8))):
        op = draw(st.sampled_from(["flip", "truncate", "token", "bytes"]))
        at = draw(st.integers(0, len(data)))
        if op == "flip" and data:
            data[min(at, len(data) - 1)] ^= 1 << draw(st.integers(0, 7))
        elif op == "truncate":
            del data[at:]
        elif op == "token":
            data[at:at] = draw(st.sampled_from(TOKENS))
        else:
            data[at:at] = draw(st.binary(min_size=1, max_size=16))
    return bytes(data)


def _feed(call, data: bytes, name: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / name
        path.write_bytes(data)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                call(path)
            except InputError as err:
                assert "\n" not in str(err) and str(err).startswith(str(path)), str(err)


FUZZ = settings(max_examples=400, deadline=None, suppress_health_check=list(HealthCheck))


@FUZZ
@given(st.one_of(mutated(SEEDS_TS), st.binary(max_size=300)), st.sampled_from(["x.s1p", "x.s2p", "x.s4p", "x.txt"]))
def test_reader_raises_only_input_error(data, name):
    _feed(read_touchstone, data, name)


@FUZZ
@given(st.one_of(mutated(SEEDS_MANIFEST), st.binary(max_size=300)), st.booleans())
def test_manifest_parser_raises_only_input_error(data, collect):
    _feed(lambda p: parse_manifest(p, collect=collect), data, "manifest.toml")


# ---- value-level fuzzing: every numeric or text value of the valid manifest replaced by an extreme or odd
# one (the robustness issue's families: huge and tiny numbers, non-finite ones, long text, deep nesting)
ODD_VALUES = ["1e308", "-1e308", "1e-300", "0", "-1", "nan", "inf", "-inf", "1e999", "9" * 30, '"' + "x" * 30000 + '"',
              '""', "true", "[1, 2]", "[" * 600 + "]" * 600, "{ a = 1 }", "2026-13-40", '"../../etc/passwd"',
              '"=cmd"', "0x7fffffffffffffff", "1_000_000_000_000"]


@st.composite
def odd_manifest(draw):
    """valid.toml with one to four `key = value` lines given odd values."""
    lines = SEEDS_MANIFEST[0].decode("utf-8").split("\n")
    assignments = [i for i, line in enumerate(lines) if "=" in line and not line.lstrip().startswith("#")]
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.sampled_from(assignments))
        key = lines[i].split("=", 1)[0]
        lines[i] = f"{key}= {draw(st.sampled_from(ODD_VALUES))}"
    return "\n".join(lines).encode("utf-8")


# ---- line-level Touchstone mutations: whole lines dropped, repeated or replaced by odd ones
ODD_LINES = [b"# GHz S DB R 50", b"# Hz S RI R 0", b"# THz Z MA R 1e-300", b"1 7000 0", b"1 1e300 0", b"1 nan 0",
             b"[Version] 2.0", b"[Number of Frequencies] 99", b"[Number of Ports] 2", b"[End]", b"-1 0 0",
             b"1e308 1 0", b"2 0.1 0.2 0.3", b""]


@st.composite
def line_mutated(draw):
    lines = draw(st.sampled_from(SEEDS_TS)).split(b"\n")
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        op = draw(st.sampled_from(["drop", "repeat", "replace", "insert"]))
        if op == "drop" and lines:
            del lines[i]
        elif op == "repeat" and lines:
            lines.insert(i, lines[i])
        elif op == "replace" and lines:
            lines[i] = draw(st.sampled_from(ODD_LINES))
        else:
            lines.insert(i, draw(st.sampled_from(ODD_LINES)))
    return b"\n".join(lines)


@settings(max_examples=150, deadline=None, suppress_health_check=list(HealthCheck))
@given(odd_manifest(), st.booleans())
def test_manifest_with_odd_values_raises_only_input_error(data, collect):
    _feed(lambda p: parse_manifest(p, collect=collect), data, "manifest.toml")


@settings(max_examples=200, deadline=None, suppress_health_check=list(HealthCheck))
@given(line_mutated(), st.sampled_from(["x.s1p", "x.s2p"]))
def test_reader_with_odd_lines_raises_only_input_error(data, name):
    _feed(read_touchstone, data, name)
