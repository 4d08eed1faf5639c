"""`cloakrcs revision note|set|show`: notes and design parameters of a prototype's revisions."""

from __future__ import annotations

import json

from ..errors import InputError
from .history import format_table


def _store_option(p) -> None:
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")


def register(sub) -> None:
    p = sub.add_parser("revision", help="attach notes and design parameters to a revision")
    actions = p.add_subparsers(dest="action", metavar="ACTION", parser_class=type(p))
    note = actions.add_parser("note", help="replace a revision's notes")
    note.add_argument("prototype", metavar="PROTOTYPE")
    note.add_argument("revision", metavar="REVISION")
    note.add_argument("text", metavar="TEXT")
    _store_option(note)
    setp = actions.add_parser("set", help="set design parameters KEY=VALUE")
    setp.add_argument("prototype", metavar="PROTOTYPE")
    setp.add_argument("revision", metavar="REVISION")
    setp.add_argument("pairs", metavar="KEY=VALUE", nargs="+")
    _store_option(setp)
    cur = actions.add_parser("current", help="choose which run is a revision's current one (default: the newest)")
    cur.add_argument("prototype", metavar="PROTOTYPE")
    cur.add_argument("revision", metavar="REVISION")
    cur.add_argument("run_id", metavar="RUN_ID", nargs="?", type=int,
                     help="a stored run holding metrics of the revision (see `cloakrcs history --all-runs`)")
    cur.add_argument("--newest", action="store_true", help="forget the choice: the newest run is current again")
    _store_option(cur)
    show = actions.add_parser("show", help="list revisions with their date, notes and parameters")
    show.add_argument("prototype", metavar="PROTOTYPE", nargs="?")
    show.add_argument("--json", action="store_true", help="print the revisions as a JSON list")
    _store_option(show)
    p.set_defaults(func=run)


def parse_pairs(pairs: list[str]) -> list[tuple[str, str]]:
    out = []
    for pair in pairs:
        key, sep, value = pair.partition("=")
        if not sep or not key.strip():
            raise InputError(f"design parameter {pair!r}: expected KEY=VALUE")
        if any(k == key.strip() for k, _ in out):
            raise InputError(f"design parameter {key.strip()!r} is given twice: give each key once")
        out.append((key.strip(), value.strip()))
    return out


def format_revisions(rows: list[dict]) -> str:
    if not rows:
        return "no revisions in the store"
    body = [[r["prototype"], r["revision"], r["date"] or "-",
             ", ".join(f"{k}={v}" for k, v in r["parameters"].items()) or "-",
             ", ".join(r["campaigns"]) or "-", "newest" if r.get("current_run") is None else str(r["current_run"]),
             r["notes"] or "-"] for r in rows]
    return format_table(["prototype", "revision", "date", "parameters", "campaigns", "current run", "notes"], body)


def run(args) -> int:
    from .. import store

    url = store.resolve_url(args.store) if getattr(args, "action", None) else None
    if args.action == "note":
        store.set_revision_note(url, args.prototype, args.revision, args.text)
    elif args.action == "set":
        store.set_revision_parameters(url, args.prototype, args.revision, dict(parse_pairs(args.pairs)))
    elif args.action == "current":
        if (args.run_id is None) == (not args.newest):
            raise InputError("revision current: give RUN_ID or --newest (not both)")
        store.set_current_run(url, args.prototype, args.revision, None if args.newest else args.run_id)
        print(f"{args.prototype} {args.revision}: current run "
              + ("is the newest again" if args.newest else f"is run {args.run_id}"))
    elif args.action == "show":
        rows = store.revision_info(url, args.prototype)
        print(json.dumps(rows, indent=2) if args.json else format_revisions(rows))
    else:
        raise InputError("revision: choose an action: note, set, current or show")
    return 0
