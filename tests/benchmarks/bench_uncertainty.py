"""Monte Carlo honesty study of the uncertainty budget: prints the coverage table (not a test).

Usage: python tests/benchmarks/bench_uncertainty.py [SEEDS]   (default 40 seeds; about 2.5 s a seed)

Per setup (tests/uncertainty_study.py: "moderate" = the sample's sleeves with noise, drift,
clutter and repeats; "deep" = the best sleeve with the noise raised until it sits near the
floor): the number of band-averaged reductions, the share whose truth lies within +/- U (k = 2;
GUM: about 95 %), the bias and RMS error against the noise-free truth, the RMS stated standard
uncertainty and the ratio of the two (near 1 when the budget is honest), and the mean of each
budget component.
"""

import sys
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import uncertainty_study  # noqa: E402

seeds = int(sys.argv[1]) if len(sys.argv) > 1 else 40
t0 = time.perf_counter()
df = uncertainty_study.study(range(100, 100 + seeds))
pd.set_option("display.width", 200)
print(f"{len(df)} reductions from {seeds} seeds x {len(uncertainty_study.SETUPS)} setups in "
      f"{time.perf_counter() - t0:.0f} s")
print(uncertainty_study.summary(df).round(4).to_string())
comps = [c for c in df.columns if c.startswith("u_") and c != "u_db"]
print("\nmean standard uncertainty per component (dB)")
print(df.groupby("setup")[comps].mean().round(4).to_string())
