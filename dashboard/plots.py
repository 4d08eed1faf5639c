"""Dashboard-only figures and overlays; the shared builders live in cloakrcs.figures.

Everything here reads processing results (no physics). Traces are decimated with
cloakrcs.figures.decimate; maps keep at most cloakrcs.figures.MAX_MAP cells.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
import plotly.io as pio

from .. import figures as F

PALETTE = F.PALETTE
CAUTION_COLOR = "#9a3412"
# the layout part of plotly's simple_white template only: assigning it costs a third of the full one
_TEMPLATE = go.layout.Template(layout=pio.templates["simple_white"].layout)


def _layout(fig: go.Figure, title: str, height: int = 420) -> go.Figure:
    """The look of cloakrcs.figures (same fonts, grid and legend), with the lighter template."""
    fig.update_layout(
        template=_TEMPLATE, title={"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        font={"family": F.FONT, "size": 12, "color": "#1d2733"}, height=height,
        margin={"l": 64, "r": 24, "t": 56, "b": 52}, hovermode="closest", uirevision=title.split(",")[0],
        legend={"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right", "x": 1.0, "font": {"size": 11}})
    fig.update_xaxes(showgrid=True, gridcolor="#e6e9ee", zeroline=False)
    fig.update_yaxes(showgrid=True, gridcolor="#e6e9ee", zeroline=False)
    return fig


def message_figure(text: str) -> go.Figure:
    fig = go.Figure()
    fig.add_annotation(text=text, showarrow=False, x=0.5, y=0.5, xref="paper", yref="paper", font={"size": 14})
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return _layout(fig, "", height=260)


def db10(x) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 10 * np.log10(np.maximum(np.asarray(x, dtype=float), 1e-30))


def nearest(values, wanted: float) -> int:
    return int(np.argmin(np.abs(np.asarray(values, dtype=float) - float(wanted))))


def add_bound_overlay(fig: go.Figure, result, subject: str, pol: str) -> go.Figure:
    """Grey, half-transparent cells over a reduction map where the value is only a bound (floor-limited)."""
    ds = result.reductions.get((subject, pol))
    if ds is None:
        return fig
    angles = ds.angle.values
    order = np.argsort(F._wrap(angles))
    ia = order[F.stride_indices(order.size, F.MAX_MAP[0])]
    jf = F.stride_indices(ds.frequency.size, F.MAX_MAP[1])
    bound = ds["bound"].values[np.ix_(ia, jf)].astype(str)
    if (bound == "none").all():
        return fig
    z = np.where(bound == "none", np.nan, 1.0)
    fig.add_trace(go.Heatmap(x=F._ghz(ds.frequency.values[jf]), y=F._wrap(angles[ia]), z=z, customdata=bound,
                             colorscale=[[0, "#4b5563"], [1, "#4b5563"]], showscale=False, opacity=0.55,
                             name="floor-limited", hovertemplate="%{customdata} bound (floor-limited)<extra></extra>"))
    fig.add_annotation(text="grey cells: floor-limited, the reduction there is only a bound", showarrow=False,
                       x=0, y=1.045, xref="paper", yref="paper", xanchor="left", font={"size": 11})
    return fig


def add_band_average(fig: go.Figure, row: dict) -> go.Figure:
    """The band-averaged reduction and its expanded uncertainty as a line and a band on a sector curve."""
    band, u = row["band_reduction_db"], row["band_reduction_uncertainty_db"]
    bound = "" if row["bound"] == "none" else f", {row['bound']} bound"
    fig.add_shape(type="rect", xref="paper", x0=0, x1=1, y0=band - u, y1=band + u, fillcolor=PALETTE[4],
                  opacity=0.12, line_width=0, layer="below")
    fig.add_shape(type="line", xref="paper", x0=0, x1=1, y0=band, y1=band, line={"color": PALETTE[4], "width": 1})
    fig.add_annotation(xref="paper", x=0.01, y=band + u, yanchor="bottom", xanchor="left", showarrow=False,
                       text=f"band average {band:.2f} ± {u:.2f} dB (k = 2){bound}", font={"color": PALETTE[4]})
    return fig


def fig_preview(result_now, result_new, target: str, pol: str, angle_deg: float) -> go.Figure:
    """RCS at one angle: the stored run against the re-gated preview."""
    fig = go.Figure()
    for res, label, color in ((result_now, "stored run", "#9aa5b1"), (result_new, "new settings", PALETTE[1])):
        t = res.targets.get(target)
        if t is None or pol not in t.amplitude.polarization.values:
            continue
        valid = res.valid_mask
        k = nearest(t.amplitude.angle.values, angle_deg)
        x, y = F.decimate(F._ghz(res.frequency_hz[valid]), db10(t.sigma.sel(polarization=pol).values[k, valid]))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=label, line={"color": color, "width": 1.8}))
    fig.update_xaxes(title_text="frequency (GHz)")
    fig.update_yaxes(title_text="RCS (dBsm)")
    return _layout(fig, f"Effect of the new settings: {target} {pol} at {angle_deg:g}°", height=360)


def fig_floor(result, pol: str) -> go.Figure:
    """Median RCS over angle and the measurement floor (dBsm) of each subject over the valid band."""
    valid = result.valid_mask
    f = F._ghz(result.frequency_hz[valid])
    fig = go.Figure()
    subjects = [(n, t) for n, t in result.targets.items() if t.role == "subject"]
    for i, (name, t) in enumerate(subjects):
        if pol not in t.amplitude.polarization.values:
            continue
        c = PALETTE[i % len(PALETTE)]
        med = np.median(t.sigma.sel(polarization=pol).values[:, valid], axis=0)
        x, y = F.decimate(f, db10(med))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{name}", line={"color": c, "width": 1.6}))
        x, y = F.decimate(f, db10(t.floor.sel(polarization=pol).values[valid]))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{name} floor",
                                 line={"color": c, "dash": "dot", "width": 1}))
    if not fig.data:
        return message_figure(f"No subject measured in {pol}.")
    fig.update_xaxes(title_text="frequency (GHz)")
    fig.update_yaxes(title_text="dBsm")
    return _layout(fig, f"Median RCS over angle (solid) and floor (dotted), {pol}", height=380)


def fig_coverage(result) -> go.Figure:
    """Which angles were measured, per target and polarization (one trace)."""
    xs, ys, cs = [], [], []
    for i, (name, t) in enumerate(result.targets.items()):
        ang = F._wrap(np.asarray(t.amplitude.angle.values, dtype=float))
        ang = ang[F.stride_indices(ang.size, 720)]
        for pol in t.amplitude.polarization.values:
            xs.append(ang)
            ys += [f"{name} {pol}"] * ang.size
            cs += [PALETTE[i % len(PALETTE)]] * ang.size
    fig = go.Figure(go.Scatter(x=np.concatenate(xs), y=ys, mode="markers", showlegend=False,
                               marker={"size": 9, "color": cs, "symbol": "line-ns-open", "line": {"width": 1.5}},
                               hovertemplate="%{y}: %{x:g}°<extra></extra>"))
    fig.update_xaxes(title_text="angle (deg)", range=[-182, 182], dtick=30)
    fig.update_yaxes(autorange="reversed")
    return _layout(fig, "Angles measured per target and polarization", height=140 + 22 * len(xs))


BOUND_SYMBOLS = {"none": "circle", "lower": "triangle-up", "upper": "triangle-down", "undetermined": "x-thin-open"}
BOUND_NAMES = {"none": "measured", "lower": "lower bound (at least)", "upper": "upper bound (at most)",
               "undetermined": "undetermined"}
GROUP_DASHES = ("solid", "dash", "dot", "dashdot")


def trend_groups(rows: list[dict]) -> list[tuple[str, str, list[dict]]]:
    """Rows grouped by identical processing settings: (key, label, rows), the group of the newest run first."""
    groups: dict[str, list[dict]] = {}
    for r in rows:
        groups.setdefault(r.get("settings_key") or "-", []).append(r)
    ordered = sorted(groups.items(), key=lambda kv: -max(r["run_id"] for r in kv[1]))
    return [(k, v[0].get("settings_label") or "settings of the run", v) for k, v in ordered]


def fig_trend(rows: list[dict], metric: str, label: str) -> go.Figure:
    """A metric across revisions: one line per settings group and polarization, the current run of each revision.

    Runs processed with different band, sector, gates or thresholds are never joined by a line:
    each settings group has its own dash and is listed under the plot. Band reductions carry
    their expanded uncertainty as error bars; bounds have their own markers (triangle up: at
    least, down: at most, cross: undetermined).
    """
    if not rows:
        return message_figure("No revisions recorded for this prototype yet.")
    order = list(dict.fromkeys(r["revision"] for r in rows))  # rows come in revision order
    fig = go.Figure()
    groups = trend_groups(rows)
    notes = []
    for g, (key, glabel, grows) in enumerate(groups):
        notes.append(f"{GROUP_DASHES[g % len(GROUP_DASHES)]}: {glabel}")
        for i, pol in enumerate(sorted({r["polarization"] for r in grows})):
            latest: dict[str, dict] = {}
            for r in grows:
                if r["polarization"] != pol:
                    continue
                prev = latest.get(r["revision"])
                rank = (bool(r.get("current", True)), r["run_id"])
                if prev is None or rank > (bool(prev.get("current", True)), prev["run_id"]):
                    latest[r["revision"]] = r
            xs = [rev for rev in order if rev in latest]
            ys = [latest[x].get(metric) for x in xs]
            bounds = [latest[x].get("bound") or "none" for x in xs]
            if metric == "bandwidth_hz":
                ys = [None if y is None else y / 1e6 for y in ys]
            if metric == "band_reduction_db":
                ys = [None if b == "undetermined" else y for y, b in zip(ys, bounds)]
            err = None
            if metric == "band_reduction_db":
                err = {"type": "data", "visible": True, "thickness": 1.5, "width": 6,
                       "array": [latest[x].get("band_reduction_uncertainty_db") or 0 for x in xs]}
            color = PALETTE[(i + 1) % len(PALETTE)]
            fig.add_trace(go.Scatter(
                x=xs, y=ys, error_y=err, mode="lines+markers", name=f"{pol}" + (f" · {key}" if len(groups) > 1 else ""),
                customdata=[[BOUND_NAMES.get(b, b), latest[x]["run_id"]] for x, b in zip(xs, bounds)],
                hovertemplate="%{x}: %{y:.2f}<br>%{customdata[0]}, run %{customdata[1]}<extra>%{fullData.name}</extra>",
                line={"color": color, "width": 2, "dash": GROUP_DASHES[g % len(GROUP_DASHES)]},
                marker={"size": 10, "symbol": [BOUND_SYMBOLS.get(b, "circle") for b in bounds]}))
    used = {b for r in rows for b in [r.get("bound") or "none"]}
    for b in ("lower", "upper", "undetermined"):
        if b in used:  # legend entries for the bound markers
            fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name=BOUND_NAMES[b],
                                     marker={"size": 10, "symbol": BOUND_SYMBOLS[b], "color": "#5b6775"}))
    fig.update_xaxes(title_text="revision", type="category")
    fig.update_yaxes(title_text=label)
    fig.add_annotation(text="<br>".join(["settings plotted (lines never join different settings):"] + notes),
                       showarrow=False, x=0, y=-0.22, xref="paper", yref="paper", xanchor="left", yanchor="top",
                       align="left", font={"size": 11})
    _layout(fig, f"{label} across revisions (current run of each)", height=440 + 16 * len(notes))
    return fig.update_layout(margin={"b": 110 + 16 * len(notes)})


def fig_safety(p_dbm: float, gain_dbi: float, reference_w_m2: float, distance_m: float,
               far_field_m: float | None = None) -> go.Figure:
    """Far-field power density versus distance (log-log), the reference level, the chosen distance and,
    when given, the far-field distance 2 D^2 / lambda (the curve is dotted inside it, where it does not hold)."""
    from ..safety import power_density_curve

    r = np.logspace(-1, 2, 200)
    fig = go.Figure(go.Scatter(x=r, y=power_density_curve(p_dbm, gain_dbi, r), mode="lines",
                               name="S = P G / (4 π r²)", line={"color": PALETTE[1], "width": 2}))
    # traces, not shapes: shape coordinates on log axes would need log10 values
    fig.add_trace(go.Scatter(x=[r[0], r[-1]], y=[reference_w_m2] * 2, mode="lines",
                             name=f"reference level {reference_w_m2:.3g} W/m²",
                             line={"color": CAUTION_COLOR, "dash": "dash", "width": 2}))
    s_at = float(power_density_curve(p_dbm, gain_dbi, [distance_m])[0])
    fig.add_trace(go.Scatter(x=[distance_m], y=[s_at], mode="markers", name=f"{s_at:.3g} W/m² at {distance_m:g} m",
                             marker={"color": PALETTE[2], "size": 11}))
    if far_field_m is not None and np.isfinite(far_field_m):
        inside = r < far_field_m
        fig.data[0].update(x=r[~inside], y=power_density_curve(p_dbm, gain_dbi, r[~inside]))
        fig.add_trace(go.Scatter(x=r[inside], y=power_density_curve(p_dbm, gain_dbi, r[inside]), mode="lines",
                                 name="near field: formula does not hold",
                                 line={"color": PALETTE[1], "width": 2, "dash": "dot"}))
        s_all = power_density_curve(p_dbm, gain_dbi, r)
        fig.add_trace(go.Scatter(x=[far_field_m] * 2, y=[float(s_all.min()), float(s_all.max())], mode="lines",
                                 name=f"far-field distance 2 D²/λ = {far_field_m:.3g} m",
                                 line={"color": CAUTION_COLOR, "dash": "dot", "width": 1}))
    fig.update_xaxes(title_text="distance from the antenna (m)", type="log")
    fig.update_yaxes(title_text="power density (W/m²)", type="log", exponentformat="power")
    return _layout(fig, "Indicative far-field power density (not valid in the near field)", height=380)


def fig_rcs_map(result, target: str, pol: str) -> go.Figure:
    """Frequency x angle map of RCS (dBsm) over the valid band, at most MAX_MAP cells (block means of sigma)."""
    t = result.targets[target]
    valid = result.valid_mask
    f = F._ghz(result.frequency_hz[valid])
    ang = F._wrap(np.asarray(t.amplitude.angle.values, dtype=float))
    order = np.argsort(ang)
    sig = t.sigma.sel(polarization=pol).values[order][:, valid]
    fr, fc = (max(1, int(np.ceil(n / m))) for n, m in zip(sig.shape, F.MAX_MAP))
    nr, nc = sig.shape[0] // fr, sig.shape[1] // fc
    block = sig[: nr * fr, : nc * fc].reshape(nr, fr, nc, fc).mean(axis=(1, 3))
    z = db10(block)
    fig = go.Figure(go.Heatmap(x=f[fc // 2: nc * fc: fc], y=ang[order][fr // 2: nr * fr: fr], z=z,
                               colorscale="Viridis", zmin=float(np.percentile(z, 1)), zmax=float(z.max()),
                               colorbar={"title": {"text": "dBsm", "side": "right"}, "thickness": 14},
                               hovertemplate="%{x:.3f} GHz, %{y:.1f}°<br>%{z:.2f} dBsm<extra></extra>"))
    fig.update_xaxes(title_text="frequency (GHz)", showgrid=False, automargin=True)
    fig.update_yaxes(title_text="angle (deg)", showgrid=False, automargin=True)
    _layout(fig, f"RCS map of {target}, {pol}", height=460)
    return fig.update_layout(margin={"b": 64})
