"""Processing speed and memory: cloakrcs against the plain scikit-rf script a user would write.

A script, not a test::

    .venv/bin/python tests/benchmarks/bench_process.py [--sizes 90x401,180x801,360x1601] [--runs 3]

For each size (angles x points) it simulates (once, cached in the temp folder keyed by size) a
two-port campaign of 4 targets x 2 polarizations x every angle (background, sphere reference,
bare cylinder, one coated revision: 8 x angles .s2p files, the echo in S21) and prints medians of
``--runs`` runs of: import (load_campaign vs a loop of skrf.Network), processing after import
(process_campaign vs per-sweep Network.time_gate + numpy calibration + pandas CSVs), the whole
``cloakrcs process`` command in a subprocess (interpreter start, store write and report included)
vs the plain script in a subprocess, and peak resident memory above the interpreter's baseline.
"""

from __future__ import annotations

import argparse
import gc
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

C0 = 299_792_458.0
RANGE_M, OFFSET_M, SPAN_M = 4.0, 0.3, 0.5
BAND_GHZ = (8.0, 12.0)
SPHERE_RADIUS_M = 0.0762
CACHE = Path(tempfile.gettempdir()) / "cloakrcs-bench"
CLI = str(ROOT / ".venv" / "bin" / "cloakrcs")
PY = str(ROOT / ".venv" / "bin" / "python")
PEAK_WRAPPER = ("import resource, subprocess, sys\n"
                "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL)\n"
                "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")


# ============================================================================ campaign
def campaign_config(n_angles: int, n_points: int) -> dict:
    """Simulator config: 4 targets x 2 polarizations x n_angles two-port sweeps of n_points."""
    step = 360.0 / n_angles
    angles = {"start": 0.0, "stop": 360.0 - step, "step": step}
    return {
        "seed": 7, "polarizations": ["HH", "VV"],
        "campaign": {"name": f"bench-{n_angles}x{n_points}", "prototype": "benchmark sleeve"},
        "chamber": {"range_m": RANGE_M, "offset_m": OFFSET_M},
        "sweep": {"start_ghz": BAND_GHZ[0], "stop_ghz": BAND_GHZ[1], "points": n_points, "ports": 2},
        "angles": angles,
        "system": {"gain_db": -24.0, "ripple_db": 0.1},
        "coupling": {"level_db": -6.0, "range_m": 0.05},
        "clutter": [{"range_m": 2.4, "level_dbsm": -10.0}, {"range_m": 6.5, "level_dbsm": -5.0}],
        "noise": {"level_db": -70.0},
        "gate": {"span_m": SPAN_M, "window": "kaiser", "kaiser_beta": 6.0},
        "band": {"start_ghz": 8.4, "stop_ghz": 11.6},
        "target": [
            {"name": "empty", "role": "background", "model": "empty", "angles": angles},
            {"name": "sphere", "role": "reference", "model": "sphere", "radius_m": SPHERE_RADIUS_M,
             "angles": angles, "calibrates": ["HH", "VV"]},
            {"name": "bare", "role": "subject", "model": "bare_cylinder", "radius_m": 0.04, "length_m": 0.2,
             "size_m": 0.2},
            {"name": "r1", "role": "subject", "model": "coated_cylinder", "baseline": "bare", "revision": "R1",
             "radius_m": 0.04, "length_m": 0.2, "thickness_m": 0.0015, "eps_r": [12.0, -0.3],
             "mu_r": [1.5, -1.0], "size_m": 0.2},
        ],
    }


def ensure_campaign(n_angles: int, n_points: int) -> Path:
    """The cached campaign of this size (simulated on first use); returns its manifest path."""
    from cloakrcs.simulate import simulate_campaign

    folder = CACHE / f"a{n_angles}_p{n_points}"
    done = folder / ".complete"
    if not done.exists():
        t0 = time.perf_counter()
        print(f"simulating {n_angles} angles x {n_points} points into {folder} ...", flush=True)
        simulate_campaign(campaign_config(n_angles, n_points), folder)
        done.write_text("ok\n")
        print(f"  done in {time.perf_counter() - t0:.0f} s", flush=True)
    return folder / "manifest.toml"


# ============================================================================ the plain script
TARGETS, POLS = ("empty", "sphere", "bare", "r1"), ("HH", "VV")


def _angle_of(path: Path) -> float:
    return float(path.stem.rsplit("_", 1)[1])


def plain_import(manifest) -> dict:
    """What a user writes first: a loop of skrf.Network over the files, grouped by target and pol."""
    import skrf

    raw = Path(manifest).parent / "raw"
    nets = {}
    for target in TARGETS:
        for pol in POLS:
            paths = sorted(raw.glob(f"{target}_{pol}_*.s2p"), key=_angle_of)
            nets[target, pol] = ([_angle_of(p) for p in paths], [skrf.Network(str(p)) for p in paths])
    return nets


def plain_process(nets: dict, out_dir) -> None:
    """Per-sweep Network.time_gate around the two-way delay (scikit-rf's defaults: Kaiser 6,
    band-pass), background subtraction, sphere substitution calibration (Mie), pandas CSVs."""
    import pandas as pd

    from cloakrcs.references import sphere_amplitude

    center_ns = 2 * (RANGE_M + OFFSET_M) / C0 * 1e9
    span_ns = 2 * SPAN_M / C0 * 1e9
    gated = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, (angles, networks) in nets.items():
            gated[key] = np.array([n.s21.time_gate(center=center_ns, span=span_ns, t_unit="ns").s[:, 0, 0]
                                   for n in networks])
    f = nets["empty", "HH"][1][0].f
    band = (f >= 8.4e9) & (f <= 11.6e9)
    a_sphere = sphere_amplitude(f, SPHERE_RADIUS_M)
    rcs_frames, red_frames, sigma_db = [], [], {}
    for pol in POLS:
        bg = gated["empty", pol]
        cal = a_sphere / (gated["sphere", pol] - bg).mean(axis=0)
        floor = np.median(np.abs(bg - bg.mean(axis=0)) ** 2, axis=0) * np.abs(cal) ** 2
        for target in ("bare", "r1"):
            angles = nets[target, pol][0]
            amp = ((gated[target, pol] - bg) * cal)[:, band]
            sigma = np.abs(amp) ** 2
            sigma_db[target, pol] = 10 * np.log10(sigma)
            nang, nf = amp.shape
            rcs_frames.append(pd.DataFrame({
                "target": target, "polarization": pol,
                "angle_deg": np.repeat(angles, nf), "frequency_hz": np.tile(f[band], nang),
                "rcs_dbsm": sigma_db[target, pol].ravel(), "phase_deg": np.degrees(np.angle(amp)).ravel(),
                "floor_dbsm": np.tile(10 * np.log10(floor[band]), nang),
                "floor_limited": (sigma < floor[band] * 10).ravel()}))
        red = sigma_db["bare", pol] - sigma_db["r1", pol]
        red_frames.append(pd.DataFrame({
            "subject": "r1", "baseline": "bare", "polarization": pol,
            "angle_deg": np.repeat(nets["r1", pol][0], red.shape[1]),
            "frequency_hz": np.tile(f[band], red.shape[0]), "reduction_db": red.ravel()}))
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    pd.concat(rcs_frames).to_csv(out / "rcs.csv", index=False)
    pd.concat(red_frames).to_csv(out / "reduction.csv", index=False)


def plain_main(manifest, out_dir) -> None:
    plain_process(plain_import(manifest), out_dir)


# ============================================================================ measuring
def median_time(fn, runs: int) -> float:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def peak_rss_mb(cmd: list[str]) -> float:
    """Peak resident memory (MB) of the largest process of cmd, from getrusage in a wrapper child."""
    out = subprocess.run([PY, "-c", PEAK_WRAPPER, *cmd], check=True, capture_output=True, text=True).stdout
    return int(out.split()[-1]) / 1024


def peak_tree_rss_mb(cmd: list[str], interval_s: float = 0.01) -> float:
    """Peak of the summed resident memory (MB) of cmd and all its descendants (worker pools too)."""
    import psutil

    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    top = psutil.Process(proc.pid)
    peak = 0
    while proc.poll() is None:
        total = 0
        try:
            for p in [top, *top.children(recursive=True)]:
                total += p.memory_info().rss
        except psutil.Error:
            pass
        peak = max(peak, total)
        time.sleep(interval_s)
    if proc.returncode:
        raise RuntimeError(f"{cmd} failed with status {proc.returncode}")
    return peak / 2**20


BASELINE_IMPORTS = ("import cloakrcs.cli, cloakrcs.pipeline, cloakrcs.process, cloakrcs.campaign, "
                    "cloakrcs.outputs, cloakrcs.store, cloakrcs.report, skrf, pandas")


def measure(n_angles: int, n_points: int, runs: int) -> dict:
    from cloakrcs.campaign import load_campaign
    from cloakrcs.process import process_campaign

    manifest = ensure_campaign(n_angles, n_points)
    n_files = len(list((manifest.parent / "raw").glob("*.s2p")))
    row = {"size": f"{n_angles}x{n_points}", "files": n_files, "points": n_points, "angles": n_angles,
           "raw_mb": n_files * n_points * 4 * 16 / 2**20}
    for path in (manifest.parent / "raw").iterdir():  # warm the page cache, keep nothing in memory
        path.read_bytes()
    gc.collect()
    row["import"] = median_time(lambda: load_campaign(manifest), runs)  # on a lean parent (pool workers fork it)
    row["plain_import"] = median_time(lambda: plain_import(manifest), runs)
    campaign = load_campaign(manifest)
    row["process"] = median_time(lambda: process_campaign(campaign), runs)
    nets = plain_import(manifest)
    with tempfile.TemporaryDirectory() as tmp:
        row["plain_process"] = median_time(lambda: plain_process(nets, tmp), runs)
    nets = campaign = None  # free them before the subprocess runs

    def ours(tmp, k=[0]):
        k[0] += 1
        return [CLI, "process", str(manifest), "--out", f"{tmp}/out", "--store", f"sqlite:///{tmp}/x{k[0]}.db",
                "--quiet"]

    def plain(tmp):
        return [PY, str(Path(__file__).resolve()), "--plain", str(manifest), f"{tmp}/plain"]

    with tempfile.TemporaryDirectory() as tmp:
        row["whole"] = median_time(lambda: subprocess.run(ours(tmp), check=True), runs)
        row["plain_whole"] = median_time(lambda: subprocess.run(plain(tmp), check=True), runs)
        row["baseline_mb"] = peak_rss_mb([PY, "-c", BASELINE_IMPORTS])
        row["peak_mb"] = peak_rss_mb(ours(tmp))
        row["tree_peak_mb"] = peak_tree_rss_mb(ours(tmp))
        row["plain_peak_mb"] = peak_rss_mb(plain(tmp))
    return row


def print_table(rows: list[dict]) -> None:
    print("\nmedians (s); ratio = plain / cloakrcs; memory in MB above the interpreter baseline after imports")
    head = (f"{'size':>10} {'files':>5} {'raw MB':>7} | {'import':>7} {'plain':>7} {'ratio':>5} | {'process':>7} "
            f"{'plain':>7} {'ratio':>5} | {'whole':>7} {'plain':>7} {'ratio':>5} | {'peak':>6} {'tree':>6} "
            f"{'/raw':>5} {'plain':>6}")
    print(head)
    print("-" * len(head))
    for r in rows:
        b = r["baseline_mb"]
        print(f"{r['size']:>10} {r['files']:>5} {r['raw_mb']:>7.0f} | {r['import']:>7.2f} {r['plain_import']:>7.2f} "
              f"{r['plain_import'] / r['import']:>5.1f} | {r['process']:>7.2f} {r['plain_process']:>7.2f} "
              f"{r['plain_process'] / r['process']:>5.1f} | {r['whole']:>7.2f} {r['plain_whole']:>7.2f} "
              f"{r['plain_whole'] / r['whole']:>5.1f} | {r['peak_mb'] - b:>6.0f} {r['tree_peak_mb'] - b:>6.0f} "
              f"{(r['tree_peak_mb'] - b) / r['raw_mb']:>5.2f} {r['plain_peak_mb'] - b:>6.0f}")
    print(f"interpreter baseline after imports: {rows[0]['baseline_mb']:.0f} MB; peak = largest process "
          "(getrusage), tree = sum over the process and its workers (sampled); /raw = tree / raw complex data")
    if len(rows) > 1:
        print("\ngrowth from the smallest size (x files, x points, x data -> x time, x memory):")
        a = rows[0]
        for r in rows[1:]:
            data = r["files"] * r["points"] / (a["files"] * a["points"])
            print(f"  {r['size']:>10}: files x{r['files'] / a['files']:.1f}, points x{r['points'] / a['points']:.1f}, "
                  f"data x{data:.1f} -> import x{r['import'] / a['import']:.1f}, process "
                  f"x{r['process'] / a['process']:.1f}, whole x{r['whole'] / a['whole']:.1f}, memory "
                  f"x{(r['tree_peak_mb'] - r['baseline_mb']) / (a['tree_peak_mb'] - a['baseline_mb']):.1f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", default="90x401,180x801,360x1601", help="ANGLESxPOINTS,...")
    ap.add_argument("--runs", type=int, default=3, help="runs per median")
    ap.add_argument("--plain", nargs=2, metavar=("MANIFEST", "OUT"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.plain:
        plain_main(*args.plain)
        return 0
    rows = []
    for size in args.sizes.split(","):
        n_angles, n_points = (int(x) for x in size.lower().split("x"))
        rows.append(measure(n_angles, n_points, args.runs))
        print(rows[-1], flush=True)
    print_table(rows)
    return 0


if __name__ == "__main__":
    sys.exit(main())
