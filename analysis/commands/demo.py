"""`cloakrcs demo`: process the invented sample campaign into the store (once) and serve the dashboard."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import InputError

SAMPLE = Path(__file__).resolve().parents[2] / "sample_measurements" / "manifest.toml"


def register(sub) -> None:
    p = sub.add_parser("demo", help="process the sample campaign into the store and serve the dashboard")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user file)")
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default loopback only)")
    p.add_argument("--port", type=int, default=8050)
    p.add_argument("--no-serve", action="store_true", help="process (if needed) and print, do not serve")
    p.set_defaults(func=run)


def run(args) -> int:
    from .. import store
    from ..campaign import load_campaign
    from ..pipeline import run_process

    if not SAMPLE.exists():
        raise InputError("sample campaign not found (run from a clone of the repository)", SAMPLE)
    url = store.resolve_url(args.store)
    campaign = load_campaign(SAMPLE)
    run_id = store.find_run_for_campaign(url, campaign)
    if run_id is None:
        out = store.data_dir() / "demo-output"
        print(f"processing the sample campaign into {url} (outputs in {out}) ...", file=sys.stderr)
        outcome = run_process(SAMPLE, out, store_url=url, quiet=not sys.stderr.isatty(), campaign=campaign)
        print(outcome.describe())
    else:
        print(f"the sample campaign is already stored (run {run_id}) in {url}", file=sys.stderr)
    if args.no_serve:
        return 0
    from argparse import Namespace

    from .serve import run as serve

    return serve(Namespace(store=url, host=args.host, port=args.port))
