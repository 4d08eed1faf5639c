"""Self-contained HTML report of a processing run (one file, opens offline, prints).

``render_report(result, campaign) -> str``: plotly.js is embedded once in the page head
(gzip-compressed, base64), each figure is a div and its JSON, drawn by the page's loader when it
scrolls into view (all of them before printing); no tag loads anything from any
address (no ``<script src>``, ``<link href>``, images or CSS ``url()``). The summary table cells
carry their raw values in ``data-value`` (repr of the float in summary.json) beside the
printed text (dB to two decimals, GHz to three, MHz to one).

``write_report`` writes the HTML atomically and, on request, PNG files of the figures (kaleido,
which drives a local Chromium) and a PDF of the whole report (Chromium's headless print).
"""

from __future__ import annotations

import functools
import html
import json
import math
import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import figures, metrics, uncertainty
from .errors import InputError

PLOTLY_CONFIG = {"displaylogo": False, "responsive": True,
                 "toImageButtonOptions": {"format": "png", "scale": 2}}
CHROMIUM_CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "chrome")
PRINT_WIDTH_PX = 680

BOUND_WORDS = {"lower": "at least", "upper": "at most"}


@dataclass
class FigureSpec:
    """One figure slot of the report: its element id, a caption and the figure (None: a note)."""

    id: str
    section: str
    caption: str
    figure: object | None = None
    note: str = ""


# --------------------------------------------------------------------------- formatting

def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _finite(x) -> bool:
    return isinstance(x, (int, float, np.floating, np.integer)) and not isinstance(x, bool) and math.isfinite(float(x))


def _fmt(x, digits: int, scale: float = 1.0) -> str:
    return f"{float(x) / scale:.{digits}f}" if _finite(x) else "—"


def _data_value(x) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return ""
    if isinstance(x, (bool, np.bool_)):
        return "true" if x else "false"
    if isinstance(x, (float, np.floating)):
        return repr(float(x))
    return str(x)


def _td(key: str, value, text: str, cls: str = "num") -> str:
    return f'<td class="{cls}" data-key="{_esc(key)}" data-value="{_esc(_data_value(value))}">{_esc(text)}</td>'


def slug(*parts) -> str:
    """An element id from names: letters, digits, '-' and '_' only."""
    return re.sub(r"[^A-Za-z0-9_-]+", "-", "-".join(str(p) for p in parts)).strip("-").lower()


def reduction_text(value, bound: str) -> str:
    """'12.34', 'at least 12.34', 'at most 12.34' or 'undetermined' (README, The processing chain, step 6)."""
    if bound == "undetermined":
        return "undetermined"
    text = _fmt(value, 2)
    return f"{BOUND_WORDS[bound]} {text}" if bound in BOUND_WORDS and text != "—" else text


def offset_text(m: dict) -> str:
    """The mounting offset, or 'none' and why when it is not reliable (no number is printed then)."""
    if m.get("mounting_offset_deg") is None:
        return "none" + (f" ({m['mounting_offset_note']})" if m.get("mounting_offset_note") else "")
    return _fmt(m["mounting_offset_deg"], 2) + (" (aligned)" if m.get("angles_aligned") else "")


def sector_text(settings: dict) -> str:
    """'all measured angles (72 angles, -175 to 180 deg)' or '-30 to 30 deg (61 angles, -30 to 30 deg)'."""
    sector = settings.get("sector_deg")
    text = "all measured angles" if not sector else f"{sector[0]:g} to {sector[1]:g} deg"
    return text + (f" ({settings['sector_contents']})" if settings.get("sector_contents") else "")


def check_alarm(result) -> str:
    """A prominent box naming every failed check target (empty when all passed)."""
    from .process import check_failure_text

    failed = [c for c in result.checks if not c.get("passed", True)]
    if not failed:
        return ""
    items = "".join(f"<li>{_esc(check_failure_text(c))}</li>" for c in failed)
    return (f'<div id="check-failed" class="alarm" role="alert"><p><strong>Check target failed.</strong> The '
            f'results below rest on a calibration that a known target does not confirm.</p><ul>{items}</ul></div>')


def sector_statistics_table(result) -> str:
    """Median and percentiles over the band and sector of the per-point reduction and RCS, per metrics row."""
    rows = [m for m in result.metrics if m.get("sector_reduction_db")]
    if not rows:
        return ""
    keys = [k for k in rows[0]["sector_reduction_db"]]
    head = "".join(f'<th scope="col">{_esc(x)}</th>' for x in ["subject", "pol.", "quantity"] + keys)
    body = []
    for m in rows:
        for key, label in (("sector_reduction_db", "reduction (dB)"), ("sector_rcs_dbsm", "RCS of subject (dBsm)"),
                           ("sector_baseline_rcs_dbsm", "RCS of baseline (dBsm)")):
            stats = m.get(key) or {}
            cells = "".join(_td(f"{key}.{k}", stats.get(k), _fmt(stats.get(k), 2)) for k in keys)
            body.append(f"<tr>{_td('subject', m['subject'], m['subject'], 'text')}"
                        f"{_td('polarization', m['polarization'], m['polarization'], 'text')}"
                        f"<td>{_esc(label)}</td>{cells}</tr>")
    return ('<h3>Sector statistics</h3><p>Median and percentiles over every (angle, frequency) point of the band '
            'and sector; floor-limited points enter at their 95 % upper limit.</p>'
            f'<table id="sector-statistics" class="data compact"><thead><tr>{head}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table>')


def floor_note(m: dict) -> str:
    n, total = m.get("floor_limited_points") or 0, m.get("points") or 0
    if not n:
        return "none"
    why = {"lower": "subject at floor: lower bound", "upper": "baseline at floor: upper bound",
           "undetermined": "both at floor: undetermined"}.get(m.get("bound"), "")
    return f"{n} of {total} points" + (f"; {why}" if why else "")


# --------------------------------------------------------------------------- tables

SUMMARY_COLUMNS = (
    ("subject", "subject"), ("baseline", "baseline"), ("polarization", "pol."),
    ("band_reduction_db", "band-averaged reduction (dB)"), ("band_reduction_uncertainty_db", "U, k = 2 (dB)"),
    ("best_reduction_db", "best reduction (dB)"), ("best_frequency_hz", "at (GHz)"),
    ("bandwidth_hz", "bandwidth above threshold (MHz)"), ("bandwidth_start_hz", "from (GHz)"),
    ("bandwidth_stop_hz", "to (GHz)"), ("fractional_bandwidth", "fractional (%)"),
    ("worst_angle_deg", "worst angle (deg)"), ("worst_angle_reduction_db", "worst-angle reduction (dB)"),
    ("mounting_offset_deg", "mounting offset (deg)"), ("floor_limited_points", "floor-limited notes"),
)


def summary_table(result) -> str:
    """The metrics table: one row per metrics row (subject, polarization), id="summary-table"."""
    head = "".join(f"<th scope=\"col\">{_esc(label)}</th>" for _, label in SUMMARY_COLUMNS)
    rows = []
    for m in result.metrics:
        bound = m.get("bound", "none")
        trunc = "≥ " if m.get("bandwidth_truncated") else ""
        cells = [
            _td("subject", m["subject"], m["subject"], "text"), _td("baseline", m["baseline"], m["baseline"], "text"),
            _td("polarization", m["polarization"], m["polarization"], "text"),
            _td("band_reduction_db", m["band_reduction_db"], reduction_text(m["band_reduction_db"], bound)),
            _td("band_reduction_uncertainty_db", m["band_reduction_uncertainty_db"],
                "± " + _fmt(m["band_reduction_uncertainty_db"], 2)),
            _td("best_reduction_db", m["best_reduction_db"], _fmt(m["best_reduction_db"], 2)),
            _td("best_frequency_hz", m["best_frequency_hz"], _fmt(m["best_frequency_hz"], 3, 1e9)),
            _td("bandwidth_hz", m["bandwidth_hz"], trunc + _fmt(m["bandwidth_hz"], 1, 1e6)),
            _td("bandwidth_start_hz", m["bandwidth_start_hz"], _fmt(m["bandwidth_start_hz"], 3, 1e9)),
            _td("bandwidth_stop_hz", m["bandwidth_stop_hz"], _fmt(m["bandwidth_stop_hz"], 3, 1e9)),
            _td("fractional_bandwidth", m["fractional_bandwidth"], _fmt(m["fractional_bandwidth"], 1, 0.01)),
            _td("worst_angle_deg", m["worst_angle_deg"], _fmt(m["worst_angle_deg"], 1)),
            _td("worst_angle_reduction_db", m["worst_angle_reduction_db"], _fmt(m["worst_angle_reduction_db"], 2)),
            _td("mounting_offset_deg", m.get("mounting_offset_deg"), offset_text(m)),
            _td("floor_limited_points", m.get("floor_limited_points"), floor_note(m), "text"),
        ]
        rows.append(f'<tr data-bound="{_esc(bound)}">{"".join(cells)}</tr>')
    if not rows:
        rows.append(f'<tr><td colspan="{len(SUMMARY_COLUMNS)}">No subject has a baseline: no reduction '
                    f'metrics.</td></tr>')
    return (f'<div class="scroll"><table id="summary-table" class="data summary"><thead><tr>{head}</tr></thead>'
            f'<tbody>{"".join(rows)}</tbody></table></div>')


def mismatch_note(result) -> str:
    """Rows whose subject and baseline were gated differently, said beside the table."""
    notes = sorted({m["gate_mismatch"] for m in result.metrics if m.get("gate_mismatch")})
    if not notes:
        return ""
    return '<ul id="gate-mismatch" class="warnings">' + "".join(f"<li>{_esc(n)}</li>" for n in notes) + "</ul>"


def checks_table(result) -> str:
    cols = (("target", "check target"), ("polarization", "pol."), ("max_error_db", "max error (dB)"),
            ("rms_error_db", "RMS error (dB)"), ("mean_error_db", "mean error (dB)"),
            ("tolerance_db", "tolerance (dB)"), ("points", "points"), ("passed", "result"))
    head = "".join(f'<th scope="col">{_esc(label)}</th>' for _, label in cols)
    rows = []
    for c in result.checks:
        cells = [_td("target", c["target"], c["target"], "text"),
                 _td("polarization", c["polarization"], c["polarization"], "text")]
        cells += [_td(k, c[k], _fmt(c[k], 2)) for k in ("max_error_db", "rms_error_db", "mean_error_db",
                                                       "tolerance_db")]
        cells.append(_td("points", c["points"], str(c["points"])))
        cells.append(_td("passed", c["passed"], "pass" if c["passed"] else "FAIL",
                         "text pass" if c["passed"] else "text fail"))
        rows.append(f"<tr>{''.join(cells)}</tr>")
    if not rows:
        return '<p id="checks-table" class="note">No check target in this campaign.</p>'
    return f'<table id="checks-table" class="data"><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table>'


def floor_table(result) -> str:
    rows = "".join(f"<tr>{_td('polarization', p, p, 'text')}{_td('floor_dbsm', v, _fmt(v, 1))}</tr>"
                   for p, v in result.floor.items())
    return ('<table id="floor-table" class="data compact"><thead><tr><th scope="col">pol.</th>'
            '<th scope="col">median floor of the subjects (dBsm)</th></tr></thead>'
            f"<tbody>{rows}</tbody></table>")


def _kv_table(table_id: str, items) -> str:
    rows = "".join(f'<tr><th scope="row">{_esc(k)}</th><td>{v}</td></tr>' for k, v in items)
    return f'<table id="{table_id}" class="kv"><tbody>{rows}</tbody></table>'


def _ghz_range(pair) -> str:
    return "—" if not pair else f"{pair[0] / 1e9:.4f} – {pair[1] / 1e9:.4f} GHz"


def provenance(result, campaign) -> str:
    s = result.settings
    window = s.get("window")
    if window == "kaiser":
        window = f"kaiser (beta {s.get('kaiser_beta'):g})"
    sector = s.get("sector_deg")
    items = [
        ("software", _esc(f"cloakrcs {s.get('software_version')}")),
        ("manifest", f"<code>{_esc(s.get('manifest'))}</code>"),
        ("window", _esc(window)),
        ("zero padding", _esc(f"x{s.get('pad_factor')}")),
        ("gate edges", _esc(f"{100 * float(s.get('edge_fraction', 0)):g} % of the span each side")),
        ("valid band", _esc(_ghz_range(s.get("valid_band_hz")))),
        ("reporting band", _esc(_ghz_range(s.get("reporting_band_hz")))),
        ("angular sector", _esc("all measured angles" if not sector else f"{sector[0]:g} to {sector[1]:g} deg")),
        ("bandwidth threshold", _esc(f"{s.get('threshold_db'):g} dB")),
        ("floor margin", _esc(f"{s.get('floor_margin_db'):g} dB")),
        ("check tolerance", _esc(f"{s.get('check_tolerance_db'):g} dB")),
        ("coverage factor", _esc(f"k = {s.get('coverage_k', 2):g}")),
        ("auto gate", _esc("on" + (f", reference-plane offset {s['estimated_offset_m']:.4f} m from "
                                   f"{s.get('offset_reference')}" if s.get("estimated_offset_m") is not None else "")
                           if s.get("auto_gate") else "off")),
        ("drift correction", _esc("on" if s.get("drift_correction") else "off")),
        ("angle alignment", _esc("on" if s.get("align_angles") else "off")),
        ("process settings", f"<code>{_esc(json.dumps(s.get('process_settings'), sort_keys=True))}</code>"),
    ]
    gates = "".join(
        f"<tr><td>{_esc(name)}</td><td class=\"num\">{g['center_m']:.4f}</td><td class=\"num\">{g['span_m']:.4f}</td>"
        f"<td>{_esc(g.get('floor_method', ''))}</td></tr>" for name, g in s.get("gates", {}).items())
    refs = "".join(
        f"<tr><td>{_esc(r.get('polarization'))}</td><td>{_esc(r.get('target') or '—')}</td>"
        f"<td>{_esc(_shape_text(r.get('shape')))}</td><td>{_esc(r.get('method'))}"
        f"{' (approximate)' if r.get('approximate') else ''}{_esc(_centring_text(r))}</td></tr>"
        for r in s.get("references", []))
    files = "".join(f'<tr><td><code>{_esc(p)}</code></td><td class="hash"><code>{_esc(h)}</code></td></tr>'
                    for p, h in s.get("files", {}).items())
    manifest_text = getattr(getattr(campaign, "manifest", None), "text", "") if campaign is not None else ""
    manifest_block = (f'<details id="manifest-text"><summary>Manifest text</summary><pre>{_esc(manifest_text)}'
                      f"</pre></details>" if manifest_text else
                      '<p class="note">The manifest text was not available when this report was made; its path '
                      "and the file hashes identify the data.</p>")
    return (
        _kv_table("settings-table", items)
        + '<h3>Gates</h3><table id="gates-table" class="data"><thead><tr><th scope="col">target</th>'
          '<th scope="col">centre (m)</th><th scope="col">span (m)</th><th scope="col">floor estimate</th></tr>'
          f"</thead><tbody>{gates}</tbody></table>"
        + '<h3>Calibration references</h3><table id="references-table" class="data"><thead><tr>'
          '<th scope="col">pol.</th><th scope="col">reference</th><th scope="col">shape</th>'
          f'<th scope="col">method</th></tr></thead><tbody>{refs}</tbody></table>'
        + f'<details id="files-details"><summary>Files ({len(s.get("files", {}))}, SHA-256): show</summary>'
          f'<table id="files-table" class="data files"><thead><tr>'
          f'<th scope="col">file (relative to the manifest)</th><th scope="col">SHA-256</th></tr></thead>'
          f"<tbody>{files}</tbody></table></details>"
        + manifest_block)


def _centring_text(ref: dict) -> str:
    """The centring check of an angle-averaged reference (README, The processing chain, step 3)."""
    if ref.get("off_axis_m") is not None:
        return f"; centring check: {1e3 * ref['off_axis_m']:.2f} mm off the turntable axis"
    if ref.get("shift_spread_m") is not None:
        return f"; centring check: echo delay spread {1e3 * ref['shift_spread_m']:.2f} mm (arc too narrow for a fit)"
    return ""


def _shape_text(shape) -> str:
    if not shape:
        return "—"
    dims = ", ".join(f"{k} {v:g}" if isinstance(v, (int, float)) else f"{k} {v}"
                     for k, v in shape.items() if k != "shape")
    return f"{shape.get('shape')} ({dims})" if dims else str(shape.get("shape"))


# --------------------------------------------------------------------------- statements

def uncertainty_statement(result) -> str:
    """The report's Uncertainty section: how the budgets are made, then one budget table per metric."""
    s = result.settings
    k = s.get("coverage_k", 2)
    margin = s.get("floor_margin_db", 10)
    parts = [f"""<div id="uncertainty-statement">
<p>Every ± value is an expanded uncertainty U = k u<sub>c</sub> with coverage factor k = {k:g}, where the
combined standard uncertainty u<sub>c</sub> is the root sum of squares of the components below (GUM,
JCGM 100:2008). Noise and drift are propagated through the chain to first order: background subtraction,
the time gate (a linear operator, so noise stays correlated across frequency), the calibration and the
sums; the background mean and the calibration reference are shared by every angle and by subject and
baseline, and are carried as such. The gate term re-gates at ±10 % span and ± one range cell; the
reference-dimension and range terms use the manifest's tolerances (rectangular distributions). The floor's
noise power is subtracted from every sum before the band average (E|s + n|<sup>2</sup> = |s|<sup>2</sup> + N).
The floor is estimated from the background measurements; it does not see the interaction between target
and support, so it is a lower estimate of the true floor and the noise terms are lower estimates too. In a
reduction the calibration largely cancels (the budget keeps what is left); absolute RCS also carries the
reference's own accuracy, seldom better than about 0.5 dB in practice (Knott, <i>Radar Cross Section
Measurements</i>).</p>
<p>A point is floor-limited when it may be less than {margin:g} dB above the floor; its reduction is then a
bound that holds with probability {100 * metrics.BOUND_PROBABILITY:.0f} %: "at least X dB" when the
cloaked subject is at the floor (lower bound), "at most X dB" when the baseline is (upper bound),
"undetermined" when both are. A band or sector metric becomes a bound when its noise-corrected sum is not
clear of the floor at k standard uncertainties.</p>
</div>"""]
    for i, m in enumerate(result.metrics):
        budget = m.get("uncertainty_budget") or {}
        for metric in ("band_reduction_db", "best_reduction_db"):
            b = budget.get(metric)
            if not b:
                continue
            value = m.get(metric)
            lo, hi = m.get("band_hz") or [None, None]
            where = f"{lo / 1e9:.4g}-{hi / 1e9:.4g} GHz, {m.get('sector_contents') or 'all angles'}" if lo else ""
            caption = (f"{uncertainty.METRIC_LABELS[metric]}: {m['subject']} against {m['baseline']}, "
                       f"{m['polarization']}{', ' + where if where else ''}: "
                       f"{_fmt(value, 2)} ± {b['expanded_u_db']:.2f} dB (k = {b['coverage_k']:g})")
            rows = "".join("<tr>" + "".join(f"<td>{_esc(c)}</td>" for c in r) + "</tr>"
                           for r in uncertainty.budget_rows(b))
            head = "".join(f"<th>{_esc(h)}</th>" for h in uncertainty.BUDGET_HEADER)
            parts.append(f'<div class="scroll"><table class="data budget" id="budget-{i}-{metric}"><caption>{_esc(caption)}</caption>'
                         f"<thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table></div>")
    return "".join(parts)


RF_CAUTION = """<div id="rf-caution" class="caution">
<p><strong>RF exposure.</strong> A vector network analyser alone radiates milliwatts, but chamber setups
often add power amplifiers and high-gain horns. In the far field the power density is
S = P G / (4 π r<sup>2</sup>) (P transmitted power in W, G antenna gain as a ratio, r distance in m), so it
can be high close to a horn. Keep people out of the beam while transmitting, and follow the site's RF
safety rules and local regulations, which decide. Any exposure figure this software gives is indicative
only; nothing in this report states that a setup complies with an exposure limit.</p>
</div>"""


# --------------------------------------------------------------------------- figures

def _spec_of(campaign, name):
    if campaign is None:
        return None
    return next((t for t in campaign.manifest.targets if t.name == name), None)


def build_figures(result, campaign=None) -> list[FigureSpec]:
    """Every figure of the report, in order (pure: builds plotly figures, draws nothing)."""
    out: list[FigureSpec] = []
    freq = result.frequency_hz
    band = result.band_mask
    f_mid = float(np.median(freq[band])) if band.any() else float(np.median(freq))
    for m in result.metrics:
        subj, base, pol = m["subject"], m["baseline"], m["polarization"]
        names = [base, subj]
        angles = figures.main_angles(result, subj, pol)
        out.append(FigureSpec(slug("fig-rcs", subj, pol), "rcs",
                              f"RCS of {base} (baseline) and {subj} versus frequency, {pol}, at "
                              f"{', '.join(f'{a:g}' for a in angles)} deg; dotted: noise floor.",
                              figures.fig_rcs_vs_frequency(result, names, pol, angles)))
        fsel = [f_mid] + ([m["best_frequency_hz"]] if _finite(m.get("best_frequency_hz")) else [])
        fsel = [f for i, f in enumerate(fsel) if all(abs(f - g) > 1e-3 for g in fsel[:i])]
        out.append(FigureSpec(slug("fig-polar", subj, pol), "polar",
                              f"Polar patterns of {base} and {subj}, {pol}, at the reporting-band centre"
                              + (" and the best frequency" if len(fsel) > 1 else "") + ".",
                              figures.fig_polar(result, names, pol, fsel)))
        if (subj, pol) in result.reductions:
            out.append(FigureSpec(slug("fig-map", subj, pol), "map",
                                  f"Reduction 10 log10(σ_{base} / σ_{subj}) over angle and frequency (valid band), "
                                  f"{pol}.", figures.fig_reduction_map(result, subj, pol)))
        out.append(FigureSpec(slug("fig-sector", subj, pol), "sector",
                              f"Sector reduction R(f), {pol}; shaded: the bandwidth above the threshold.",
                              figures.fig_sector_curve(result, subj, pol)))
    for c in result.checks:
        spec = _spec_of(campaign, c["target"])
        specular = spec.specular_deg if spec is not None else 0.0
        out.append(FigureSpec(slug("fig-check", c["target"], c["polarization"]), "check",
                              f"Check target {c['target']} against theory, {c['polarization']}; shaded: "
                              f"the tolerance.", figures.fig_check(result, c, specular)))
    out.append(_range_profile_spec(result, campaign))
    return out


def _range_profile_spec(result, campaign) -> FigureSpec:
    fid = "fig-range-profile"
    if campaign is None:
        return FigureSpec(fid, "range", "Range profile with the gate.",
                          note="The raw sweeps were not available when this report was made (it was rendered from "
                               "the results store), so the range profile is omitted; the gates used are listed "
                               "under Settings and provenance.")
    s = result.settings
    target, pol, angle, _, _ = figures.campaign_sweeps(campaign)
    gate = s.get("gates", {}).get(target) or result.targets[target].gate
    fig = figures.fig_range_profile(campaign, target, pol, 0.0, gate=gate, window=s.get("window", "kaiser"),
                                    kaiser_beta=s.get("kaiser_beta") or 6.0, pad_factor=s.get("pad_factor") or 4,
                                    edge_fraction=s.get("edge_fraction", 0.2))
    return FigureSpec(fid, "range", f"Range profile of {target}, {pol}, {angle:g} deg, raw and background "
                                    f"subtracted, with the gate (right axis).", fig)


def figure_json(figure) -> str:
    """A figure (plotly Figure or plain dict) as JSON safe inside a <script> element."""
    import plotly.io as pio

    text = figure.to_json() if hasattr(figure, "to_json") else pio.to_json(figure, validate=False)
    return text.replace("</", "<\\/")  # JSON allows "\/"; the element cannot end early


def _figure_html(spec: FigureSpec) -> str:
    """A figure's div and its JSON; the page's loader draws it when it scrolls into view (or on print)."""
    if spec.figure is None:
        return (f'<figure class="figure missing" id="{spec.id}-box"><p class="note" id="{spec.id}">{_esc(spec.note)}'
                f"</p><figcaption>{_esc(spec.caption)}</figcaption></figure>")
    layout = spec.figure["layout"] if isinstance(spec.figure, dict) else spec.figure.layout
    height = (layout.get("height") if isinstance(layout, dict) else layout.height) or 450
    return (f'<figure class="figure" id="{spec.id}-box"><div id="{spec.id}" class="plotly-graph-div lazy-figure" '
            f'style="height:{int(height)}px; width:100%;"></div>'
            f'<script type="application/json" class="figure-data" data-for="{spec.id}">{figure_json(spec.figure)}'
            f"</script><figcaption>{_esc(spec.caption)}</figcaption></figure>")


# --------------------------------------------------------------------------- page

CSS = """
:root { --ink:#1d2733; --muted:#5b6775; --rule:#d8dde3; --band:#f4f6f8; --accent:#1f7a8c; --warn:#9a4b16; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff; line-height: 1.45;
  font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; font-size: 15px; }
main { max-width: 1120px; margin: 0 auto; padding: 28px 28px 60px; }
header { border-bottom: 2px solid var(--accent); padding-bottom: 12px; margin-bottom: 20px; }
h1 { font-size: 1.6em; margin: 0 0 4px; font-weight: 600; }
h2 { font-size: 1.22em; margin: 34px 0 10px; padding-bottom: 4px; border-bottom: 1px solid var(--rule); font-weight: 600; }
h3 { font-size: 1.02em; margin: 22px 0 8px; font-weight: 600; }
.meta { color: var(--muted); margin: 0; }
nav ol { columns: 2; color: var(--muted); margin: 8px 0 0; }
nav a { color: var(--accent); text-decoration: none; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 0.9em; }
table.data { width: 100%; }
th, td { border-bottom: 1px solid var(--rule); padding: 5px 8px; text-align: left; vertical-align: top; }
thead th { background: var(--band); font-weight: 600; border-bottom: 1px solid #b9c1ca; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.scroll { overflow-x: auto; }
table.summary { font-size: 0.84em; }
table.budget caption { text-align: left; font-weight: 600; padding: 4px 0; }
table.budget td:nth-child(3) { text-align: right; font-variant-numeric: tabular-nums; }
table.summary td.text:last-child { min-width: 11em; }
td.fail { color: var(--warn); font-weight: 600; }
table.kv th { font-weight: 500; color: var(--muted); width: 13em; }
table.files td.hash code { font-size: 0.85em; word-break: break-all; }
code, pre { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, "Liberation Mono", monospace; font-size: 0.88em; }
pre { background: var(--band); padding: 10px 12px; overflow-x: auto; border: 1px solid var(--rule); }
.note { color: var(--muted); font-style: italic; }
.warnings li { color: var(--warn); }
figure.figure { margin: 18px 0 26px; page-break-inside: avoid; break-inside: avoid; }
figcaption { color: var(--muted); font-size: 0.88em; margin-top: 4px; }
.alarm { border: 2px solid #b3261e; background: #fdecea; color: #7a1a14; padding: 6px 14px; margin: 10px 0 16px; }
.alarm li { color: #7a1a14; font-weight: 600; }
details#files-details summary { cursor: pointer; color: var(--accent); }
table.summary { table-layout: fixed; width: 100%; }
table.summary th, table.summary td { padding: 4px 4px; overflow-wrap: anywhere; hyphens: auto; }
table.summary td.num { white-space: normal; }
.caution { border-left: 4px solid var(--warn); background: #fbf5ef; padding: 4px 14px; }
footer { color: var(--muted); font-size: 0.85em; margin-top: 40px; border-top: 1px solid var(--rule); padding-top: 8px; }
@media print {
  body { font-size: 10.5pt; }
  main { max-width: none; padding: 0; }
  nav { display: none; }
  h2 { page-break-after: avoid; break-after: avoid; }
  table { page-break-inside: auto; }
  tr { page-break-inside: avoid; break-inside: avoid; }
  .scroll { overflow: visible; }
  table.summary { font-size: 7pt; }
  table.summary td.num { white-space: normal; }
  table.files { font-size: 6.5pt; }
  table.files td { padding: 1px 6px; }
  .modebar-container { display: none !important; }
}
@page { margin: 14mm; }
"""

# The page's loader: unpack the embedded plotly.js (gzip, base64: a third of its size), then draw
# each figure when it comes near the window, every figure before printing or when the address
# ends in #draw-all (the PDF export). Figures are resized to the printed width for printing.
LOADER_JS = """
(function () {
  var CONFIG = %s, PRINT_WIDTH = %d, divs = [];
  function draw(div) {
    if (div.getAttribute('data-drawn')) { return; }
    div.setAttribute('data-drawn', '1');
    var spec = JSON.parse(document.querySelector('script.figure-data[data-for="' + div.id + '"]').textContent);
    Plotly.newPlot(div, spec.data, spec.layout, CONFIG);
  }
  function drawAll() { divs.forEach(draw); }
  function start() {
    divs = Array.prototype.slice.call(document.querySelectorAll('.lazy-figure'));
    window.cloakrcsDrawAll = drawAll;
    if (location.hash === '#draw-all' || !('IntersectionObserver' in window)) { drawAll(); }
    else {
      var io = new IntersectionObserver(function (entries) {
        entries.forEach(function (e) { if (e.isIntersecting) { io.unobserve(e.target); draw(e.target); } });
      }, {rootMargin: '800px 0px'});
      divs.forEach(function (d) { io.observe(d); });
    }
    window.addEventListener('beforeprint', function () {
      drawAll(); divs.forEach(function (d) { Plotly.relayout(d, {width: PRINT_WIDTH}); }); });
    window.addEventListener('afterprint', function () {
      divs.forEach(function (d) { Plotly.relayout(d, {width: null, autosize: true}); }); });
    document.documentElement.setAttribute('data-plotly', 'ready');
  }
  var b64 = document.getElementById('plotly-bundle').textContent.replace(/\\s+/g, '');
  var raw = atob(b64), bytes = new Uint8Array(raw.length);
  for (var i = 0; i < raw.length; i++) { bytes[i] = raw.charCodeAt(i); }
  new Response(new Blob([bytes]).stream().pipeThrough(new DecompressionStream('gzip'))).text().then(function (js) {
    var tag = document.createElement('script');
    tag.textContent = js;
    document.head.appendChild(tag);
    start();
  });
})();
"""


@functools.lru_cache(maxsize=1)
def plotly_bundle_b64() -> str:
    """plotly.js of the installed plotly, gzip-compressed (fixed mtime: the same bytes every time), base64."""
    import base64
    import gzip

    from plotly.offline import get_plotlyjs

    return base64.b64encode(gzip.compress(get_plotlyjs().encode("utf-8"), 9, mtime=0)).decode("ascii")


def _imaging_section(result) -> str:
    from .imaging_figures import report_section

    return report_section(result, lambda fid, caption, fig: _figure_html(FigureSpec(fid, "imaging", caption, fig)))


def render_report(result, campaign=None) -> str:
    """The whole report as one HTML document (str). ``campaign`` may be None (no range profile)."""
    figs = build_figures(result, campaign)
    by_section: dict[str, list[FigureSpec]] = {}
    for spec in figs:
        by_section.setdefault(spec.section, []).append(spec)

    def section_figs(*names):
        return "".join(_figure_html(s) for n in names for s in by_section.get(n, []))

    s = result.settings
    title = f"RCS report: {result.campaign}"
    meta = " · ".join(x for x in (f"prototype {result.prototype}" if result.prototype else "",
                                   f"measured {result.date}" if result.date else "",
                                   f"cloakrcs {s.get('software_version')}") if x)
    warnings = ("<ul class=\"warnings\" id=\"warnings\">" + "".join(f"<li>{_esc(w)}</li>" for w in result.warnings)
                + "</ul>") if result.warnings else '<p id="warnings" class="note">No warnings.</p>'
    thr = s.get("threshold_db")
    sections = [
        ("summary", "Summary",
         check_alarm(result)
         + f'<p id="summary-scope"><strong>Band</strong> {_esc(_ghz_range(s.get("reporting_band_hz")))}; '
           f'<strong>sector</strong> {_esc(sector_text(s))}; bandwidth threshold {thr:g} dB.</p>'
         f'<p>Reduction = 10 log10(σ<sub>baseline</sub> / σ<sub>subject</sub>), positive = less scattering. '
         f'Floor-limited values are bounds (see Uncertainty); "≥" marks a bandwidth that reaches a band edge '
         f'(the true one may be wider). Mounting offset: subject minus baseline, from the angular patterns; '
         f'"none" when it is not reliable.</p>'
         + summary_table(result) + mismatch_note(result) + sector_statistics_table(result)
         + "<h3>Check targets</h3>" + checks_table(result)
         + "<h3>Noise floor</h3>" + floor_table(result) + "<h3>Warnings</h3>" + warnings),
        ("rcs", "RCS versus frequency", section_figs("rcs")),
        ("polar", "Polar patterns", section_figs("polar")),
        ("reduction", "Reduction", section_figs("map", "sector")),
        ("check", "Check target against theory",
         section_figs("check") or '<p class="note">No check target in this campaign.</p>'),
        ("range", "Range profile and gate", section_figs("range")),
        ("imaging", "Images and scattering centres", _imaging_section(result)),
        ("uncertainty", "Uncertainty", uncertainty_statement(result)),
        ("provenance", "Settings and provenance", provenance(result, campaign)),
        ("safety", "RF-exposure caution", RF_CAUTION),
    ]
    arm = getattr(result, "arm", None)
    arm_summary = arm.summary if arm is not None else s.get("bistatic")
    if arm_summary:  # receiver-arm targets: README, Bistatic and forward scattering
        from .bistatic_report import report_section

        sections.insert(-3, ("bistatic", "Bistatic and forward scattering", report_section(arm_summary, _figure_html)))
    nav = "".join(f'<li><a href="#{sid}">{_esc(h)}</a></li>' for sid, h, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{_esc(h)}</h2>{content}</section>' for sid, h, content in sections)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<meta name=\"generator\" content=\"cloakrcs {_esc(s.get('software_version'))}\">"
        f"<title>{_esc(title)}</title><style>{CSS}</style>\n"
        f"<script id=\"plotly-bundle\" type=\"application/gzip+base64\">{plotly_bundle_b64()}</script>\n"
        f"</head><body><main>"
        f"<header><h1>{_esc(title)}</h1><p class=\"meta\">{_esc(meta)}</p>"
        f"<nav><ol>{nav}</ol></nav></header>{body}"
        "<footer>Self-contained report: plotly.js is embedded (compressed) and each figure is drawn when it "
        "scrolls into view; the page loads nothing from any network address.</footer></main>"
        f"<script>{LOADER_JS % (json.dumps(PLOTLY_CONFIG), PRINT_WIDTH_PX)}</script></body></html>\n")


# --------------------------------------------------------------------------- files and static export

def find_chromium() -> str | None:
    """Path of a local Chromium: $BROWSER_PATH, /usr/bin/chromium, or one on PATH."""
    env = os.environ.get("BROWSER_PATH")
    if env and Path(env).exists():
        return env
    if Path("/usr/bin/chromium").exists():
        return "/usr/bin/chromium"
    for name in CHROMIUM_CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return None


def _chromium_or_fail(what: str) -> str:
    path = find_chromium()
    if path is None:
        raise InputError(f"{what} needs Chromium (install Debian's chromium package or set BROWSER_PATH)")
    return path


def export_png(specs: list[FigureSpec], out_dir, scale: float = 2.0) -> list[Path]:
    """Write each figure as OUT_DIR/<figure id>.png with kaleido (a local Chromium, offline)."""
    try:
        import kaleido  # noqa: F401
    except ImportError:
        raise InputError("--png needs kaleido: pip install 'cloakrcs[export]'") from None
    import plotly.io as pio

    os.environ.setdefault("BROWSER_PATH", _chromium_or_fail("--png"))
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the PNG folder: {exc.strerror or exc}", out) from None
    todo = [s for s in specs if s.figure is not None]
    paths = [out / f"{s.id}.png" for s in todo]
    if todo:
        pio.write_images([s.figure for s in todo], paths, format="png", width=1000, scale=scale)
    return paths


def export_pdf(html_path, pdf_path, timeout_s: float = 180.0) -> Path:
    """Print the report to one PDF with headless Chromium (local file, no network)."""
    chromium = _chromium_or_fail("--pdf")
    pdf = Path(pdf_path).resolve()
    with tempfile.TemporaryDirectory(prefix="cloakrcs-chromium-") as profile:
        cmd = [chromium, "--headless", "--disable-gpu", "--no-first-run", "--disable-extensions",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={profile}", f"--window-size={PRINT_WIDTH_PX + 40},1000",
               "--virtual-time-budget=30000", "--run-all-compositor-stages-before-draw",
               "--no-pdf-header-footer", f"--print-to-pdf={pdf}", Path(html_path).resolve().as_uri() + "#draw-all"]
        if hasattr(os, "geteuid") and os.geteuid() == 0:
            cmd.insert(1, "--no-sandbox")
        try:
            proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired:
            raise InputError(f"Chromium did not finish printing the PDF in {timeout_s:g} s", pdf) from None
    if proc.returncode != 0 or not pdf.exists() or pdf.stat().st_size == 0:
        tail = (proc.stderr or "").strip().splitlines()[-1:] or [""]
        raise InputError(f"Chromium could not print the PDF (status {proc.returncode}): {tail[0]}", pdf)
    return pdf


def _readable(path: Path) -> None:
    """Give a written report the usual permissions (the temporary file behind it was 0600)."""
    umask = os.umask(0)
    os.umask(umask)
    try:
        os.chmod(path, 0o666 & ~umask)
    except OSError:
        pass


def write_report(result, campaign, out_file, png_dir=None, pdf_file=None) -> dict[str, object]:
    """Write the HTML report (atomically), optionally PNG figures and a PDF; returns the paths."""
    from .outputs import atomic_write

    out = Path(out_file)
    if out.parent and not out.parent.exists():
        try:
            out.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"cannot create the report folder: {exc.strerror or exc}", out.parent) from None
    text = render_report(result, campaign)
    try:
        atomic_write(out, lambda fh: fh.write(text))
    except OSError as exc:
        raise InputError(f"cannot write the report: {exc.strerror or exc}", out) from None
    _readable(out)
    paths: dict[str, object] = {"report": out}
    if png_dir:
        paths["png"] = export_png(build_figures(result, campaign), png_dir)
    if pdf_file:
        paths["pdf"] = export_pdf(out, pdf_file)
    return paths
