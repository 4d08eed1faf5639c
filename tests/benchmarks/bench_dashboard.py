"""Server-side latency of every dashboard callback: the sample campaign and a 360 x 1601 x 2 one.

    .venv/bin/python tests/benchmarks/bench_dashboard.py [--repeat 5] [--big-dir DIR] [--no-big]

The large campaign is simulated (cloakrcs.simulate) from the sample config with a 1-degree turn
and 1601 points, keeping the bare target and one cloaked revision, into ``--big-dir`` (reused
when it is already there). Each callback is timed cold (first call) and as the median of
``--repeat`` further calls, including the JSON serialisation Dash does before sending.
"""

from __future__ import annotations

import argparse
import copy
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from plotly.io.json import to_json_plotly  # noqa: E402

from cloakrcs.campaign import load_campaign  # noqa: E402
from cloakrcs.process import process_campaign  # noqa: E402
from cloakrcs.simulate import load_simulation_config, simulate_campaign  # noqa: E402
from cloakrcs.dashboard.callbacks import Views  # noqa: E402
from cloakrcs.dashboard.data import MemorySource  # noqa: E402


def big_campaign(folder: Path) -> Path:
    manifest = folder / "manifest.toml"
    if manifest.exists():
        return manifest
    cfg = copy.deepcopy(load_simulation_config(ROOT / "sample_measurements" / "config.toml"))
    cfg["sweep"]["points"] = 1601
    keep = {"empty", "cal-sphere", "check-sphere", "bare", "r3"}
    cfg["target"] = [t for t in cfg["target"] if t["name"] in keep]
    angles = [float(a) for a in range(360)]
    for t in cfg["target"]:
        if t["role"] == "subject" and t["name"] != "check-sphere":
            t["angles"] = angles
    simulate_campaign(cfg, folder)
    return manifest


def _serialise(out):
    outs = out if isinstance(out, tuple) else (out,)
    return sum(len(to_json_plotly(o)) for o in outs)  # what Dash does before sending


def time_calls(views: Views, run_id: int, repeat: int) -> list[tuple[str, float, float, int]]:
    views.source.result(run_id)  # warm the cache
    tg = views.gate_targets(run_id)
    gc = views.gate_target_controls(run_id, tg[1])
    rc = views.rcs_controls(run_id)
    rd = views.reduction_controls(run_id)
    pol = rc[3]
    calls = [
        ("campaign summary", views.campaign_summary, (run_id,)),
        ("campaign: check target", views.campaign_check, (run_id, pol)),
        ("campaign: floor", views.campaign_floor, (run_id, pol)),
        ("campaign: angle coverage", views.campaign_coverage, (run_id,)),
        ("gate controls", views.gate_target_controls, (run_id, tg[1])),
        ("range profile + gate", views.range_profile, (run_id, tg[1], gc[1], gc[3], gc[4] + 0.01, gc[5], "kaiser")),
        ("RCS controls", views.rcs_controls, (run_id,)),
        ("RCS vs frequency", views.rcs_frequency, (run_id, rc[1], pol, rc[5])),
        ("RCS polar", views.rcs_polar, (run_id, rc[1], pol, rc[7])),
        ("RCS map", views.rcs_map, (run_id, rc[9], pol)),
        ("reduction view", views.reduction, (run_id, rd[1], rd[3])),
        ("revisions", views.revisions, (run_id, "band_reduction_db")),
        ("RF safety", views.safety, (30, 20, 1.0, 10.0, "general public")),
    ]
    rows = []
    for name, fn, args in calls:
        views.clear_cache()
        t0 = time.perf_counter()
        size = _serialise(fn(*args))
        cold = time.perf_counter() - t0
        times = []
        for _ in range(repeat):
            views.clear_cache()  # time the work, not the figure cache
            t0 = time.perf_counter()
            _serialise(fn(*args))
            times.append(time.perf_counter() - t0)
        rows.append((name, 1000 * cold, 1000 * statistics.median(times), size))
    # background reprocessing: time to a finished preview (runs in a thread in the app)
    t0 = time.perf_counter()
    job = views.start_regate(run_id, tg[1], gc[4] + 0.01, gc[5], "kaiser", "*")
    while views.job_status(job)[1] == "running":
        time.sleep(0.01)
    rows.append(("reprocess (background job)", 1000 * (time.perf_counter() - t0), float("nan"), 0))
    t0 = time.perf_counter()
    size = _serialise(views.preview(job, tg[1], gc[1], gc[3]))
    rows.append(("preview after reprocess", 1000 * (time.perf_counter() - t0), float("nan"), size))
    return rows


def report(label: str, rows) -> None:
    print(f"\n{label}")
    print(f"{'callback':32s} {'cold ms':>9s} {'median ms':>10s} {'sent kB':>8s}")
    for name, cold, med, size in rows:
        print(f"{name:32s} {cold:9.1f} {med:10.1f} {size / 1024:8.1f}")


def bench(manifest: Path, label: str, repeat: int) -> None:
    t0 = time.perf_counter()
    campaign = load_campaign(manifest)
    t1 = time.perf_counter()
    result = process_campaign(campaign)
    t2 = time.perf_counter()
    source = MemorySource()
    run_id = source.add(campaign, result)
    cube = next(c for c in campaign.cubes.values() if c.spec.role == "subject" and c.data.sizes["angle"] > 1)
    shape = "x".join(str(cube.data.sizes[d]) for d in ("angle", "frequency", "polarization"))
    print(f"\n[{label}] {shape} (angles x points x polarizations): load {t1 - t0:.2f} s, process {t2 - t1:.2f} s")
    report(label, time_calls(Views(source), run_id, repeat))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--big-dir", type=Path, default=Path(tempfile.gettempdir()) / "cloakrcs-bench-360x1601")
    ap.add_argument("--no-big", action="store_true")
    args = ap.parse_args(argv)
    bench(ROOT / "sample_measurements" / "manifest.toml", "sample campaign", args.repeat)
    if not args.no_big:
        t0 = time.perf_counter()
        manifest = big_campaign(args.big_dir)
        print(f"\n(large campaign ready in {time.perf_counter() - t0:.1f} s at {args.big_dir})")
        bench(manifest, "large campaign", args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
