"""Touchstone read speed: our reader (serial and read_many) against a loop of skrf.Network.

A script, not a test: ``.venv/bin/python tests/benchmarks/bench_touchstone.py [n_files] [n_points]``.
Writes n_files two-port .s2p files of n_points (default 360 x 1601) with write_touchstone in
a temporary folder, then prints the median of 5 runs of each reader and the ratios.
"""

from __future__ import annotations

import os
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import skrf

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from cloakrcs.touchstone import read_many, read_touchstone, write_touchstone  # noqa: E402

RUNS = 5


def timed(fn) -> float:
    times = []
    for _ in range(RUNS):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main(n_files: int = 360, n_points: int = 1601) -> None:
    rng = np.random.default_rng(0)
    f = np.linspace(2e9, 18e9, n_points)
    with tempfile.TemporaryDirectory() as folder:
        paths = []
        for k in range(n_files):
            s = 0.3 * (rng.normal(size=(n_points, 2, 2)) + 1j * rng.normal(size=(n_points, 2, 2)))
            path = os.path.join(folder, f"angle_{k:03d}.s2p")
            write_touchstone(path, f, s, comments=[f"angle {k}"])
            paths.append(path)

        def ours_serial():
            return [read_touchstone(p) for p in paths]

        def ours_pool():
            return read_many(paths)

        def scikit_rf():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return [skrf.Network(p) for p in paths]

        a, b, c = ours_serial(), ours_pool(), scikit_rf()  # warm-up, and a sanity check
        assert all(np.allclose(x.s, z.s, rtol=1e-12) and np.array_equal(x.s, y.s) for x, y, z in zip(a, b, c))
        t_serial, t_pool, t_skrf = timed(ours_serial), timed(ours_pool), timed(scikit_rf)

    cores = os.cpu_count()
    print(f"{n_files} two-port files of {n_points} points, median of {RUNS} runs, {cores} cores")
    print(f"  ours, serial       : {t_serial:7.3f} s  ({1e3 * t_serial / n_files:6.2f} ms/file)")
    print(f"  ours, read_many    : {t_pool:7.3f} s  ({1e3 * t_pool / n_files:6.2f} ms/file)")
    print(f"  skrf.Network loop  : {t_skrf:7.3f} s  ({1e3 * t_skrf / n_files:6.2f} ms/file)")
    print(f"  speed-up serial    : {t_skrf / t_serial:5.2f} x")
    print(f"  speed-up read_many : {t_skrf / t_pool:5.2f} x")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
