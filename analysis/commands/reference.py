"""`cloakrcs reference SHAPE [dimensions] --freq-ghz START:STOP:POINTS [--angle-deg ...] [--pol VV]`:
print the analytic RCS of a reference shape as CSV (angle outer, frequency inner)."""

from __future__ import annotations

import sys

import numpy as np

from ..errors import InputError
from ..references import SHAPES, rcs_dbsm, reference_amplitude, required_keys, shape_is_angle_independent_peak
from ..spans import parse_span

# flag -> manifest key; every flag is optional here, reference_amplitude names what is missing
_DIMENSIONS = ("radius_m", "width_m", "height_m", "length_m", "fold_m", "face_m", "roll_deg",
               "edge_m", "orientation", "kind", "file")
_TEXT = ("orientation", "kind", "file")


def register(sub) -> None:
    p = sub.add_parser("reference", help="analytic RCS of a reference shape, as CSV on stdout")
    p.add_argument("shape", help=f"one of {', '.join(SHAPES)}")
    for key in _DIMENSIONS:
        p.add_argument("--" + key.replace("_", "-"), dest=key, default=None,
                       help=f"manifest key {key}" + ("" if key in _TEXT else " (number)"))
    p.add_argument("--freq-ghz", required=True,
                   help="START:STOP:POINTS (a count) or START:STOP/STEP in GHz, both ends included, or one value")
    p.add_argument("--angle-deg", default="0",
                   help="START:STOP:POINTS (a count) or START:STOP/STEP in degrees, both ends included, or one "
                        "value (default 0). A trihedral's theory is its peak only, the same at every angle")
    p.add_argument("--pol", default="VV", help="HH, VV, HV or VH (default VV)")
    p.set_defaults(func=run)


def _spec(args) -> dict:
    shape = args.shape
    required_keys(shape)  # InputError for an unknown shape
    spec = {"shape": shape}
    for key in _DIMENSIONS:
        value = getattr(args, key, None)
        if value is None:
            continue
        if key not in _TEXT:
            try:
                value = float(value)
            except ValueError:
                raise InputError(f"--{key.replace('_', '-')}: not a number: {value!r}") from None
        spec[key] = value
    return spec


def run(args) -> int:
    spec = _spec(args)
    freq_hz = parse_span(args.freq_ghz, "--freq-ghz") * 1e9
    angle = parse_span(args.angle_deg, "--angle-deg")
    pol = str(args.pol).strip().upper()
    if shape_is_angle_independent_peak(spec) and len(angle) > 1:
        print(f"warning: the {spec['shape']} model is angle-independent (its peak RCS at every angle); "
              f"the {len(angle)} angles all get the same value", file=sys.stderr)
    amp = reference_amplitude(spec, freq_hz, angle, pol, base_dir=".")
    db = rcs_dbsm(amp)
    phase = np.degrees(np.angle(amp))
    out = sys.stdout
    out.write("frequency_hz,angle_deg,polarization,rcs_dbsm,phase_deg\n")
    for i, t in enumerate(angle):
        for j, f in enumerate(freq_hz):
            out.write(f"{f:.10g},{t:.10g},{pol},{db[i, j]:.10g},{phase[i, j]:.10g}\n")
    return 0
