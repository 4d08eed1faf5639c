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

    def describe(self) -> str:
        lines = [f"processed campaign {self.result.campaign!r} into {self.out_dir}"]
        if self.run_id is not None:
            lines.append(f"stored as run {self.run_id} in {self.store_url}")
        for c in self.result.checks:
            lines.append(f"check {c['target']} {c['polarization']}: max error {c['max_error_db']:.2f} dB, "
                         f"RMS {c['rms_error_db']:.2f} dB -> {'pass' if c['passed'] else 'FAIL'}")
        for m in self.result.metrics:
            bound = "" if m["bound"] == "none" else f" ({m['bound']} bound)"
            lines.append(f"{m['subject']} vs {m['baseline']} {m['polarization']}: band reduction "
                         f"{m['band_reduction_db']:.2f} +/- {m['band_reduction_uncertainty_db']:.2f} dB{bound}, "
                         f"best {m['best_reduction_db']:.1f} dB at {m['best_frequency_hz'] / 1e9:.3f} GHz, "
                         f"bandwidth {m['bandwidth_hz'] / 1e6:.0f} MHz")
        return "\n".join(lines)


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
        run_id, url = None, None
        if store_url is not None:
            from . import store

            url = store.resolve_url(store_url or None)
            run_id = store.record_run(url, campaign, result)
        extra = {"run_id": run_id} if run_id is not None else None
        paths = outputs.write_outputs(result, out, extra)
        if result.arm is not None:
            from .bistatic import write_arm_outputs

            paths.update(write_arm_outputs(result.arm, out))
        if html is not None:
            paths["report"] = out / "report.html"
            outputs.write_text(paths["report"], html)
        tick("outputs")
    finally:
        bar.close()
    return Outcome(result=result, out_dir=out, paths=paths, run_id=run_id, store_url=url)
