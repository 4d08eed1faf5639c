"""Monte Carlo honesty study of the uncertainty budget (shared by tests/test_uncertainty.py and
tests/benchmarks/bench_uncertainty.py).

Simulated campaigns (cloakrcs.simulate: noise, sweep-to-sweep drift on everything the antennas see,
chamber clutter, a support echo that changes with the target, repeated background and reference
sweeps) are processed; each band-averaged reduction is compared with the noise-free truth over the
same reporting band and angles. GUM (JCGM 100:2008, 6.2 and 6.3): with k = 2, about 95 % of results
should lie within +/- U of the truth, and the RMS error should match the RMS standard uncertainty.
"""

from __future__ import annotations

import copy
import tempfile
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd

from cloakrcs.campaign import load_campaign
from cloakrcs.process import process_campaign
from cloakrcs.simulate import simulate_campaign

ROOT = Path(__file__).resolve().parents[1]

SETUPS = {
    # the sample's chamber and sleeves, fewer angles and points
    "moderate": {"noise_db": -60.0, "subjects": ("r1", "r3")},
    # noise raised by 18 dB: the best sleeve sits within a few dB of the floor over much of the band
    "deep": {"noise_db": -42.0, "subjects": ("r3",)},
}


def config(setup: str, seed: int) -> dict:
    cfg = tomllib.loads((ROOT / "sample_measurements" / "config.toml").read_text())
    cfg = copy.deepcopy(cfg)
    s = SETUPS[setup]
    cfg["seed"] = 1000 + seed
    cfg["sweep"]["points"] = 201
    cfg["angles"] = {"start": 0.0, "stop": 345.0, "step": 15.0}
    cfg["noise"] = {"level_db": s["noise_db"]}
    cfg["drift"] = {"amplitude_db": 0.03, "phase_deg": 0.3, "length_m": 1e-5}
    keep = {"empty", "cal-sphere", "bare", *s["subjects"]}
    cfg["target"] = [t for t in cfg["target"] if t["name"] in keep]
    for t in cfg["target"]:
        if t["name"] == "empty":
            t["repeats"] = 2
        t.pop("mount_deg", None)
    return cfg


def run(setup: str, seed: int) -> list[dict]:
    """One campaign: a row per (subject, polarization) with the error against the truth and the budget."""
    with tempfile.TemporaryDirectory() as d:
        sim = simulate_campaign(config(setup, seed), d)
        result = process_campaign(load_campaign(sim.manifest_path))
    f = sim.frequency_hz
    lo, hi = result.settings["reporting_band_hz"]
    band = (f >= lo - 1) & (f <= hi + 1)
    rows = []
    for m in result.metrics:
        sb = np.abs(sim.amplitudes[m["baseline"]][m["polarization"]]) ** 2
        ss = np.abs(sim.amplitudes[m["subject"]][m["polarization"]]) ** 2
        truth = 10 * np.log10(sb[:, band].sum() / ss[:, band].sum())
        b = m["uncertainty_budget"]["band_reduction_db"]
        rows.append({"setup": setup, "seed": seed, "subject": m["subject"], "polarization": m["polarization"],
                     "reduction_db": m["band_reduction_db"], "truth_db": truth,
                     "error_db": m["band_reduction_db"] - truth, "u_db": b["combined_u_db"],
                     "expanded_db": b["expanded_u_db"], "k": b["coverage_k"], "bound": m["bound"],
                     **{f"u_{c['component']}": c["u_db"] for c in b["components"]}})
    return rows


def study(seeds, setups=tuple(SETUPS)) -> pd.DataFrame:
    return pd.DataFrame([r for setup in setups for seed in seeds for r in run(setup, seed)])


def summary(df: pd.DataFrame) -> pd.DataFrame:
    """Per setup: cases, coverage of +/- U, bias, RMS error, RMS u and their ratio."""
    def agg(g):
        return pd.Series({"cases": len(g), "coverage": float(np.mean(np.abs(g.error_db) <= g.expanded_db)),
                          "bias_db": g.error_db.mean(), "rms_error_db": float(np.sqrt(np.mean(g.error_db ** 2))),
                          "rms_u_db": float(np.sqrt(np.mean(g.u_db ** 2)))})
    out = df.groupby("setup").apply(agg, include_groups=False)
    out.loc["all"] = agg(df)
    out["ratio"] = out.rms_error_db / out.rms_u_db
    return out
