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
        out.append((key.strip(), value.strip()))
    return out


def format_revisions(rows: list[dict]) -> str:
    if not rows:
        return "no revisions in the store"
    body = [[r["prototype"], r["revision"], r["date"] or "-",
             ", ".join(f"{k}={v}" for k, v in r["parameters"].items()) or "-",
             ", ".join(r["campaigns"]) or "-", r["notes"] or "-"] for r in rows]
    return format_table(["prototype", "revision", "date", "parameters", "campaigns", "notes"], body)


def run(args) -> int:
    from .. import store

    url = store.resolve_url(args.store) if getattr(args, "action", None) else None
    if args.action == "note":
        store.set_revision_note(url, args.prototype, args.revision, args.text)
    elif args.action == "set":
        store.set_revision_parameters(url, args.prototype, args.revision, dict(parse_pairs(args.pairs)))
    elif args.action == "show":
        rows = store.revision_info(url, args.prototype)
        print(json.dumps(rows, indent=2) if args.json else format_revisions(rows))
    else:
        raise InputError("revision: choose an action: note, set or show")
    return 0
