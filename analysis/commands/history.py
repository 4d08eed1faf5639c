"""`cloakrcs history [PROTOTYPE]`: cloak metrics per revision and polarization, in revision order."""

from __future__ import annotations

import json


def register(sub) -> None:
    p = sub.add_parser("history", help="cloak metrics of every revision of a prototype, in revision order")
    p.add_argument("prototype", nargs="?", help="prototype name (default: every prototype)")
    p.add_argument("--store", metavar="URL", help="results store (default: CLOAKRCS_STORE or the per-user SQLite file)")
    p.add_argument("--json", action="store_true", help="print the rows as a JSON list")
    p.add_argument("--all-runs", action="store_true", help="every processing run, not only each campaign's latest")
    p.add_argument("--centres", action="store_true",
                   help="also the scattering centres tracked across revisions (README, Imaging)")
    p.set_defaults(func=run)


def _f(x, fmt: str) -> str:
    return "-" if x is None else format(x, fmt)


def format_table(header: list[str], rows: list[list[str]], right: set[int] = frozenset()) -> str:
    """An aligned plain-text table (columns in ``right`` right-aligned)."""
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    lines = []
    for r in [header, *rows]:
        cells = [str(c).rjust(w) if i in right else str(c).ljust(w) for i, (c, w) in enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines)


def format_history(rows: list[dict]) -> str:
    if not rows:
        return "no processed revisions in the store"
    header = ["prototype", "revision", "date", "pol", "band (GHz)", "sector (deg)", "band reduction (dB)",
              "bandwidth (MHz)", "worst angle (dB @ deg)", "check err (dB)", "campaign", "run", "settings"]
    body = []
    for r in rows:
        if r.get("bound") == "undetermined":
            red = "undetermined"
        else:
            red = f"{_f(r['band_reduction_db'], '.2f')} +/- {_f(r['band_reduction_uncertainty_db'], '.2f')}"
            if r.get("bound") not in (None, "none"):
                red += f" ({r['bound']})"
        worst = f"{_f(r['worst_angle_reduction_db'], '.2f')} @ {_f(r['worst_angle_deg'], 'g')}"
        bw = "-" if r["bandwidth_hz"] is None else f"{r['bandwidth_hz'] / 1e6:.0f}"
        body.append([r["prototype"], r["revision"], r["date"] or "-", r["polarization"], band_text(r.get("band_hz")),
                     sector_text(r.get("sector_deg")), red, bw, worst, _f(r["check_error_db"], ".2f"), r["campaign"],
                     f"{r['run_id']}{'*' if r.get('current_chosen') and r.get('current') else ''}",
                     r.get("settings_key") or "-"])
    groups = {r.get("settings_key"): r.get("settings_label") for r in rows if r.get("settings_key")}
    legend = "\n".join(f"settings {k}: {v}" for k, v in groups.items())
    note = "\n(* the run chosen as the revision's current one with `cloakrcs revision current`)" if any(
        r.get("current_chosen") for r in rows) else ""
    return format_table(header, body, right={6, 7, 8, 9, 11}) + ("\n" + legend if legend else "") + note


def band_text(band_hz) -> str:
    return "-" if not band_hz else f"{band_hz[0] / 1e9:.4g}-{band_hz[1] / 1e9:.4g}"


def sector_text(sector_deg) -> str:
    return "all" if not sector_deg else f"{sector_deg[0]:g}:{sector_deg[1]:g}"


def run(args) -> int:
    from .. import store

    url = store.resolve_url(args.store)
    rows = store.history(url, args.prototype, all_runs=args.all_runs)
    if not args.centres:
        print(json.dumps(rows, indent=2) if args.json else format_history(rows))
        return 0
    from ..imaging import tracks_from_store

    tracked = tracks_from_store(rows, store.centres(url, args.prototype))
    if args.json:
        print(json.dumps({"history": rows, "tracked_centres": tracked}, indent=2))
    else:
        print(format_history(rows) + "\n\n" + format_centres(tracked))
    return 0


def format_centres(tracked: list[dict]) -> str:
    """Tracked scattering centres: one table per prototype and polarization, then the changes in words."""
    if not tracked:
        return "no scattering centres in the store (runs processed before imaging existed have none)"
    blocks = []
    for t in tracked:
        header = ["track", "down-range (m)", "cross-range (m)"] + [f"{r} (dBsm)" for r in t["revisions"]]
        body = []
        for tr in t["tracks"]:
            cells = [str(tr["track"]), f"{tr['down_range_m']:+.3f}", f"{tr['cross_range_m']:+.3f}"]
            for r in t["revisions"]:
                v = tr["values"].get(r)
                cells.append("-" if v is None else f"{v['rcs_dbsm']:.1f}" + (" (floor)" if v["floor_limited"] else ""))
            body.append(cells)
        blocks.append(f"scattering centres of {t['prototype']}, {t['polarization']} (CLEAN; '-': not found above "
                      f"the stopping level; matched within one resolution cell)\n"
                      + format_table(header, body, right=set(range(1, len(header))))
                      + "".join(f"\n  {line}" for line in t["sentences"]))
    return "\n\n".join(blocks)
