"""`cloakrcs report RUN_ID --store URL --out FILE [--png DIR] [--pdf FILE]`: the HTML report of a stored run."""

from __future__ import annotations

import sys

from ..errors import InputError


def register(sub) -> None:
    p = sub.add_parser("report", help="write the self-contained HTML report of a stored run")
    p.add_argument("run_id", type=int, metavar="RUN_ID", help="run number in the store")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.add_argument("--out", required=True, metavar="FILE", help="HTML file to write")
    p.add_argument("--png", metavar="DIR", help="also write each figure as DIR/<figure id>.png (needs kaleido, Chromium)")
    p.add_argument("--pdf", metavar="FILE", help="also print the report to one PDF (needs Chromium)")
    p.set_defaults(func=run)


def load_stored(url_arg: str | None, run_id: int):
    """(result, campaign or None, note) of a stored run; the campaign is optional (raw files may be gone)."""
    try:
        from .. import store
    except ImportError:
        raise InputError("the results store is not available in this installation") from None
    url = store.resolve_url(url_arg or None)
    loaded = store.load_result(url, run_id)
    # load_result gives a dict holding the ProcessingResult (older drafts returned it directly)
    result = loaded["result"] if isinstance(loaded, dict) else loaded
    campaign_id = loaded.get("campaign_id") if isinstance(loaded, dict) else None
    loader = getattr(store, "load_campaign_from_store", None)
    if loader is None or campaign_id is None:
        return result, None, "the store cannot rebuild the campaign: the range profile is omitted"
    try:
        campaign = loader(url, campaign_id, run_id)
    except InputError as exc:
        return result, None, f"campaign not available ({exc}): the range profile is omitted"
    return result, campaign, None


def run(args) -> int:
    from ..report import write_report

    result, campaign, note = load_stored(args.store, args.run_id)
    if note:
        print(f"warning: {note}", file=sys.stderr)
    paths = write_report(result, campaign, args.out, png_dir=args.png, pdf_file=args.pdf)
    print(f"wrote {paths['report']}")
    if "png" in paths:
        print(f"wrote {len(paths['png'])} PNG figure(s) into {args.png}")
    if "pdf" in paths:
        print(f"wrote {paths['pdf']}")
    return 0
