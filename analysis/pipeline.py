"""One processing run end to end: load and validate, process, write outputs, record in the store.

Everything that can fail on bad input fails before the first byte is written, and the run is one
outcome: its outputs are written into a staging folder, then moved into place inside the store's
transaction, just before it commits; when the move or the commit fails (or Ctrl-C comes before it),
the store is left as it was and the earlier outputs are put back. The store is opened and checked
first, so a bad ``--store`` fails before the work.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
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
    staging: Path | None = None  # outputs written but not yet published (publish=False)

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


def reuse_notes(reuse: dict | None) -> list[str]:
    """Lines saying which sweeps came from the store and which files changed since they were stored."""
    if not reuse or not reuse["from_store"] and not reuse["changed"]:
        return []
    lines = [f"{reuse['from_store']} of {reuse['from_store'] + reuse['read']} sweeps taken from the store "
             f"(their files' SHA-256 unchanged); {reuse['read']} file(s) read"]
    changed = reuse["changed"]
    if changed:
        shown = ", ".join(Path(p).name for p in changed[:3]) + (f" and {len(changed) - 3} more" if len(changed) > 3 else "")
        lines.append(f"{len(changed)} file(s) changed since they were stored, read afresh: {shown}")
    return lines


def publish_run(folder, result: ProcessingResult, campaign: Campaign | None, url: str | None, ready=None):
    """Move a staged run's outputs into place and record it in the store (``url`` None: no store) as one
    outcome; returns (run_id, paths). The summary gets the run id inside the transaction. ``ready()``, when
    given, is called before anything is moved (it waits for outputs still being written)."""
    from . import outputs

    if url is None:
        if ready is not None:
            ready()
        with outputs.interrupts_deferred():
            return None, folder.publish()
    from . import store

    paths: dict = {}

    def place(run_id: int) -> None:
        if ready is not None:
            ready()
        outputs.write_summary(result, folder.staging, {"run_id": run_id})
        paths.update(folder.publish())

    run_id = store.record_run(url, campaign, result, before_commit=place, on_rollback=folder.restore)
    return run_id, paths


def write_tables(result: ProcessingResult, staging) -> None:
    """rcs.csv, reduction.csv, summary.json and the receiver-arm tables into the staging folder."""
    from . import outputs

    outputs.write_outputs(result, staging)
    if result.arm is not None:
        from .bistatic import write_arm_outputs

        write_arm_outputs(result.arm, staging)


def run_process(manifest, out_dir, settings: ProcessSettings | None = None, store_url: str | None = "",
                report: bool = True, quiet: bool = True, campaign: Campaign | None = None,
                lock: bool = True, publish: bool = True) -> Outcome:
    """Process a campaign and write DIR/rcs.csv, reduction.csv, summary.json and report.html.

    ``store_url``: None skips the store; "" means the default store. ``lock``: take the output folder's
    lock (False when the caller holds it). ``publish=False`` leaves the outputs in ``Outcome.staging``
    for the caller to publish with :func:`publish_run` (the store is then not written here).
    """
    from . import outputs

    settings = settings or ProcessSettings()
    url = None
    if store_url is not None:
        from . import store

        url = store.check_store(store_url or None)  # a bad store fails now, not after the work
    campaign = campaign or load_campaign(manifest, store_url=url)
    bar, tick = _progress(quiet, len(campaign.cubes) + 6)
    try:
        result = process_campaign(campaign, settings, progress=tick)
        folder = outputs.OutputFolder(out_dir, lock=lock).open()  # nothing is written before this point
        keep = False
        notes: list = reuse_notes(campaign.reuse)
        try:
            # the tables are written on a thread (Arrow's CSV writer releases the GIL) while this one
            # renders the report and fills the store; the pool is joined before the folder is closed
            with ThreadPoolExecutor(max_workers=1) as pool:
                tables = pool.submit(write_tables, result, folder.staging)
                if report:
                    from .report import render_report  # imported only when used: plotly is slow to import

                    outputs.write_text(folder.staging / "report.html", render_report(result, campaign))
                if not publish:
                    tables.result()
                    tick("outputs")
                    keep = True
                    return Outcome(result=result, out_dir=folder.out, paths={}, store_url=url, staging=folder.staging)
                shared = None
                if url is not None:
                    from . import store

                    shared = store.files_already_stored(url, campaign)
                run_id, placed = publish_run(folder, result, campaign, url, ready=tables.result)
                tick("outputs")
            if shared:
                notes.append(f"these {shared['files']} files (of {shared['of']}) are already stored under campaign "
                             f"{shared['campaign']!r} (id {shared['campaign_id']}): the new campaign is linked to it")
        finally:
            folder.close(keep_staging=keep)
    finally:
        bar.close()
    names = {"rcs.csv": "rcs", "reduction.csv": "reduction", "summary.json": "summary", "report.html": "report",
             "bistatic.csv": "bistatic", "extinction.csv": "extinction"}
    paths = {names[n]: p for n, p in placed.items()}
    return Outcome(result=result, out_dir=folder.out, paths=paths, run_id=run_id, store_url=url, notes=notes)
