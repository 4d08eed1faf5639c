"""Figures and the report section of the receiver-arm (bistatic) results, shared by report and dashboard.

Every function reads the JSON-ready bistatic summary (``ArmResult.summary``, also kept in a
stored run's settings under ``"bistatic"``) and redoes no physics.  Every title and caption
names the bistatic angles it shows.
"""

from __future__ import annotations

import html
import math

import numpy as np
import plotly.graph_objects as go

from .figures import PALETTE, _base_layout


def _esc(x) -> str:
    return html.escape(str(x))


def _angles_text(values) -> str:
    vals = sorted({float(v) for v in values})
    if len(vals) > 4:
        steps = np.diff(vals)
        if np.allclose(steps, steps[0]):
            return f"{vals[0]:g} to {vals[-1]:g} deg in {steps[0]:g} deg steps"
    return ", ".join(f"{v:g}" for v in vals) + " deg"


def polarizations(summary: dict) -> list[str]:
    return sorted({p["polarization"] for p in summary.get("patterns", [])}, key=["HH", "VV", "HV", "VH"].index)


def fig_bistatic_polar(summary: dict, pol: str) -> go.Figure:
    """Band-averaged bistatic RCS (dBsm) against bistatic angle, every arm subject (bare vs cloaked), polar."""
    fig = go.Figure()
    pats = [p for p in summary.get("patterns", []) if p["polarization"] == pol]
    for i, p in enumerate(pats):
        fig.add_trace(go.Scatterpolar(r=p["band_rcs_dbsm"], theta=p["bistatic_deg"], mode="lines+markers",
                                      name=p["target"], line={"color": PALETTE[i % len(PALETTE)]}))
    betas = [b for p in pats for b in p["bistatic_deg"]]
    lo, hi = summary["reporting_band_hz"]
    _base_layout(fig, f"Bistatic RCS, {pol}, band {lo / 1e9:.3g}-{hi / 1e9:.3g} GHz, bistatic "
                      f"{_angles_text(betas) if betas else '-'}", height=460)
    fig.update_layout(polar={"angularaxis": {"direction": "counterclockwise", "rotation": 0},
                             "sector": [0, 180], "radialaxis": {"title": {"text": "dBsm"}}})
    return fig


def fig_reduction_vs_bistatic(summary: dict, pol: str) -> go.Figure:
    """Band-averaged reduction (dB) against bistatic angle, every subject with a baseline."""
    fig = go.Figure()
    rows = [r for r in summary.get("reduction_vs_bistatic", []) if r["polarization"] == pol]
    for i, r in enumerate(rows):
        fig.add_trace(go.Scatter(x=r["bistatic_deg"], y=r["reduction_db"], mode="lines+markers",
                                 name=f"{r['subject']} vs {r['baseline']}", line={"color": PALETTE[(i + 1) % len(PALETTE)]}))
    fig.add_hline(y=0.0, line={"color": "#9a4b16", "dash": "dot"})
    betas = [b for r in rows for b in r["bistatic_deg"]]
    _base_layout(fig, f"Reduction against bistatic angle, {pol} (bistatic {_angles_text(betas) if betas else '-'}); "
                      f"below 0 dB the cloaked object scatters more")
    fig.update_xaxes(title_text="bistatic angle (deg)")
    fig.update_yaxes(title_text="reduction (dB)")
    return fig


def fig_extinction(summary: dict, pol: str) -> go.Figure:
    """Extinction cross-section (m^2) against frequency at bistatic 180 deg, with +/- 2 u per frequency."""
    fig = go.Figure()
    rows = [e for e in summary.get("extinction", []) if e["polarization"] == pol]
    for i, e in enumerate(rows):
        f = np.asarray(e["frequency_hz"]) / 1e9
        y = np.asarray(e["extinction_m2"])
        u = 2 * np.asarray(e["u_extinction_m2"])
        color = PALETTE[i % len(PALETTE)]
        fig.add_trace(go.Scatter(x=np.concatenate([f, f[::-1]]), y=np.concatenate([y + u, (y - u)[::-1]]),
                                 fill="toself", line={"width": 0}, fillcolor="rgba(31,122,140,0.12)",
                                 hoverinfo="skip", showlegend=False))
        fig.add_trace(go.Scatter(x=f, y=y, mode="lines", name=e["target"], line={"color": color}))
    _base_layout(fig, f"Extinction cross-section from the optical theorem, {pol}, bistatic 180 deg (forward); "
                      f"shaded: +/- 2 u per frequency")
    fig.update_xaxes(title_text="frequency (GHz)")
    fig.update_yaxes(title_text="extinction (m²)")
    return fig


def _table(table_id: str, head: list[str], rows: list[list[str]]) -> str:
    th = "".join(f"<th>{_esc(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f'<div class="scroll"><table class="data" id="{table_id}"><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table></div>'


def _n(x, digits=2) -> str:
    return "-" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.{digits}f}"


def budget_table(table_id: str, b: dict) -> str:
    rows = [[_esc(c["component"]), _esc(c["type"]), f"{c['u_db']:.4f}", str(c["samples"]), _esc(c["note"])]
            for c in b["components"]]
    rows.append(["<b>combined standard uncertainty</b>", "", f"{b['combined']:.4f}", "", ""])
    rows.append([f"<b>expanded (k = {b['coverage_k']:g})</b>", "", f"{b['expanded']:.4f}", "", ""])
    return _table(table_id, ["component", "type", "u (dB)", "samples", "note"], rows)


def report_section(summary: dict, figure_html) -> str:
    """HTML of the report's "Bistatic and forward scattering" section; ``figure_html(FigureSpec)`` renders a figure."""
    from .report import FigureSpec

    lo, hi = summary["reporting_band_hz"]
    parts = [f'<p>Receiver-arm sweeps, processed apart from the monostatic chain (whose results above are at '
             f'bistatic {summary["monostatic_bistatic_deg"]:g} deg). Band {lo / 1e9:.4g}-{hi / 1e9:.4g} GHz. '
             f'Bistatic angle: between the transmit and receive directions seen from the target, 0 = monostatic, '
             f'180 = forward. Each bistatic angle is calibrated on the arm sphere with its Mie series; at 180 deg the '
             f'empty-chamber sweep is subtracted coherently (the direct path arrives with the forward-scattered '
             f'field) and the extinction follows from the optical theorem, {_esc(summary["conventions"]["extinction"])}.</p>']
    targets = summary.get("targets", [])
    parts.append(_table("bistatic-targets", ["target", "role", "bistatic angles", "turntable angles", "repeats"],
                        [[_esc(t["name"]), _esc(t["role"]), _esc(_angles_text(t["bistatic_deg"])),
                          _esc(_angles_text(t["angles_deg"])), str(t["repeats"])] for t in targets]))
    rows = []
    for r in summary.get("reduction_vs_bistatic", []):
        rows.append([_esc(r["subject"]), _esc(r["baseline"]), _esc(r["polarization"]),
                     ", ".join(f"{b:g}: {v:.1f}" for b, v in zip(r["bistatic_deg"], r["reduction_db"]))])
    parts.append("<h3>Reduction against bistatic angle</h3>" + (_table(
        "bistatic-reduction", ["subject", "baseline", "pol", "bistatic deg: reduction dB (band average)"], rows)
        if rows else '<p class="note">No arm subject with a baseline.</p>'))
    arc = summary.get("arc_reduction", [])
    if arc:
        parts.append("<h3>Reduction of the arc-integrated bistatic RCS</h3><p>"
                     + _esc(summary["conventions"]["arc_integrated"]) + ".</p>" + _table(
                         "bistatic-arc", ["subject", "baseline", "pol", "arc (deg)", "baseline (m²)", "subject (m²)",
                                          "reduction (dB)"],
                         [[_esc(a["subject"]), _esc(a["baseline"]), _esc(a["polarization"]),
                           f"{a['arc_deg'][0]:g} to {a['arc_deg'][1]:g} ({a['bistatic_samples']} angles)",
                           f"{a['arc_integrated_baseline_m2']:.4g}", f"{a['arc_integrated_subject_m2']:.4g}",
                           _n(a["reduction_db"])] for a in arc]))
    ext = summary.get("extinction", [])
    if ext:
        parts.append("<h3>Extinction (bistatic 180 deg)</h3>" + _table(
            "bistatic-extinction", ["target", "pol", "band mean (m²)", "band mean (dBsm)", "U (dB, k = 2)"],
            [[_esc(e["target"]), _esc(e["polarization"]), f"{e['band_mean_m2']:.4g}", _n(e["band_mean_dbsm"]),
              f"{e['budget']['expanded']:.3f}"] for e in ext]))
    for i, r in enumerate(summary.get("extinction_reduction", [])):
        parts.append(f"<h3>Extinction reduction {_esc(r['subject'])} vs {_esc(r['baseline'])}, "
                     f"{_esc(r['polarization'])}: {_n(r['reduction_db'])} ± {r['budget']['expanded']:.3f} dB "
                     f"(k = {r['budget']['coverage_k']:g})</h3><p>{_esc(r['definition'])}.</p>"
                     + budget_table(f"bistatic-budget-{i}", r["budget"]))
    checks = summary.get("checks", [])
    if checks:
        parts.append("<h3>Arm check targets against the Mie series</h3>" + _table(
            "bistatic-checks", ["target", "pol", "largest error (dB)", "per bistatic angle (deg: dB)",
                                "extinction error (dB)", "result"],
            [[_esc(c["target"]), _esc(c["polarization"]), _n(c["max_error_db"]),
              ", ".join(f"{b:g}: {v:.2f}" for b, v in zip(c["bistatic_deg"], c["max_error_db_per_bistatic"])),
              _n(c.get("extinction_error_db"), 3), "pass" if c["passed"] else "FAIL"] for c in checks]))
    for pol in polarizations(summary):
        specs = [FigureSpec(f"fig-bistatic-polar-{pol}", "bistatic",
                            f"Band-averaged bistatic RCS of every arm subject, {pol}.", fig_bistatic_polar(summary, pol)),
                 FigureSpec(f"fig-bistatic-reduction-{pol}", "bistatic",
                            f"Reduction against bistatic angle, {pol}.", fig_reduction_vs_bistatic(summary, pol))]
        if any(e["polarization"] == pol for e in ext):
            specs.append(FigureSpec(f"fig-extinction-{pol}", "bistatic",
                                    f"Extinction against frequency, {pol}, bistatic 180 deg.", fig_extinction(summary, pol)))
        parts += [figure_html(s) for s in specs]
    return "".join(parts)
