"""Point scatterers: isotropic points fixed on the turntable (the simulator's known truth for imaging).

A point i at body position (x_i, y_i) (m) with RCS sigma_i and phase phi_i has the
amplitude (m)

    A(f, theta) = sum_i sqrt(sigma_i) exp(+j phi_i) exp(-j 2 k (x_i cos t - y_i sin t)),

t = theta - mount_deg, k = 2 pi f / c0, exp(+j w t) convention, referred to the turntable
axis. Body coordinates are the image coordinates of a sector centred on turntable angle
mount_deg (README, "Imaging"): x positive away from the antenna, y positive on the side that
moves towards the antenna as the turntable angle increases. Co-polarized channels (HH, VV)
carry the same amplitude (as a small sphere does); cross-polarized ones are zero.

TOML: ``scatterers = [{ x_m = 0.05, y_m = -0.02, rcs_dbsm = -25.0, phase_deg = 0.0 }, ...]``.
"""

from __future__ import annotations

import math

import numpy as np

from .constants import C0
from .errors import InputError

POINT_KEYS = {"x_m", "y_m", "rcs_dbsm", "phase_deg"}


def parse_points(value, what: str = "scatterers") -> list[dict]:
    """Checked list of points {x_m, y_m, rcs_dbsm, phase_deg} from TOML (InputError on a bad entry)."""
    if not isinstance(value, list) or not value:
        raise InputError(f"{what} must be a non-empty array of tables {{x_m, y_m, rcs_dbsm[, phase_deg]}}")
    out = []
    for i, p in enumerate(value):
        label = f"{what}[{i}]"
        if not isinstance(p, dict):
            raise InputError(f"{label} must be a table {{x_m, y_m, rcs_dbsm[, phase_deg]}}")
        unknown = sorted(set(p) - POINT_KEYS)
        if unknown:
            raise InputError(f"{label}: unknown key '{unknown[0]}' (known: {', '.join(sorted(POINT_KEYS))})")
        point = {}
        for key in ("x_m", "y_m", "rcs_dbsm", "phase_deg"):
            v = p.get(key, 0.0 if key == "phase_deg" else None)
            if v is None:
                raise InputError(f"{label}: missing key '{key}'")
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise InputError(f"{label}: '{key}' must be a finite number, got {v!r}")
            point[key] = float(v)
        out.append(point)
    return out


def points_amplitude(points: list[dict], frequency_hz, angle_deg, polarization, mount_deg: float = 0.0) -> np.ndarray:
    """Complex amplitude (na, nf) in m of the points (module docstring); zero for HV and VH."""
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    t = np.deg2rad(np.atleast_1d(np.asarray(angle_deg, dtype=float)) - float(mount_deg))[:, None]
    out = np.zeros((t.size, f.size), complex)
    if str(polarization).upper() not in ("HH", "VV"):
        return out
    k = 2 * np.pi * f[None, :] / C0
    for p in points:
        a = math.sqrt(10 ** (p["rcs_dbsm"] / 10)) * np.exp(1j * math.radians(p.get("phase_deg", 0.0)))
        out += a * np.exp(-2j * k * (p["x_m"] * np.cos(t) - p["y_m"] * np.sin(t)))
    return out
