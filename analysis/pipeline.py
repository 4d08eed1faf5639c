"""One processing run end to end: load and validate, process, write outputs, record in the store.

Everything that can fail on bad input fails before the first byte is written.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .campaign import Campaign, load_campaign
from .process import ProcessingResult, ProcessSettings, process_campaign


@dataclass
class Outcome:
    result: ProcessingResult
    out_dir: Path
    paths: dict
    run_id: int | None = None
    store_url: str | None = None
    notes: list = None  # lines about the store (raw files already stored under another campaign)

    def describe(self) -> str:
        lines = [f"processed campaign {self.result.campaign!r} into {self.out_dir}"]
        if self.run_id is not None:
            lines.append(f"stored as run {self.run_id} in {self.store_url}")
        lines.extend(getattr(self, "notes", []) or [])
        s = self.result.settings
        band = s.get("reporting_band_hz")
        sector = s.get("sector_deg")
        if band:
            lines.append(f"band {band[0] / 1e9:.4g}-{band[1] / 1e9:.4g} GHz; sector "
                         + ("all measured angles" if not sector else f"{sector[0]:g}:{sector[1]:g} deg")
                         + (f" ({s['sector_contents']})" if s.get("sector_contents") else ""))
        for c in self.result.checks:
            lines.append(f"check {c['target']} {c['polarization']}: max error {c['max_error_db']:.2f} dB, "
                         f"RMS {c['rms_error_db']:.2f} dB -> {'pass' if c['passed'] else 'FAIL'}")
        for m in self.result.metrics:
            lines.append(describe_metric(m))
        return "\n".join(lines)


def describe_metric(m: dict) -> str:
    """One line per metrics row; an undetermined reduction is printed as such, not as a number."""
    head = f"{m['subject']} vs {m['baseline']} {m['polarization']}: band reduction "
    if m["bound"] == "undetermined":
        red = "undetermined (subject and baseline both at the floor)"
    else:
        bound = "" if m["bound"] == "none" else f" ({m['bound']} bound)"
        red = f"{m['band_reduction_db']:.2f} +/- {m['band_reduction_uncertainty_db']:.2f} dB{bound}"
    bw = m.get("bandwidth_hz")
    text = (head + red + f", best {m['best_reduction_db']:.1f} dB at {m['best_frequency_hz'] / 1e9:.3f} GHz, "
            f"bandwidth {'-' if bw is None else f'{bw / 1e6:.0f}'} MHz")
    med = (m.get("sector_reduction_db") or {}).get("median")
    if med is not None and m["bound"] != "undetermined":
        pct = ", ".join(f"{k} {v:.2f}" for k, v in m["sector_reduction_db"].items() if k != "median" and v is not None)
        text += f"; per-point median {med:.2f} dB ({pct})"
    if "mounting_offset_reliable" in m:
        off = m.get("mounting_offset_deg")
        text += (f"; mounting offset {off:+.2f} deg" + (" (aligned)" if m.get("angles_aligned") else "")
                 if off is not None else f"; mounting offset none ({m.get('mounting_offset_note') or 'not reliable'})")
    if m.get("gate_mismatch"):
        text += "; WARNING: gated differently from its baseline"
    return text


def _progress(quiet: bool, total: int):
    from tqdm import tqdm

    bar = tqdm(total=total, disable=quiet, unit="step", leave=False)

    def tick(name: str):
        bar.set_description(name[:30])
        bar.update(1)

    return bar, tick


def run_process(manifest, out_dir, settings: ProcessSettings | None = None, store_url: str | None = "",
                report: bool = True, quiet: bool = True, campaign: Campaign | None = None) -> Outcome:
    """Process a campaign and write DIR/rcs.csv, reduction.csv, summary.json and report.html.

    ``store_url``: None skips the store; "" means the default store.
    """
    from . import outputs

    settings = settings or ProcessSettings()
    campaign = campaign or load_campaign(manifest)
    bar, tick = _progress(quiet, len(campaign.cubes) + 6)
    try:
        result = process_campaign(campaign, settings, progress=tick)
        out = outputs.prepare_out_dir(out_dir)
        html = None
        if report:
            from .report import render_report  # imported only when used: plotly is slow to import

            html = render_report(result, campaign)
        run_id, url, notes = None, None, []
        if store_url is not None:
            from . import store

            url = store.resolve_url(store_url or None)
            shared = store.files_already_stored(url, campaign)
            run_id = store.record_run(url, campaign, result)
            if shared:
                notes.append(f"these {shared['files']} files (of {shared['of']}) are already stored under campaign "
                             f"{shared['campaign']!r} (id {shared['campaign_id']}): the new campaign is linked to it")
        extra = {"run_id": run_id} if run_id is not None else None
        paths = outputs.write_outputs(result, out, extra)
        if html is not None:
            paths["report"] = out / "report.html"
            outputs.write_text(paths["report"], html)
        tick("outputs")
    finally:
        bar.close()
    return Outcome(result=result, out_dir=out, paths=paths, run_id=run_id, store_url=url, notes=notes)
