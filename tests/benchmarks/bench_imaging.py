"""Imaging benchmark: a 361-angle x 1601-point polar-format image (goal < 1 s) and back-projection.

Prints wall times (median of repeats) with the machine load (`uptime`): the machine is shared.
Run: .venv/bin/python tests/benchmarks/bench_imaging.py
"""

from __future__ import annotations

import subprocess
import time

import numpy as np

from cloakrcs import imaging, scatterers

POINTS = [{"x_m": 0.10, "y_m": 0.05, "rcs_dbsm": -20.0}, {"x_m": -0.12, "y_m": -0.10, "rcs_dbsm": -30.0},
          {"x_m": 0.0, "y_m": 0.0, "rcs_dbsm": -14.0}]


def _time(fn, repeats):
    out, times = None, []
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return out, float(np.median(times))


def main() -> None:
    f = np.linspace(2e9, 18e9, 1601)
    angles = np.linspace(-18.0, 18.0, 361)  # 0.1 deg steps over a 36 deg sector
    amp = scatterers.points_amplitude(POINTS, f, angles, "VV")
    print("load:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
    for method, repeats, extent in (("polar", 5, None), ("polar", 5, (0.6, 0.6)),
                                    ("backprojection", 1, (0.6, 0.6))):
        s = imaging.ImageSettings(method=method, extent_m=extent)
        img, t = _time(lambda: imaging.make_image(amp, f, angles, s, gate_span_m=0.5), repeats)
        cs, tc = _time(lambda: imaging.scattering_centres(img, 10), 1)
        errs = []
        for p in POINTS:
            c = min(cs, key=lambda c: (c["down_range_m"] - p["x_m"]) ** 2 + (c["cross_range_m"] - p["y_m"]) ** 2)
            errs.append(abs(c["rcs_dbsm"] - p["rcs_dbsm"]))
        print(f"{method:15s} extent {img.settings.extent_m[0]:.2f} x {img.settings.extent_m[1]:.2f} m, "
              f"{img.image.shape[0]} x {img.image.shape[1]} px: image {t:.3f} s (median of {repeats}), "
              f"CLEAN {tc:.3f} s; largest centre error {max(errs):.2f} dB")
    print("load:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())


if __name__ == "__main__":
    main()
