"""Several-minute local fuzz run of the Touchstone reader, the manifest parser and the campaign loader.

    .venv/bin/python tests/benchmarks/fuzz_long.py --minutes 3 [--seed 1]

Inputs: the files of tests/corpus mutated (bit flips, truncations, insertions of Touchstone and
TOML tokens, random bytes) and plain random bytes. Any exception other than
``cloakrcs.errors.InputError``, or an InputError of more than one line, is a failure: it is
printed with the input saved under the work folder. Prints how many inputs were tried.
"""

from __future__ import annotations

import argparse
import random
import shutil
import sys
import tempfile
import time
import traceback
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from cloakrcs.campaign import load_campaign  # noqa: E402
from cloakrcs.errors import InputError  # noqa: E402
from cloakrcs.manifest import parse_manifest  # noqa: E402
from cloakrcs.touchstone import read_touchstone  # noqa: E402
from test_fuzz import SEEDS_MANIFEST, SEEDS_TS, TOKENS  # noqa: E402


def mutate(data: bytes, rng: random.Random) -> bytes:
    b = bytearray(data)
    for _ in range(rng.randint(1, 8)):
        op = rng.randrange(4)
        at = rng.randint(0, len(b))
        if op == 0 and b:
            b[min(at, len(b) - 1)] ^= 1 << rng.randrange(8)
        elif op == 1:
            del b[at:]
        elif op == 2:
            b[at:at] = rng.choice(TOKENS)
        else:
            b[at:at] = bytes(rng.randrange(256) for _ in range(rng.randint(1, 16)))
    return bytes(b)


def make_campaign(folder: Path) -> Path:
    """The tests' tiny campaign (tests/conftest.py), written once; its manifest path."""
    import numpy as np

    from conftest import TINY_MANIFEST, point_echo, write_s1p

    freq = np.linspace(8e9, 12e9, 101)
    raw = folder / "raw"
    for pol in ("HH", "VV"):
        for rep in range(2):
            write_s1p(raw / f"empty_{pol}_{rep}.s1p", freq, point_echo(freq, 1.0, 0.01))
        write_s1p(raw / f"sphere_{pol}.s1p", freq, point_echo(freq, 4.2, 0.1))
        for ang in (-5.0, 0.0, 5.0):
            write_s1p(raw / f"bare_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.3))
            write_s1p(raw / f"r1_{pol}_{ang:+06.1f}.s1p", freq, point_echo(freq, 4.2, 0.1))
    (folder / "manifest.toml").write_text(TINY_MANIFEST)
    return folder / "manifest.toml"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=3.0)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    rng = random.Random(args.seed)
    work = Path(tempfile.mkdtemp(prefix="cloakrcs-fuzz-"))
    manifest = make_campaign(work / "campaign")
    victim = work / "campaign" / "raw" / "bare_HH_+000.0.s1p"
    victim_text = victim.read_bytes()
    counts = {"touchstone": 0, "manifest": 0, "campaign": 0}
    refused = 0
    failures: list[str] = []
    seen: set[tuple] = set()
    warnings.simplefilter("ignore", RuntimeWarning)
    stop = time.monotonic() + 60 * args.minutes
    while time.monotonic() < stop:
        kind = rng.choices(list(counts), weights=[6, 3, 1])[0]
        if kind == "touchstone":
            data = mutate(rng.choice(SEEDS_TS), rng) if rng.random() < 0.9 else rng.randbytes(rng.randint(0, 300))
            path = work / rng.choice(["x.s1p", "x.s2p", "x.s3p", "x.s4p", "x.dat"])
            path.write_bytes(data)
            call = lambda: read_touchstone(path)  # noqa: E731
        elif kind == "manifest":
            data = mutate(rng.choice(SEEDS_MANIFEST), rng) if rng.random() < 0.9 else rng.randbytes(rng.randint(0, 300))
            path = work / "campaign" / "fuzz.toml"
            path.write_bytes(data)
            collect = rng.random() < 0.5
            call = lambda: parse_manifest(path, collect=collect)  # noqa: E731
        else:  # a mutated manifest or a mutated sweep inside a valid campaign
            if rng.random() < 0.5:
                data = mutate(SEEDS_MANIFEST[0], rng)
                path = work / "campaign" / "fuzz.toml"
                path.write_bytes(data)
                victim.write_bytes(victim_text)
            else:
                data = mutate(victim_text, rng)
                path = victim
                victim.write_bytes(data)
                path = manifest
            call = lambda: load_campaign(path)  # noqa: E731
        counts[kind] += 1
        try:
            call()
        except InputError as err:
            refused += 1
            if "\n" in str(err):
                failures.append(f"{kind}: InputError of several lines: {str(err)!r}")
        except Exception as exc:  # noqa: BLE001 - that is what we hunt
            where = traceback.extract_tb(exc.__traceback__)[-1]
            key = (kind, type(exc).__name__, where.filename, where.lineno)
            if key not in seen:
                seen.add(key)
                keep = work / f"failure_{len(seen)}.bin"
                keep.write_bytes(data)
                failures.append(f"{kind}: {type(exc).__name__}: {exc} at {where.filename}:{where.lineno} "
                                f"(input saved as {keep})")
    total = sum(counts.values())
    print(f"tried {total} inputs in {args.minutes:g} min ({', '.join(f'{k} {v}' for k, v in counts.items())}); "
          f"{refused} refused with InputError; {len(failures)} distinct failures")
    for f in failures:
        print("FAILURE", f)
    if not failures:
        shutil.rmtree(work, ignore_errors=True)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
