"""`cloakrcs inspect MANIFEST [--json]`: what a campaign holds and what is wrong with it."""

from __future__ import annotations

import json
import sys

from ..campaign import campaign_summary, inspect_campaign


def register(sub) -> None:
    p = sub.add_parser("inspect", help="summarise a campaign and list every problem found")
    p.add_argument("manifest", help="campaign manifest (TOML)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=run)


def _fmt_angles(angles) -> str:
    if len(angles) == 0:
        return "-"
    if len(angles) == 1:
        return f"{angles[0]:g} deg"
    return f"{min(angles):g}..{max(angles):g} deg ({len(angles)} angles)"


def format_summary(summary: dict, warnings: list[str], problems: list[str]) -> str:
    lines = [f"campaign {summary['campaign']!r} (prototype {summary['prototype']!r}"
             + (f", {summary['date']}" if summary.get("date") else "") + ")"]
    ch = summary["chamber"]
    lines.append(f"chamber: range {ch['range_m']:g} m, reference-plane offset {ch['offset_m']:g} m, "
                 f"bistatic {ch['bistatic_deg']:g} deg")
    if "frequency_hz" in summary:
        f = summary["frequency_hz"]
        lines.append(f"frequency grid: {f['start'] / 1e9:.6g}-{f['stop'] / 1e9:.6g} GHz, {f['points']} points, "
                     f"step {f['step'] / 1e6:.6g} MHz")
        lines.append(f"down-range resolution c0/(2B): {summary['resolution_m'] * 100:.2f} cm; "
                     f"unambiguous range c0/(2 df): {summary['unambiguous_range_m']:.3f} m")
    g = summary["gate"]
    lines.append(f"gate window: {g['window']}" + (f" (beta {g['kaiser_beta']:g})" if g["window"] == "kaiser" else ""))
    if summary.get("band_hz"):
        lo, hi = summary["band_hz"]
        lines.append(f"reporting band: {lo / 1e9:g}-{hi / 1e9:g} GHz")
    lines.append("targets:")
    for t in summary["targets"]:
        role = t["role"] + (" (check)" if t.get("check") else "")
        step = f", step {t['angle_step_deg']:g} deg" if t.get("angle_step_deg") else ""
        gate = f", gate {t['gate']['center_m']:.3f} m +/- {t['gate']['span_m'] / 2:.3f} m" if "gate" in t else ""
        extra = ""
        if t.get("shape"):
            extra += f", {t['shape']['shape']}"
        if t.get("baseline"):
            extra += f", baseline {t['baseline']}"
        if t.get("revision"):
            extra += f", revision {t['revision']}"
        params = sorted(set(t["parameter"].values()))
        lines.append(f"  {t['name']:<16} {role:<17} {t['n_files']:>5} files  {'/'.join(t['polarizations'])}  "
                     f"{_fmt_angles(t['angles_deg'])}{step}, {t['repeats']} repeat(s), {'/'.join(params)}"
                     f"{gate}{extra}")
    lines.append(f"warnings: {len(warnings)}")
    lines.extend(f"  {w}" for w in warnings)
    lines.append(f"problems: {len(problems)}")
    return "\n".join(lines)


def run(args) -> int:
    campaign, problems, warnings = inspect_campaign(args.manifest)
    msgs = [str(p) for p in problems]
    if campaign is not None:
        summary = campaign_summary(campaign)
        if args.json:
            summary["warnings"] = warnings
            summary["problems"] = msgs
            print(json.dumps(summary, indent=2))
        else:
            print(format_summary(summary, warnings, msgs))
    for m in msgs:
        print(m, file=sys.stderr)
    return 2 if msgs else 0
