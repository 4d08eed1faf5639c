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
