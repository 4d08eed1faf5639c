"""Plotly figures and HTML tables of images and scattering centres (shared by `cloakrcs image`,
the report and the dashboard). Pure presentation: the images come from cloakrcs.imaging."""

from __future__ import annotations

import html as _html

import numpy as np
import plotly.graph_objects as go

from . import imaging
from .errors import InputError
from .figures import _base_layout

MAX_PIXELS = 220  # per axis in a figure (images are decimated by striding beyond this)


def _stride(n: int) -> int:
    return max(1, int(np.ceil(n / MAX_PIXELS)))


def resolution_text(img: imaging.TargetImage) -> str:
    return (f"resolution (-3 dB) {100 * img.down_range_resolution_m:.1f} cm down-range x "
            f"{100 * img.cross_range_resolution_m:.1f} cm cross-range")


def image_caption(img: imaging.TargetImage) -> str:
    lo, hi = img.sector_deg
    floor = "" if img.floor_dbsm is None else f"; image floor {img.floor_dbsm:.1f} dBsm"
    return (f"{img.target} {img.polarization}: {img.method.replace('backprojection', 'back-projection')} image, "
            f"sector {lo:g} to {hi:g} deg ({img.angles_deg.size} angles, centre {img.center_angle_deg:g} deg), "
            f"{img.frequency_hz[0] / 1e9:.3f}-{img.frequency_hz[-1] / 1e9:.3f} GHz, {img.settings.window_text()}; "
            f"{resolution_text(img)}{floor}. Antenna towards negative down-range (bottom); cross-range positive on "
            f"the side that moves towards the antenna as the turntable angle increases.")


def _heatmap(fig, img, z, zmin, zmax, colorscale, title, zmid=None):
    sx, sy = _stride(img.x_m.size), _stride(img.y_m.size)
    fig.add_trace(go.Heatmap(
        x=img.y_m[::sy], y=img.x_m[::sx], z=np.where(np.isfinite(z), z, np.nan)[::sx, ::sy], zmin=zmin, zmax=zmax,
        zmid=zmid, colorscale=colorscale, colorbar={"title": {"text": title, "side": "right"}},
        hovertemplate="cross-range %{x:.3f} m<br>down-range %{y:.3f} m<br>%{z:.1f}<extra></extra>"))


def _axes(fig, img):
    fig.update_xaxes(title_text="cross-range (m)", range=[img.y_m[0], img.y_m[-1]], constrain="domain")
    fig.update_yaxes(title_text="down-range (m), antenna below", range=[img.x_m[0], img.x_m[-1]],
                     scaleanchor="x", scaleratio=1, constrain="domain")


def _mark_centres(fig, centres):
    if not centres:
        return
    for limited, name, symbol in ((False, "scattering centre", "circle-open"),
                                  (True, "floor-limited centre", "x-thin-open")):
        sel = [c for c in centres if bool(c.get("floor_limited")) == limited]
        if not sel:
            continue
        fig.add_trace(go.Scatter(
            x=[c["cross_range_m"] for c in sel], y=[c["down_range_m"] for c in sel], mode="markers+text",
            text=[str(c.get("rank", "")) for c in sel], textposition="top right", name=name,
            marker={"symbol": symbol, "size": 12, "color": "#ffffff", "line": {"width": 2, "color": "#ffffff"}},
            textfont={"color": "#ffffff", "size": 11},
            customdata=[[c["rcs_dbsm"]] for c in sel],
            hovertemplate="centre: %{y:.3f} m down, %{x:.3f} m cross<br>%{customdata[0]:.1f} dBsm<extra></extra>"))


def fig_image(img: imaging.TargetImage, dynamic_db: float = 40.0, centres=None, height: int = 520) -> go.Figure:
    """The calibrated image in dBsm over [peak - dynamic_db, peak], centres marked."""
    z = img.rcs_dbsm
    top = float(np.nanmax(z[np.isfinite(z)])) if np.isfinite(z).any() else 0.0
    fig = go.Figure()
    _heatmap(fig, img, z, top - float(dynamic_db), top, "Viridis", "dBsm")
    _mark_centres(fig, centres)
    _base_layout(fig, f"Image of {img.target}, {img.polarization} ({resolution_text(img)})", height)
    _axes(fig, img)
    return fig


def fig_difference(img: imaging.TargetImage, base: imaging.TargetImage, dynamic_db: float = 40.0,
                   height: int = 520) -> tuple[go.Figure, go.Figure]:
    """(|J_subject - J_baseline|^2 in dBsm, per-pixel change 10 log10(sigma_s / sigma_b) in dB)."""
    d = imaging.difference(img, base)
    with np.errstate(divide="ignore"):
        z = 10 * np.log10(np.abs(d["difference"]) ** 2)
    top = max(float(np.nanmax(img.rcs_dbsm)), float(np.nanmax(base.rcs_dbsm)))
    f1 = go.Figure()
    _heatmap(f1, img, z, top - float(dynamic_db), top, "Viridis", "dBsm")
    _base_layout(f1, f"Difference {img.target} - {base.target}, {img.polarization} (complex, calibrated)", height)
    _axes(f1, img)
    ch = d["change_db"]
    lim = float(np.nanmax(np.abs(ch))) if np.isfinite(ch).any() else 10.0
    lim = min(max(lim, 3.0), 40.0)
    f2 = go.Figure()
    _heatmap(f2, img, ch, -lim, lim, "RdBu_r", "dB", zmid=0.0)
    _base_layout(f2, f"Change 10 log10(σ_{img.target} / σ_{base.target}) where both clear the floor by "
                     f"{img.settings.floor_margin_db:g} dB (blue: removed)", height)
    _axes(f2, img)
    return f1, f2


def _esc(x) -> str:
    return _html.escape(str(x))


def centres_table_html(rows: list[dict], table_id: str = "") -> str:
    head = ["target", "revision", "pol.", "rank", "down-range (m)", "cross-range (m)", "RCS (dBsm)", "floor-limited"]
    body = "".join(
        f"<tr><td>{_esc(r['target'])}</td><td>{_esc(r.get('revision', ''))}</td><td>{_esc(r['polarization'])}</td>"
        f"<td class=\"num\">{r.get('rank', '')}</td><td class=\"num\">{r['down_range_m']:+.3f}</td>"
        f"<td class=\"num\">{r['cross_range_m']:+.3f}</td><td class=\"num\">{r['rcs_dbsm']:.1f}</td>"
        f"<td>{'yes' if r.get('floor_limited') else 'no'}</td></tr>" for r in rows)
    tid = f' id="{_esc(table_id)}"' if table_id else ""
    return (f'<div class="scroll"><table class="data"{tid}><thead><tr>'
            + "".join(f"<th>{h}</th>" for h in head) + f"</tr></thead><tbody>{body}</tbody></table></div>")


def track_rows(tracks: list[dict], revisions: list[str]) -> list[list[str]]:
    """Rows of the tracked-centre table: track, position, then one cell per revision ('-': not found)."""
    rows = []
    for t in tracks:
        cells = [str(t["track"]), f"{t['down_range_m']:+.3f}", f"{t['cross_range_m']:+.3f}"]
        for r in revisions:
            v = t["values"].get(r)
            cells.append("-" if v is None else f"{v['rcs_dbsm']:.1f}" + (" (floor)" if v["floor_limited"] else ""))
        rows.append(cells)
    return rows


def tracks_table_html(tracks: list[dict], revisions: list[str], table_id: str = "") -> str:
    head = ["track", "down-range (m)", "cross-range (m)"] + [f"{r} (dBsm)" for r in revisions]
    body = "".join("<tr>" + "".join(f"<td class=\"num\">{_esc(c)}</td>" for c in row) + "</tr>"
                   for row in track_rows(tracks, revisions))
    tid = f' id="{_esc(table_id)}"' if table_id else ""
    return (f'<div class="scroll"><table class="data"{tid}><thead><tr>' + "".join(f"<th>{_esc(h)}</th>" for h in head)
            + f"</tr></thead><tbody>{body}</tbody></table></div>")


def report_images(result, pol: str | None = None):
    """(images {target: TargetImage}, pol) for the report: every imageable subject, one polarization
    (VV if measured), over the sector and band its stored centres used; the baselines' grid shared."""
    subjects = [n for n, t in result.targets.items() if t.role == "subject" and imaging.imageable(
        result, n, tuple(result.settings["sector_deg"]) if result.settings.get("sector_deg") else None)]
    if not subjects:
        return {}, None
    pols = [str(p) for p in result.targets[subjects[0]].amplitude.polarization.values]
    pol = pol or ("VV" if "VV" in pols else pols[0])
    sector = tuple(result.settings["sector_deg"]) if result.settings.get("sector_deg") else None
    f = result.frequency_hz[result.band_mask]
    band = (float(f[0]), float(f[-1]))
    images, extent = {}, None
    for name in subjects:
        if pol not in [str(p) for p in result.targets[name].amplitude.polarization.values]:
            continue
        img = imaging.image_of_result(result, name, pol, sector, band, extent_m=extent)
        extent = img.settings.extent_m
        images[name] = img
    return images, pol


def report_section(result, figure_html) -> str:
    """The report's imaging section: each subject's image (one polarization), the difference
    images of each revision against its baseline, the stored centres and the tracked centres.

    ``figure_html(id, caption, figure)`` renders one figure as the report does.
    """
    images, pol = report_images(result)
    if not images:
        return ('<p class="note">No subject was measured at enough angles in the sector to image '
                f'(at least {imaging.MIN_ANGLES}).</p>')
    first = next(iter(images.values()))
    parts = [f"<p>Calibrated ISAR images (README, Imaging): {_esc(first.settings.window_text())}; "
             f"{_esc(resolution_text(first))}; sector {first.sector_deg[0]:g} to {first.sector_deg[1]:g} deg, "
             f"{first.frequency_hz[0] / 1e9:.3f}-{first.frequency_hz[-1] / 1e9:.3f} GHz. Down-range is positive "
             "away from the antenna, cross-range positive on the side that moves towards the antenna as the "
             "turntable angle increases; the peak pixel of an isolated point equals its RCS. Centres by CLEAN "
             "(Hogbom 1974), stopped at the image floor plus 3 dB; crossed markers are floor-limited.</p>"]
    for name, img in images.items():
        cs = [c for c in result.centres if c["target"] == name and c["polarization"] == pol]
        parts.append(figure_html(f"fig-image-{name}-{pol}", image_caption(img), fig_image(img, 40.0, cs)))
        base = result.targets[name].baseline
        if base in images:
            try:
                fd, fc = fig_difference(img, images[base])
            except InputError:  # grids differ (other angles): the images are shown without a difference
                continue
            parts.append(figure_html(f"fig-image-diff-{name}-{pol}",
                                     f"Complex difference {name} - {base}, {pol}: what the cloak changed.", fd))
            parts.append(figure_html(f"fig-image-change-{name}-{pol}",
                                     f"Per-pixel change 10 log10(σ_{name} / σ_{base}), {pol}, where both images "
                                     f"clear their floors by the floor margin; blue: scattering removed.", fc))
    parts.append("<h3>Scattering centres</h3>" + centres_table_html(result.centres, "centres-table"))
    for p in dict.fromkeys(c["polarization"] for c in result.centres):
        tracks, revisions = imaging.tracked_centres_of_result(result, p)
        if tracks:
            parts.append(f"<h3>Centres tracked across revisions, {_esc(p)}</h3>"
                         + tracks_table_html(tracks, revisions, f"tracks-{p}")
                         + "<ul>" + "".join(f"<li>{_esc(s)}</li>" for s in imaging.describe_tracks(tracks, revisions))
                         + "</ul>")
    return "".join(parts)
