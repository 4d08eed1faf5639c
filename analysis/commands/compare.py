"""`cloakrcs compare REV_A REV_B`: B - A of the band-averaged reduction, with its uncertainty."""

from __future__ import annotations

import json

from .history import band_text, format_table, sector_text


def register(sub) -> None:
    p = sub.add_parser("compare", help="difference between two revisions per polarization (B - A)")
    p.add_argument("rev_a", metavar="REV_A", help="first revision label")
    p.add_argument("rev_b", metavar="REV_B", help="second revision label")
    p.add_argument("--prototype", help="prototype the revisions belong to (needed when the label is ambiguous)")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.add_argument("--json", action="store_true", help="print the rows as a JSON list")
    p.add_argument("--allow-different", action="store_true",
                   help="compare runs whose band, sector or processing settings differ (the output says so)")
    p.set_defaults(func=run)


def _f(x, fmt=".2f") -> str:
    return "-" if x is None else format(x, fmt)


def format_compare(rows: list[dict]) -> str:
    r0 = rows[0]
    head = (f"{r0['prototype']}: {r0['revision_b']} - {r0['revision_a']} "
            f"(uncertainty of the difference sqrt(U_A^2 + U_B^2), runs taken as independent)\n"
            f"band {band_text(r0.get('band_a_hz'))} GHz, sector {sector_text(r0.get('sector_a_deg'))} deg")
    if r0.get("settings_differ"):
        head += (f" for {r0['revision_a']}; band {band_text(r0.get('band_b_hz'))} GHz, sector "
                 f"{sector_text(r0.get('sector_b_deg'))} deg for {r0['revision_b']}\n"
                 f"WARNING: compared with --allow-different although the runs were processed differently: "
                 f"{'; '.join(r0['settings_differ'])}")
    header = ["pol", f"{r0['revision_a']} (dB)", f"{r0['revision_b']} (dB)", "difference (dB)",
              "bandwidth diff (MHz)", "worst angle diff (dB)", "runs"]
    body = []
    for r in rows:
        bw = "-" if r["bandwidth_difference_hz"] is None else f"{r['bandwidth_difference_hz'] / 1e6:+.0f}"
        body.append([r["polarization"],
                     f"{_f(r['band_reduction_a_db'])} +/- {_f(r['uncertainty_a_db'])}",
                     f"{_f(r['band_reduction_b_db'])} +/- {_f(r['uncertainty_b_db'])}",
                     f"{_f(r['difference_db'], '+.2f')} +/- {_f(r['difference_uncertainty_db'])}",
                     bw, _f(r["worst_angle_difference_db"], "+.2f"), f"{r['run_a']}, {r['run_b']}"])
    return head + "\n" + format_table(header, body, right={1, 2, 3, 4, 5})


def run(args) -> int:
    from .. import store

    rows = store.compare(store.resolve_url(args.store), args.rev_a, args.rev_b, prototype=args.prototype,
                         allow_different=args.allow_different)
    print(json.dumps(rows, indent=2) if args.json else format_compare(rows))
    return 0
