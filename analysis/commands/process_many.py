"""`cloakrcs process-many MANIFEST... --out-root DIR`: many campaigns in parallel (local or Dask)."""

from __future__ import annotations

import sys

from ..errors import InputError
from .process import add_processing_options, settings_from_args


def register(sub) -> None:
    p = sub.add_parser("process-many", help="process many campaigns in parallel (local processes or a Dask cluster)")
    p.add_argument("manifests", nargs="+", metavar="MANIFEST", help="campaign manifests or glob patterns ('**' too)")
    p.add_argument("--out-root", required=True, help="outputs go into OUT_ROOT/<campaign name>/")
    p.add_argument("--workers", type=int, help="local worker processes (default: the core count)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="dask.distributed scheduler, e.g. tcp://host:8786")
    p.add_argument("--no-report", action="store_true", help="skip report.html")
    add_processing_options(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from ..batch import expand_manifests, process_many
    from ..process import check_failure_text

    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be at least 1, got {args.workers}")
    settings = settings_from_args(args)
    manifests = expand_manifests(args.manifests)
    url = None
    if not args.no_store:
        from .. import store

        url = store.resolve_url(args.store or None)

    def report(outcome) -> None:
        if outcome.ok:
            stored = f" (run {outcome.run_id})" if outcome.run_id is not None else ""
            sector = outcome.result.settings.get("sector_contents")
            print(f"ok      {outcome.name}: {outcome.out_dir}{stored}" + (f"; sector holds {sector}" if sector else ""))
            for c in outcome.result.failed_checks:
                print(f"*** {outcome.name}: {check_failure_text(c)} ***", file=sys.stderr)
        else:
            print(f"FAILED  {outcome.manifest}: {outcome.error}", file=sys.stderr)

    outcomes = process_many(manifests, args.out_root, settings, workers=args.workers, scheduler=args.scheduler,
                            store_url=url, report=not args.no_report, on_done=report)
    failed = [o for o in outcomes if not o.ok]
    checks = [c for o in outcomes if o.ok for c in o.result.checks if not c["passed"]]
    print(f"{len(outcomes) - len(failed)} of {len(outcomes)} campaigns processed")
    if failed:
        return 2
    return 3 if (checks and args.strict) else 0
