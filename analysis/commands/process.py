"""`cloakrcs process MANIFEST --out DIR`: calibrated RCS, checks, floor and cloak metrics."""

from __future__ import annotations

import sys

from ..errors import InputError
from ..metrics import parse_sector


def add_processing_options(p) -> None:
    """Options shared by `process` and `process-many`."""
    p.add_argument("--threshold-db", type=float, default=10.0, help="reduction threshold for the bandwidth (dB)")
    p.add_argument("--floor-margin-db", type=float, default=10.0,
                   help="points less than this above the floor are floor-limited (dB)")
    p.add_argument("--check-tolerance-db", type=float, default=1.0, help="check-target tolerance (dB)")
    p.add_argument("--coverage-k", type=float, default=2.0,
                   help="coverage factor of every expanded uncertainty (default 2: about 95 %% for a normal "
                        "distribution)")
    p.add_argument("--sector-deg", help="angular sector START:STOP in degrees, wrapped to (-180, 180]")
    p.add_argument("--band-ghz", help="reporting band START:STOP in GHz (default: the manifest's [band])")
    p.add_argument("--trim-ghz", type=float, help="band-edge trim after gating (default: c0/(2 span))")
    p.add_argument("--window", choices=("kaiser", "hann", "rect"), help="override the manifest's window")
    p.add_argument("--kaiser-beta", type=float, help="override the manifest's Kaiser beta")
    p.add_argument("--auto-gate", action="store_true", help="align gate centres on the reference's echo")
    p.add_argument("--align-angles", action="store_true",
                   help="resample each subject onto its baseline's angles by the estimated mounting offset")
    p.add_argument("--drift-correction", action="store_true",
                   help="fit the background's gain and phase to each sweep outside the gate before subtracting")
    p.add_argument("--strict", action="store_true", help="exit with status 3 when a check target fails")
    p.add_argument("--quiet", action="store_true", help="no progress bar (the results are still printed)")
    p.add_argument("--percentiles", default="10,90",
                   help="percentiles of the per-point reduction and RCS over the sector and band, besides the "
                        "median (comma-separated, default 10,90)")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.add_argument("--no-store", action="store_true", help="do not record the run in the store")


def register(sub) -> None:
    p = sub.add_parser("process", help="process a campaign into calibrated RCS and cloak metrics")
    p.add_argument("manifest", help="campaign manifest (TOML)")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--no-report", action="store_true", help="skip report.html")
    add_processing_options(p)
    p.set_defaults(func=run)


# range of every numeric option: (lowest, highest, unit), both ends allowed; NaN and infinities never
OPTION_RANGES = {
    "threshold_db": (-100.0, 100.0, "dB"), "floor_margin_db": (0.0, 100.0, "dB"),
    "check_tolerance_db": (0.0, 100.0, "dB"), "coverage_k": (0.1, 10.0, ""), "trim_ghz": (0.0, 1e4, "GHz"), "kaiser_beta": (0.0, 50.0, ""),
    "band_ghz": (1e-9, 1e4, "GHz"), "sector_deg": (-360.0, 360.0, "deg"),
}


def bounded_option(name: str, value):
    """``value`` (a number, or a tuple of numbers) when finite and within OPTION_RANGES[name]; else InputError."""
    if value is None:
        return None
    lo, hi, unit = OPTION_RANGES[name]
    for v in (value if isinstance(value, tuple) else (value,)):
        if not lo <= v <= hi:  # NaN fails every comparison
            unit_text = f" {unit}" if unit else ""
            raise InputError(f"--{name.replace('_', '-')} {v:g}: must be a number in [{lo:g}, {hi:g}]{unit_text}")
    return value


def settings_from_args(args):
    from ..process import ProcessSettings

    band = None
    if args.band_ghz:
        try:
            lo, hi = (float(x) for x in args.band_ghz.split(":"))
        except ValueError:
            raise InputError(f"--band-ghz {args.band_ghz!r}: expected START:STOP in GHz") from None
        if lo >= hi:
            raise InputError(f"--band-ghz {args.band_ghz!r}: START must be below STOP (the band is START:STOP in GHz)")
        bounded_option("band_ghz", (lo, hi))
        band = (lo * 1e9, hi * 1e9)
    for name in ("threshold_db", "floor_margin_db", "check_tolerance_db", "trim_ghz", "kaiser_beta", "coverage_k"):
        bounded_option(name, getattr(args, name))
    try:
        pct = tuple(float(x) for x in str(args.percentiles).split(",") if x.strip())
    except ValueError:
        raise InputError(f"--percentiles {args.percentiles!r}: expected numbers such as 10,90") from None
    if any(not 0 <= q <= 100 for q in pct):
        raise InputError(f"--percentiles {args.percentiles!r}: each must lie in 0..100")
    return ProcessSettings(
        percentiles=pct,
        threshold_db=args.threshold_db, floor_margin_db=args.floor_margin_db,
        check_tolerance_db=args.check_tolerance_db,
        sector_deg=bounded_option("sector_deg", parse_sector(args.sector_deg)) if args.sector_deg else None,
        auto_gate=args.auto_gate, align_angles=args.align_angles, drift_correction=args.drift_correction,
        trim_hz=None if args.trim_ghz is None else args.trim_ghz * 1e9, band_hz=band,
        window=args.window, kaiser_beta=args.kaiser_beta, coverage_k=args.coverage_k)


def run(args) -> int:
    from ..pipeline import run_process

    settings = settings_from_args(args)
    outcome = run_process(args.manifest, args.out, settings, store_url=None if args.no_store else (args.store or ""),
                          report=not args.no_report, quiet=args.quiet or not sys.stderr.isatty())
    return report_outcome(outcome, args.strict)


def report_outcome(outcome, strict: bool) -> int:
    """Print warnings (stderr), the results (stdout) and failed checks last, where they are seen; exit status."""
    from ..process import check_failure_text

    failed = outcome.result.failed_checks
    texts = {check_failure_text(c) for c in failed}
    for w in outcome.result.warnings:
        if w not in texts:
            print(f"warning: {w}", file=sys.stderr)
    print(outcome.describe())
    sys.stdout.flush()
    for c in failed:
        print(f"*** {check_failure_text(c)} ***", file=sys.stderr)
    if failed and not strict:
        print("(exit status 0: use --strict to make a failed check target exit with status 3)", file=sys.stderr)
    return 3 if (failed and strict) else 0
