"""`cloakrcs export RUN_ID --format netcdf|csv|touchstone --out PATH`: a stored run for other tools."""

from __future__ import annotations


def register(sub) -> None:
    from ..export import FORMATS

    p = sub.add_parser("export", help="write a stored run as NetCDF, CSV or Touchstone files for other tools")
    p.add_argument("run_id", type=int, metavar="RUN_ID", help="run number in the store")
    p.add_argument("--format", required=True, choices=FORMATS, dest="fmt",
                   help="netcdf: one CF-style file; csv: a folder of CSV tables; touchstone: a folder of "
                        "one-port files, one per target, polarization and angle")
    p.add_argument("--out", required=True, metavar="PATH", help="the .nc file (netcdf) or the folder (csv, touchstone)")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.set_defaults(func=run)


def run(args) -> int:
    from .. import store
    from ..export import export_run

    result = store.load_result(store.resolve_url(args.store or None), args.run_id)["result"]
    paths = export_run(result, args.fmt, args.out)
    where = paths[0] if args.fmt == "netcdf" else args.out
    print(f"wrote {len(paths)} file(s) of run {args.run_id} ({args.fmt}) to {where}")
    return 0
